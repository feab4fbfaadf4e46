package wire

import (
	"bytes"
	"crypto/ed25519"
	"encoding/hex"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/firmware-host/journal"
	"kermalux/procedures/entry"
)

var update = flag.Bool("update", false, "rewrite the golden files")

// seedSigner signs with a key from a fixed seed (RFC 8032 section 7.1,
// test 1's secret key), so the golden stream is reproducible.
type seedSigner struct{ priv ed25519.PrivateKey }

func newSeedSigner() seedSigner {
	seed, _ := hex.DecodeString("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
	return seedSigner{ed25519.NewKeyFromSeed(seed)}
}

func (s seedSigner) PublicKey() ed25519.PublicKey { return s.priv.Public().(ed25519.PublicKey) }
func (s seedSigner) Sign(m []byte) []byte         { return ed25519.Sign(s.priv, m) }

// chain returns n invented records of one session, hashed and chained the
// journal's way.
func chain(session string, n int) []journal.Record {
	prev := journal.ZeroHash()
	var out []journal.Record
	for i := 1; i <= n; i++ {
		kind, payload := entry.KindReading, fmt.Sprintf(`{"meter":"dosimeter","raw":"RD %d.%03dE-01 uGy/s OK","value":0.%d}`, 8, 700+i, 880+i)
		if i == 1 {
			kind, payload = entry.KindSession, `{"site":"Tollemby Rise Clinic","intensifier_serial":"LX23-0100"}`
		}
		r := journal.Record{Seq: int64(i), Session: session, Kind: kind, Wall: fmt.Sprintf("2026-05-06T08:00:%02d.5Z", i),
			Mono: int64(i) * 100_000_000, BootID: "b0", Payload: []byte(payload), Prev: prev}
		h := r.ComputeHash()
		r.Hash = hex.EncodeToString(h[:])
		prev = r.Hash
		out = append(out, r)
	}
	return out
}

func encode(t testing.TB, kind byte, audience string, segs ...[]journal.Record) []byte {
	t.Helper()
	var buf bytes.Buffer
	w, err := NewWriter(&buf, kind, audience, newSeedSigner())
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range segs {
		if err := w.Segment(s); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func readAll(data []byte, name string) ([]*Segment, error) {
	r, err := ReadPreamble(bytes.NewReader(data), name)
	if err != nil {
		return nil, err
	}
	var out []*Segment
	for {
		s, err := r.Next()
		if errors.Is(err, io.EOF) {
			return out, nil
		}
		if err != nil {
			return out, err
		}
		out = append(out, s)
	}
}

// TestGolden pins the bytes of a small bundle (two segments of one
// session): a change of the format shows here and needs a new version.
func TestGolden(t *testing.T) {
	t.Parallel()
	recs := chain("20260506T080000Z-golden", 7)
	data := encode(t, KindBundle, "kxs-golden", recs[:4], recs[4:])
	path := filepath.Join("testdata", "stream.golden")
	if *update {
		os.WriteFile(path, data, 0o644)
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(data, want) {
		t.Errorf("the stream differs from %s (%d bytes, want %d): run with -update only for a new format version", path, len(data), len(want))
	}
	// The golden bytes decode to the records, with the hashes recomputed.
	segs, err := readAll(want, "stream.golden")
	if err != nil || len(segs) != 2 {
		t.Fatalf("decode golden: %d segments, %v", len(segs), err)
	}
	var got []journal.Record
	for _, s := range segs {
		if err := s.Verify(newSeedSigner().PublicKey()); err != nil {
			t.Error(err)
		}
		got = append(got, s.Records...)
	}
	for i := range recs {
		if got[i].Hash != recs[i].Hash || !bytes.Equal(got[i].Payload, recs[i].Payload) || got[i].Prev != recs[i].Prev || got[i].Mono != recs[i].Mono {
			t.Errorf("record %d decodes as %+v, want %+v", i+1, got[i], recs[i])
		}
	}
	// The preamble, readable before anything is decompressed.
	if !bytes.HasPrefix(want, []byte(Magic)) || !bytes.Equal(want[len(Magic):len(Magic)+32], newSeedSigner().PublicKey()) {
		t.Error("the golden stream does not start with the magic and the board key")
	}
}

// TestSignedHeadCoversEveryRecord: the single signature over the head
// fails when any one record of the segment is changed, even when the
// changed record's fingerprint is forged to match (issue 11: proof for
// every record).
func TestSignedHeadCoversEveryRecord(t *testing.T) {
	t.Parallel()
	recs := chain("s", 6)
	pub := newSeedSigner().PublicKey()
	good := encode(t, KindPush, "kxs-a", recs)
	segs, err := readAll(good, "push")
	if err != nil || segs[0].Verify(pub) != nil {
		t.Fatalf("untouched: %v", err)
	}
	for i := range recs {
		// Rebuild the chain from record i with a changed payload and
		// fingerprints that match it; keep the board's signature.
		forged := append([]journal.Record(nil), recs...)
		forged[i].Payload = bytes.Replace(forged[i].Payload, []byte("}"), []byte(`,"edited":1}`), 1)
		for k := i; k < len(forged); k++ {
			if k > 0 {
				forged[k].Prev = forged[k-1].Hash
			}
			h := forged[k].ComputeHash()
			forged[k].Hash = hex.EncodeToString(h[:])
		}
		seg := &Segment{Board: pub, Audience: "kxs-a", Session: "s", Prev: journal.ZeroHash(), Records: forged, Sig: segs[0].Sig}
		if err := seg.Verify(pub); !errors.Is(err, ErrProof) {
			t.Errorf("record %d changed and re-chained: the head signature still verifies", i+1)
		}
	}
	// Another audience in the message: the signature fails.
	seg := *segs[0]
	seg.Audience = "kxs-b"
	if seg.Verify(pub) == nil {
		t.Error("a segment signed for store a verifies for store b")
	}
}

// TestRefusalNamesRecord: a record changed in the stream is named.
func TestRefusalNamesRecord(t *testing.T) {
	t.Parallel()
	recs := chain("s", 6)
	var buf bytes.Buffer
	w, _ := NewWriter(&buf, KindPush, "x", newSeedSigner())
	bad := append([]journal.Record(nil), recs...)
	bad[3].Payload = []byte(`{"meter":"dosimeter","raw":"edited"}`)
	w.Segment(bad)
	w.Close()
	_, err := readAll(buf.Bytes(), "push")
	if !errors.Is(err, ErrProof) || !strings.Contains(err.Error(), "record 4") || !strings.Contains(err.Error(), "hash mismatch") {
		t.Errorf("got %v, want record 4 named", err)
	}
}

// TestCompactness: demo-like readings take far less than 150 bytes each
// on the wire (issue 11's ceiling).
func TestCompactness(t *testing.T) {
	t.Parallel()
	recs := chain("s", 2000)
	data := encode(t, KindPush, "x", recs[:1000], recs[1000:])
	if per := float64(len(data)) / 2000; per > 150 {
		t.Errorf("%.1f bytes a record", per)
	}
}

// TestWriterSplitsSegments: records beyond a segment's limits (count or
// bytes) are written as several signed segments that a reader takes, each
// within the limits, and a record the stream cannot carry is refused by
// the writer rather than sent to be refused by the receiver.
func TestWriterSplitsSegments(t *testing.T) {
	t.Parallel()
	big := chain("s", 6)
	for i := range big {
		big[i].Payload = []byte(`{"note":"` + strings.Repeat("x", 900_000) + `"}`)
	}
	rechain(big)
	for _, c := range []struct {
		name string
		recs []journal.Record
		want int // segments
	}{
		{"count", chain("s", MaxSegmentRecords+5), 2},
		{"bytes", big, 2}, // 4 records of 900 kB fit 4 MiB, not 5
	} {
		data := encode(t, KindPush, "x", c.recs)
		segs, err := readAll(data, c.name)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		n := 0
		for _, s := range segs {
			size := 0
			for i := range s.Records {
				size += RecordBytes(&s.Records[i])
			}
			if len(s.Records) > MaxSegmentRecords || size > MaxSegmentBytes {
				t.Errorf("%s: segment %d holds %d records, %d bytes", c.name, s.Index, len(s.Records), size)
			}
			if err := s.Verify(newSeedSigner().PublicKey()); err != nil {
				t.Errorf("%s: %v", c.name, err)
			}
			n += len(s.Records)
		}
		if len(segs) != c.want || n != len(c.recs) {
			t.Errorf("%s: %d segments of %d records, want %d of %d", c.name, len(segs), n, c.want, len(c.recs))
		}
	}
	huge := chain("s", 1)
	huge[0].Payload = []byte(`{"note":"` + strings.Repeat("x", MaxPayload) + `"}`)
	rechain(huge)
	w, _ := NewWriter(io.Discard, KindPush, "x", newSeedSigner())
	if err := w.Segment(huge); err == nil || !strings.Contains(err.Error(), "record 1") {
		t.Errorf("a payload over %d bytes: %v, want a refusal naming record 1", MaxPayload, err)
	}
}

// rechain recomputes the hashes of recs after their contents changed.
func rechain(recs []journal.Record) {
	for k := range recs {
		if k > 0 {
			recs[k].Prev = recs[k-1].Hash
		}
		h := recs[k].ComputeHash()
		recs[k].Hash = hex.EncodeToString(h[:])
	}
}

// FuzzRead feeds arbitrary bytes to the stream reader (push bodies and
// bundles alike): it errors or decodes, never panics, and whatever it
// decodes holds together (hashes recomputed, chain linked).
func FuzzRead(f *testing.F) {
	recs := chain("s", 5)
	f.Add(encode(f, KindBundle, "", recs[:2], recs[2:]))
	f.Add(encode(f, KindPush, "kxs-x", recs))
	f.Add([]byte(Magic))
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, data []byte) {
		segs, _ := readAll(data, "fuzz")
		for _, s := range segs {
			prev := s.Prev
			for _, r := range s.Records {
				h := r.ComputeHash()
				if r.Prev != prev || r.Hash != hex.EncodeToString(h[:]) {
					t.Fatalf("decoded record %d does not hold together", r.Seq)
				}
				prev = r.Hash
			}
		}
	})
}
