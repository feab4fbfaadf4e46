package journal

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/firmware-host/journal/journaltest"
	"kermalux/procedures/entry"
)

// FuzzCanonicalPayload: the canonical form is valid JSON, a fixed point,
// and equal to what encoding/json produces from the decoded value when the
// value has no numbers whose text the decoder would change.
func FuzzCanonicalPayload(f *testing.F) {
	for _, s := range []string{`{"a":1}`, `{ "t" : "<b>&\u2028" }`, `[1, 2.50, -0]`, `"x"`, `{"a":`, `{"a":[{"b":null}]}`} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := CanonicalPayload(data)
		if err != nil {
			if json.Valid(data) {
				t.Fatalf("valid JSON %q refused: %v", data, err)
			}
			return
		}
		if !json.Valid(c) {
			t.Fatalf("canonical form %q is not JSON", c)
		}
		c2, err := CanonicalPayload(c)
		if err != nil || !bytes.Equal(c, c2) {
			t.Fatalf("not a fixed point: %q -> %q", c, c2)
		}
	})
}

// strangerKey is a board key whose private half nobody has: the public
// half of a key made from a fixed seed, the private half dropped. (Not the
// all-zero key: it is a point of small order, under which an all-zero
// signature verifies for about one message in four, RFC 8032 section
// 5.1.7 leaving such keys to the application.)
func strangerKey() ed25519.PublicKey {
	seed := bytes.Repeat([]byte{0x5a}, ed25519.SeedSize)
	return ed25519.NewKeyFromSeed(seed).Public().(ed25519.PublicKey)
}

// FuzzRecordCheck: Check never panics on arbitrary record JSON and never
// passes a record for one signed by a key nobody holds.
func FuzzRecordCheck(f *testing.F) {
	f.Add([]byte(`{"seq":1,"session":"s","kind":"event","wall":"2026-01-01T00:00:00Z","payload":{},"prev":"00","hash":"","sig":""}`))
	f.Add([]byte(`{}`))
	pub := strangerKey()
	f.Fuzz(func(t *testing.T, data []byte) {
		var r Record
		if json.Unmarshal(data, &r) != nil {
			return
		}
		if r.Check(pub) == nil {
			t.Fatalf("a record verified against a key nobody holds: %s", data)
		}
	})
}

// FuzzReadMark: a damaged mark file never panics, never passes for a mark
// signed by a key nobody holds, and passes for the board's key only with
// a mark the board wrote (a record of its session, with that record's
// hash). An input edits a real mark file (two slots of 1024 bytes): it
// writes patch at at over drop bytes; with drop over the whole file, any
// file can be read. Inputs stay a few bytes long (the minimiser's cost
// grows with the square of an input's length). The corpus under testdata
// keeps an all-zero signature that the all-zero key (used here before)
// accepted.
func FuzzReadMark(f *testing.F) {
	ctx := context.Background()
	dir := f.TempDir()
	path := filepath.Join(dir, "seed.db")
	j, err := Open(path, Options{KeyDir: filepath.Join(dir, "key")})
	if err != nil {
		f.Fatal(err)
	}
	id, _ := j.Begin(ctx, journaltest.Session(0))
	journaltest.WriteSession(ctx, j, id, 1, true, nil)
	j.SyncMark()
	recs, _ := j.Records(ctx, id, 0, 0)
	pub := j.PublicKey()
	j.Close()
	base, err := os.ReadFile(MarkPath(path))
	if err != nil {
		f.Fatal(err)
	}
	if m, err := parseMark(base, pub); err != nil || m == nil {
		f.Fatalf("the journal's own mark does not read: %v %v", m, err)
	}
	written := map[int64]string{}
	for _, r := range recs {
		written[r.Seq] = r.Hash
	}
	f.Add(uint16(0), uint16(0), []byte{})               // as written
	f.Add(uint16(0), uint16(len(base)), []byte{})       // empty
	f.Add(uint16(markSlot), uint16(markSlot), []byte{}) // the second slot cut
	f.Add(uint16(0), uint16(markSlot), []byte{})        // the first slot gone
	f.Add(uint16(12), uint16(1), []byte("9"))           // a counter changed
	f.Add(uint16(0), uint16(len(base)), bytes.Repeat([]byte{' '}, 2*markSlot))
	f.Add(uint16(0), uint16(len(base)), []byte(`{"v":1,"n":2,"session":"s","seq":3,"hash":"`+strings.Repeat("0", 64)+`","sig":"`+strings.Repeat("0", 128)+`"}`))
	stranger := strangerKey()
	f.Fuzz(func(t *testing.T, at, drop uint16, patch []byte) {
		off := int(at) % (len(base) + 1)
		end := min(off+int(drop), len(base))
		data := append(append(append([]byte{}, base[:off]...), patch...), base[end:]...)
		if m, err := parseMark(data, stranger); err == nil && m != nil {
			t.Fatalf("a mark verified against a key nobody holds: %q", data)
		}
		if m, err := parseMark(data, pub); err == nil && m != nil && (m.Session != id || written[m.Seq] != m.Hash) {
			t.Fatalf("a mark the board never wrote passed: %+v", *m)
		}
	})
}

// FuzzVerifyFile: journal verify on a damaged journal file never panics
// and never calls a file good that is not the real journal. The fuzzer
// edits a real journal (28 KB: SQLite's pages of every table and index)
// rather than writing whole files: an input is where to cut it (0: not
// cut), where to write and what, so inputs stay a few bytes long (the
// fuzzer's minimiser runs a number of inputs that grows with the square
// of an input's length) and yet reach every byte of the file; a patch
// longer than the file replaces it whole. The journal holds a session of
// three records (its start, a reading, its end): every table and index
// has rows, and each input costs one SQLite open and three records'
// signatures (a session of 22 records made verification, not the file's
// damage, the cost: 400 inputs a second); the checks of records and
// chains themselves are FuzzCheckSession's and FuzzRecordCheck's.
func FuzzVerifyFile(f *testing.F) {
	ctx := context.Background()
	dir := f.TempDir()
	j, err := Open(filepath.Join(dir, "seed.db"), Options{KeyDir: filepath.Join(dir, "key")})
	if err != nil {
		f.Fatal(err)
	}
	id, _ := j.Begin(ctx, journaltest.Session(0))
	j.Append(ctx, id, entry.KindReading, entry.Reading{Step: 1, StepID: "kerma", Meter: "dosimeter", Quantity: "air_kerma_rate", Raw: "MEAS 0.8710 uGy/s OK", RawValue: 0.871, Value: 0.882, Unit: "µGy/s", Status: "ok", Used: true})
	j.Append(ctx, id, entry.KindSessionEnd, entry.SessionEnd{Steps: 1, Outcome: "complete"})
	if recs, err := j.Records(ctx, id, 0, 0); err != nil || len(recs) != 3 {
		f.Fatalf("the seed journal has %d records (%v), want 3", len(recs), err)
	}
	j.Close()
	if rep, err := Verify(ctx, filepath.Join(dir, "seed.db")); err != nil || rep.Records != 3 {
		f.Fatalf("the seed journal does not verify as 3 records: %+v %v", rep, err)
	}
	good, _ := os.ReadFile(filepath.Join(dir, "seed.db"))
	f.Add(uint32(0), uint32(0), []byte{})                                                   // the journal as written (good, but no mark beside it)
	f.Add(uint32(len(good)/2), uint32(0), []byte{})                                         // cut in half
	f.Add(uint32(16), uint32(0), []byte{})                                                  // the SQLite header's magic alone
	f.Add(uint32(0), uint32(len(good)-100), []byte{0xff})                                   // a byte flipped near the end
	f.Add(uint32(0), uint32(100), []byte{0, 0, 0, 0})                                       // the header's counters zeroed
	f.Add(uint32(0), uint32(0), append([]byte("SQLite format 3\x00"), make([]byte, 84)...)) // the 100-byte header replaced by a bare one
	buf := make([]byte, 0, 2*len(good))
	p := filepath.Join(dir, "fuzz.db")
	f.Fuzz(func(t *testing.T, cut, at uint32, patch []byte) {
		data := append(buf[:0], good...)
		if cut > 0 && int(cut) < len(data) {
			data = data[:cut]
		}
		if len(patch) >= len(good) {
			data = append(data[:0], patch...)
		} else if len(data) > 0 {
			off := int(at % uint32(len(data)))
			data = append(data[:off], append(patch, data[min(off+len(patch), len(data)):]...)...)
		}
		os.Remove(p + "-wal")
		os.Remove(p + "-shm")
		if err := os.WriteFile(p, data, 0o600); err != nil {
			t.Fatal(err)
		}
		rep, err := Verify(ctx, p)
		if err == nil && rep.OK() && rep.Records > 0 {
			// No mark beside it: a journal with records cannot be good.
			t.Fatalf("a journal of %d records without its mark verified", rep.Records)
		}
	})
}

// FuzzCheckSession: the checks Verify and a resume run on a session's
// records never panic and never pass a session the board did not sign.
// The fuzzer edits a real session's records rather than writing their
// JSON whole (inputs stay short, see FuzzVerifyFile): an input drops,
// repeats or swaps record i, or writes patch into its JSON text at at,
// over drop bytes; a patch that is itself a record's JSON replaces it.
func FuzzCheckSession(f *testing.F) {
	ctx := context.Background()
	dir := f.TempDir()
	j, err := Open(filepath.Join(dir, "seed.db"), Options{KeyDir: filepath.Join(dir, "key")})
	if err != nil {
		f.Fatal(err)
	}
	id, _ := j.Begin(ctx, journaltest.Session(0))
	// A short session (the session record, a step, a reading, its end):
	// each input checks every record's signature, so the records' number
	// sets the rate (20 records: some 300 inputs a second on a loaded
	// machine, 6: some thousands); edits reach every kind of check.
	j.Append(ctx, id, entry.KindStep, entry.Step{Index: 1, Of: 1, ID: "kerma", Kind: "conversion_factor", State: entry.StepStarted})
	j.Append(ctx, id, entry.KindReading, entry.Reading{Step: 1, StepID: "kerma", Meter: "dosimeter", Quantity: "air_kerma_rate", Raw: "MEAS 0.8710 uGy/s OK", RawValue: 0.871, Value: 0.882, Unit: "µGy/s", Status: "ok", Used: true})
	j.Append(ctx, id, entry.KindStep, entry.Step{Index: 1, Of: 1, ID: "kerma", Kind: "conversion_factor", State: entry.StepDone})
	j.Append(ctx, id, entry.KindSessionEnd, entry.SessionEnd{Steps: 1, Outcome: "complete"})
	recs, _ := j.Records(ctx, id, 0, 0)
	pub := j.PublicKey()
	j.Close()
	if len(recs) != 5 {
		f.Fatalf("the seed session has %d records, want 5", len(recs))
	}
	texts := make([][]byte, len(recs))
	for i, r := range recs {
		texts[i], _ = json.Marshal(r)
	}
	const (
		opPatch = iota
		opDrop
		opRepeat
		opSwap
		ops
	)
	f.Add(uint8(opPatch), uint8(0), uint16(0), uint8(0), []byte{})     // the session as written
	f.Add(uint8(opDrop), uint8(3), uint16(0), uint8(0), []byte{})      // a record missing
	f.Add(uint8(opRepeat), uint8(2), uint16(0), uint8(0), []byte{})    // a record twice
	f.Add(uint8(opSwap), uint8(4), uint16(0), uint8(0), []byte{})      // two records swapped
	f.Add(uint8(opPatch), uint8(1), uint16(8), uint8(1), []byte("9"))  // a sequence number changed
	f.Add(uint8(opPatch), uint8(5), uint16(40), uint8(2), []byte("1")) // a byte of the payload
	f.Add(uint8(opPatch), uint8(0), uint16(0), uint8(0), []byte(`{"seq":1,"session":"s","kind":"session","payload":{}}`))
	f.Fuzz(func(t *testing.T, op, i uint8, at uint16, drop uint8, patch []byte) {
		k := int(i) % len(texts)
		edited := make([][]byte, 0, len(texts)+1)
		for n, text := range texts {
			switch {
			case n != k:
				edited = append(edited, text)
			case op%ops == opDrop:
			case op%ops == opRepeat:
				edited = append(edited, text, text)
			case op%ops == opSwap && n+1 < len(texts):
				edited = append(edited, texts[n+1], text)
				edited = append(edited, texts[n+2:]...)
				goto decode
			case op%ops == opPatch && json.Valid(patch) && len(patch) > 0 && patch[0] == '{':
				edited = append(edited, patch)
			default:
				off := int(at) % (len(text) + 1)
				end := min(off+int(drop), len(text))
				edited = append(edited, append(append(append([]byte{}, text[:off]...), patch...), text[end:]...))
			}
		}
	decode:
		var rs []Record
		for _, text := range edited {
			var r Record
			if json.Unmarshal(text, &r) != nil {
				return
			}
			rs = append(rs, r)
		}
		if CheckSession(pub, rs) == nil {
			// Passing records must be the board's: each signed by it.
			for _, r := range rs {
				if r.Check(pub) != nil {
					t.Fatalf("a session with a bad record passed: %+v", r)
				}
			}
		}
		_ = CheckHashChain(rs)
	})
}
