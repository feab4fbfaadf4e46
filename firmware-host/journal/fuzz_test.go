package journal

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/firmware-host/journal/journaltest"
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

// FuzzRecordCheck: Check never panics on arbitrary record JSON.
func FuzzRecordCheck(f *testing.F) {
	f.Add([]byte(`{"seq":1,"session":"s","kind":"event","wall":"2026-01-01T00:00:00Z","payload":{},"prev":"00","hash":"","sig":""}`))
	f.Add([]byte(`{}`))
	pub := make([]byte, 32)
	f.Fuzz(func(t *testing.T, data []byte) {
		var r Record
		if json.Unmarshal(data, &r) != nil {
			return
		}
		if r.Check(pub) == nil {
			t.Fatalf("a record verified against the all-zero key: %s", data)
		}
	})
}

// FuzzReadMark: a mark file of arbitrary bytes never passes for a mark
// signed by the all-zero key, and never panics.
func FuzzReadMark(f *testing.F) {
	f.Add([]byte(`{"v":1,"n":2,"session":"s","seq":3,"hash":"` + strings.Repeat("0", 64) + `","sig":"` + strings.Repeat("0", 128) + `"}`))
	f.Add([]byte{})
	f.Add(bytes.Repeat([]byte{' '}, 2*markSlot))
	pub := make([]byte, 32)
	f.Fuzz(func(t *testing.T, data []byte) {
		if m, err := parseMark(data, pub); err == nil && m != nil {
			t.Fatalf("a mark verified against the all-zero key: %q", data)
		}
	})
}

// FuzzVerifyFile: journal verify on a journal file of arbitrary bytes
// (seeded with a real journal and cut or flipped copies) never panics,
// never errors on a file it could open, and never calls a file good that
// is not the real journal.
func FuzzVerifyFile(f *testing.F) {
	ctx := context.Background()
	dir := f.TempDir()
	j, err := Open(filepath.Join(dir, "seed.db"), Options{KeyDir: filepath.Join(dir, "key")})
	if err != nil {
		f.Fatal(err)
	}
	id, _ := j.Begin(ctx, journaltest.Session(0))
	journaltest.WriteSession(ctx, j, id, 2, true, nil)
	j.Close()
	good, _ := os.ReadFile(filepath.Join(dir, "seed.db"))
	f.Add(good)
	f.Add(good[:len(good)/2])
	f.Add([]byte("SQLite format 3\x00"))
	f.Fuzz(func(t *testing.T, data []byte) {
		p := filepath.Join(dir, "fuzz.db")
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
// records, fed records decoded from arbitrary JSON (seeded with a real
// session), never panic and never pass a session the board did not sign.
func FuzzCheckSession(f *testing.F) {
	ctx := context.Background()
	dir := f.TempDir()
	j, err := Open(filepath.Join(dir, "seed.db"), Options{KeyDir: filepath.Join(dir, "key")})
	if err != nil {
		f.Fatal(err)
	}
	id, _ := j.Begin(ctx, journaltest.Session(0))
	journaltest.WriteSession(ctx, j, id, 1, true, nil)
	recs, _ := j.Records(ctx, id, 0, 0)
	pub := j.PublicKey()
	j.Close()
	seed, _ := json.Marshal(recs)
	f.Add(seed)
	f.Add([]byte(`[]`))
	f.Fuzz(func(t *testing.T, data []byte) {
		var rs []Record
		if json.Unmarshal(data, &rs) != nil {
			return
		}
		p := CheckSession(pub, rs)
		if p == nil && !bytes.Equal(data, seed) {
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
