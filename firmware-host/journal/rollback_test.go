package journal

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"crypto/sha256"
	"database/sql"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/firmware-host/journal/journaltest"
)

// liveJournal writes session A and closes (checkpointed into the main
// file), then reopens and writes session B, whose records stay in the
// -wal file; it returns copies of the three files as a kill would leave
// them (journal.db, journal.db-wal, journal.db.mark) and B's id and last
// seq.
func liveJournal(t *testing.T) (dir string, files map[string][]byte, b string, last int64) {
	t.Helper()
	ctx := context.Background()
	dir = t.TempDir()
	j := openTest(t, dir)
	a, _ := j.Begin(ctx, journaltest.Session(1))
	if err := journaltest.WriteSession(ctx, j, a, 3, true, nil); err != nil {
		t.Fatal(err)
	}
	j.Close()
	j = openTest(t, dir)
	t.Cleanup(func() { j.Close() })
	b, _ = j.Begin(ctx, journaltest.Session(2))
	if err := journaltest.WriteSession(ctx, j, b, 5, false, nil); err != nil {
		t.Fatal(err)
	}
	j.SyncMark()
	ss, _ := j.Sessions(ctx)
	last = ss[len(ss)-1].Last
	files = map[string][]byte{}
	for _, suf := range []string{"", "-wal", MarkSuffix} {
		data, err := os.ReadFile(filepath.Join(dir, "journal.db") + suf)
		if err != nil {
			t.Fatalf("%s: %v", suf, err)
		}
		files[suf] = data
	}
	if len(files["-wal"]) == 0 {
		t.Fatal("session B is not in the -wal file: the test no longer exercises the WAL")
	}
	return dir, files, b, last
}

// restore writes files (suffix → bytes; a missing suffix is not written)
// as the journal "journal.db" of a fresh folder and returns its path.
func restore(t *testing.T, files map[string][]byte, keyDir string) string {
	t.Helper()
	dir := t.TempDir()
	p := filepath.Join(dir, "journal.db")
	for suf, data := range files {
		if err := os.WriteFile(p+suf, data, 0o600); err != nil {
			t.Fatal(err)
		}
	}
	return p
}

// A deleted, cut or flipped -wal file, or a journal cut to 0 bytes, takes
// the last committed records with it and leaves a file whose chains and
// signed heads agree with each other. The high-water mark names the lost
// records: journal verify reports the rollback (with and without --key),
// and Open refuses to append to such a journal.
func TestRollbackDetected(t *testing.T) {
	ctx := context.Background()
	dir, files, b, last := liveJournal(t)
	key := filepath.Join(dir, "key")
	wal := files["-wal"]
	cases := []struct {
		name  string
		files map[string][]byte
		want  string
	}{
		{"wal deleted", map[string][]byte{"": files[""], MarkSuffix: files[MarkSuffix]}, "holds no record of that session"},
		{"wal cut", map[string][]byte{"": files[""], "-wal": wal[:len(wal)/2], MarkSuffix: files[MarkSuffix]}, "committed record(s) are gone"},
		{"wal flipped", map[string][]byte{"": files[""], "-wal": flip(wal, len(wal)/3), MarkSuffix: files[MarkSuffix]}, "gone"},
		{"journal cut to 0 bytes", map[string][]byte{"": {}, MarkSuffix: files[MarkSuffix]}, "journal is empty, but its high-water mark names record"},
		{"journal deleted, wal kept", map[string][]byte{MarkSuffix: files[MarkSuffix]}, ""},
		{"mark deleted", map[string][]byte{"": files[""]}, "no high-water mark"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p := restore(t, c.files, key)
			if c.want == "" {
				// No journal file at all: verify cannot open it; Open
				// creates an empty one and the mark refuses it.
				if _, err := Verify(ctx, p); err == nil {
					t.Error("verify of a missing journal succeeded")
				}
			} else {
				for _, withKey := range []bool{false, true} {
					opts := VerifyOptions{}
					if withKey {
						k, _ := LoadKey(filepath.Join(key, KeyFileName))
						opts.Key = k.Public().(ed25519.PublicKey)
					}
					rep, err := VerifyWith(ctx, p, opts)
					if err != nil {
						t.Fatal(err)
					}
					if rep.OK() {
						t.Fatalf("key %v: journal is good after %s: %+v", withKey, c.name, rep)
					}
					text := ""
					for _, pr := range rep.Problems {
						text += pr.String() + "\n"
					}
					if !strings.Contains(text, c.want) {
						t.Errorf("key %v: problems %q lack %q", withKey, text, c.want)
					}
					if c.name != "mark deleted" && !strings.Contains(text, b) {
						t.Errorf("key %v: problems %q do not name session %s", withKey, text, b)
					}
				}
			}
			_, err := Open(p, Options{KeyDir: key})
			if !errors.Is(err, ErrRolledBack) {
				t.Errorf("Open after %s: %v, want ErrRolledBack", c.name, err)
			}
		})
	}
	// The untouched copy verifies, and opens.
	p := restore(t, files, key)
	if rep, err := Verify(ctx, p); err != nil || !rep.OK() {
		t.Fatalf("untouched copy: %+v %v", rep, err)
	}
	j, err := Open(p, Options{KeyDir: key})
	if err != nil {
		t.Fatal(err)
	}
	ss, _ := j.Sessions(ctx)
	j.Close()
	if ss[len(ss)-1].ID != b || ss[len(ss)-1].Last != last {
		t.Errorf("sessions %+v", ss)
	}
}

func flip(b []byte, i int) []byte {
	c := bytes.Clone(b)
	c[i] ^= 0x40
	return c
}

// A verifier must not write: journal verify opens the file read-only, so
// the -wal file (holding the newest records) is neither checkpointed nor
// deleted, and no file changes.
func TestVerifyWritesNothing(t *testing.T) {
	_, files, _, _ := liveJournal(t)
	p := restore(t, files, "")
	sums := func() map[string][32]byte {
		out := map[string][32]byte{}
		for suf := range files {
			data, err := os.ReadFile(p + suf)
			if err != nil {
				t.Fatalf("%s after verify: %v", suf, err)
			}
			out[suf] = sha256.Sum256(data)
		}
		return out
	}
	before := sums()
	rep, err := Verify(context.Background(), p)
	if err != nil || !rep.OK() {
		t.Fatalf("%+v %v", rep, err)
	}
	if _, err := ListSessions(context.Background(), p); err != nil {
		t.Fatal(err)
	}
	after := sums()
	for suf := range before {
		if before[suf] != after[suf] {
			t.Errorf("journal.db%s changed by verify", suf)
		}
	}
}

// A flipped byte in an index page is reported as the damage it is (the
// SQLite integrity check), not as records under a garbled session id.
func TestVerifyReportsIndexDamage(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	j := openTest(t, dir)
	for n := 0; n < 3; n++ {
		id, _ := j.Begin(ctx, journaltest.Session(n))
		journaltest.WriteSession(ctx, j, id, 20, true, nil)
	}
	j.Close()
	p := filepath.Join(dir, "journal.db")
	db, err := sql.Open("sqlite", p)
	if err != nil {
		t.Fatal(err)
	}
	var root, pageSize int
	db.QueryRow(`SELECT rootpage FROM sqlite_master WHERE name = 'records_seq'`).Scan(&root)
	db.QueryRow(`PRAGMA page_size`).Scan(&pageSize)
	db.Close()
	if root < 2 {
		t.Fatal("index root page not found")
	}
	data, _ := os.ReadFile(p)
	// The leaf's cells sit at the end of the page: flip a byte of a key.
	off := root*pageSize - 40
	data[off] ^= 0x04
	os.WriteFile(p, data, 0o600)
	rep, err := Verify(ctx, p)
	if err != nil {
		t.Fatal(err)
	}
	if rep.OK() || !strings.Contains(rep.Problems[0].What, "SQLite integrity check failed") || rep.Problems[0].Session != "" {
		t.Fatalf("problems %+v", rep.Problems)
	}
}
