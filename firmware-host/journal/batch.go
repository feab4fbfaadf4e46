package journal

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"crypto/sha256"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"strconv"
)

// BatchFormat names the batch encoding in Batch.Format.
const BatchFormat = "kermalux-batch-1"

// Batch is a run of consecutive records of one session, signed as a whole
// by the board: the unit of sync (push) and of bundles.
type Batch struct {
	Format  string   `json:"format"`
	Board   string   `json:"board"` // hex public key of the signing board
	Session string   `json:"session"`
	Records []Record `json:"records"`
	Sig     string   `json:"sig"` // hex ed25519 signature of Message()
}

// First returns the first record's sequence number (0 if empty).
func (b *Batch) First() int64 {
	if len(b.Records) == 0 {
		return 0
	}
	return b.Records[0].Seq
}

// Last returns the last record's sequence number (0 if empty).
func (b *Batch) Last() int64 {
	if len(b.Records) == 0 {
		return 0
	}
	return b.Records[len(b.Records)-1].Seq
}

// Message returns what the batch signature covers:
//
//	"kermalux batch v1\x00" || SHA-256(format 0x00 board 0x00 session 0x00
//	    uint64be(first) uint64be(count) hash_1 0x0a ... hash_n 0x0a)
//
// where hash_i are the records' hex hashes. The records' own hashes and
// signatures cover their contents.
func (b *Batch) Message() []byte {
	h := sha256.New()
	h.Write([]byte(b.Format))
	h.Write([]byte{0})
	h.Write([]byte(b.Board))
	h.Write([]byte{0})
	h.Write([]byte(b.Session))
	h.Write([]byte{0})
	var n [16]byte
	binary.BigEndian.PutUint64(n[:8], uint64(b.First()))
	binary.BigEndian.PutUint64(n[8:], uint64(len(b.Records)))
	h.Write(n[:])
	for i := range b.Records {
		h.Write([]byte(b.Records[i].Hash))
		h.Write([]byte{'\n'})
	}
	return append([]byte(batchDomain), h.Sum(nil)...)
}

// Check verifies the batch on its own against pub: format, board key,
// batch signature, and that its records are consecutive, of its session,
// chained to each other, hashed and signed correctly. The link of the
// first record to what came before is the receiver's to check (prevHash
// in CheckChain).
func (b *Batch) Check(pub ed25519.PublicKey) error { return b.check(pub, true) }

// CheckSigned is Check without verifying each record's own signature: the
// batch signature covers every record's hash and each hash is recomputed
// from the record's contents, so the batch is authenticated as a whole
// with one signature check. The receiver uses it (one ed25519 verification
// per batch instead of per record); the record signatures are stored for
// checking one record alone later.
func (b *Batch) CheckSigned(pub ed25519.PublicKey) error { return b.check(pub, false) }

func (b *Batch) check(pub ed25519.PublicKey, recordSigs bool) error {
	if b.Format != BatchFormat {
		return fmt.Errorf("batch format %q, expected %q", b.Format, BatchFormat)
	}
	if b.Board != hex.EncodeToString(pub) {
		return fmt.Errorf("batch names board %s, checked against %s", short(b.Board), short(hex.EncodeToString(pub)))
	}
	if len(b.Records) == 0 {
		return fmt.Errorf("batch of session %s has no records", b.Session)
	}
	sig, err := hex.DecodeString(b.Sig)
	if err != nil || !ed25519.Verify(pub, b.Message(), sig) {
		return fmt.Errorf("%w: batch signature of session %s records %d..%d does not verify with board key %s", ErrBadSignature, b.Session, b.First(), b.Last(), short(b.Board))
	}
	for i := range b.Records {
		if b.Records[i].Session != b.Session {
			return fmt.Errorf("record %d names session %q inside a batch of session %q", b.Records[i].Seq, b.Records[i].Session, b.Session)
		}
	}
	recs := b.Records
	if i, err := checkChain(pub, recs[0].Seq-1, recs[0].Prev, recs, recordSigs); err != nil {
		return fmt.Errorf("record %d (%s): %w", recs[i].Seq, recs[i].Kind, err)
	}
	if recs[0].Seq == 1 && recs[0].Prev != zeroHashHex() {
		return fmt.Errorf("record 1: %w: previous hash of the first record must be zero", ErrChainBroken)
	}
	if p := checkSessionShape(pub, recs, recs[0].Seq-1); p != nil {
		return fmt.Errorf("record %d (%s): %s", p.Seq, p.Kind, p.What)
	}
	return nil
}

// EncodeJSON returns the batch as JSON, the same bytes json.Marshal
// gives but without re-compacting every payload (they are canonical
// already), which makes encoding several times faster.
func (b *Batch) EncodeJSON() []byte {
	n := 256
	for i := range b.Records {
		n += 400 + len(b.Records[i].Payload)
	}
	var buf bytes.Buffer
	buf.Grow(n)
	buf.WriteString(`{"format":`)
	writeJSONString(&buf, b.Format)
	buf.WriteString(`,"board":`)
	writeJSONString(&buf, b.Board)
	buf.WriteString(`,"session":`)
	writeJSONString(&buf, b.Session)
	buf.WriteString(`,"records":[`)
	for i := range b.Records {
		r := &b.Records[i]
		if i > 0 {
			buf.WriteByte(',')
		}
		buf.WriteString(`{"seq":`)
		buf.WriteString(strconv.FormatInt(r.Seq, 10))
		buf.WriteString(`,"session":`)
		writeJSONString(&buf, r.Session)
		buf.WriteString(`,"kind":`)
		writeJSONString(&buf, string(r.Kind))
		buf.WriteString(`,"wall":`)
		writeJSONString(&buf, r.Wall)
		buf.WriteString(`,"mono_ns":`)
		buf.WriteString(strconv.FormatInt(r.Mono, 10))
		buf.WriteString(`,"boot_id":`)
		writeJSONString(&buf, r.BootID)
		buf.WriteString(`,"payload":`)
		if len(r.Payload) == 0 {
			buf.WriteString("null")
		} else {
			buf.Write(r.Payload)
		}
		buf.WriteString(`,"prev":`)
		writeJSONString(&buf, r.Prev)
		buf.WriteString(`,"hash":`)
		writeJSONString(&buf, r.Hash)
		buf.WriteString(`,"sig":`)
		writeJSONString(&buf, r.Sig)
		buf.WriteByte('}')
	}
	buf.WriteString(`],"sig":`)
	writeJSONString(&buf, b.Sig)
	buf.WriteByte('}')
	return buf.Bytes()
}

// ZeroHash is the hex "previous hash" of a session's first record.
func ZeroHash() string { return zeroHashHex() }

// SignBatch fills in b.Format, b.Board and b.Sig with the journal's key.
func (j *Journal) SignBatch(b *Batch) {
	b.Format = BatchFormat
	b.Board = j.pubHex
	b.Sig = hex.EncodeToString(j.Sign(b.Message()))
}

// NextBatch returns a signed batch of up to n records of session after
// seq after, or nil when there are none.
func (j *Journal) NextBatch(ctx context.Context, session string, after int64, n int) (*Batch, error) {
	recs, err := j.Records(ctx, session, after, n)
	if err != nil || len(recs) == 0 {
		return nil, err
	}
	b := &Batch{Session: session, Records: recs}
	j.SignBatch(b)
	return b, nil
}

// SignBundle signs a bundle digest (see package transfer).
func (j *Journal) SignBundle(digest []byte) []byte {
	return j.Sign(append([]byte(bundleDomain), digest...))
}

// CheckBundleSig verifies a bundle digest's signature.
func CheckBundleSig(pub ed25519.PublicKey, digest, sig []byte) bool {
	return ed25519.Verify(pub, append([]byte(bundleDomain), digest...), sig)
}
