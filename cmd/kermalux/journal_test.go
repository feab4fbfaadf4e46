package main

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/store"
)

func run(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	resetFlags(root)
	code := execute(args, &out, &errb)
	return code, out.String(), errb.String()
}

// boardJournal writes a finished session into dir/journal.db with the
// key in dir/board-key and returns the journal path and its key (hex).
func boardJournal(t *testing.T, dir string) (string, string) {
	t.Helper()
	ctx := context.Background()
	p := filepath.Join(dir, "journal.db")
	j, err := journal.Open(p, journal.Options{})
	if err != nil {
		t.Fatal(err)
	}
	id, _ := j.Begin(ctx, journaltest.Session(0))
	if err := journaltest.WriteSession(ctx, j, id, 3, true, nil); err != nil {
		t.Fatal(err)
	}
	key := j.BoardKey()
	j.Close()
	return p, key
}

// journal verify says which key signed the journal; with --store it says
// the board's enrolled name, and refuses a journal whose key the store has
// not enrolled (a journal wholly re-signed by another key verifies on its
// own); journal key --journal refuses a key file that is not the
// journal's; export refuses a journal that does not verify.
func TestJournalVerifyKeysAndStore(t *testing.T) {
	dir := t.TempDir()
	p, key := boardJournal(t, dir)
	code, out, _ := run(t, "journal", "verify", p)
	if code != exitOK || !strings.Contains(out, "signed by board key "+key) || !strings.Contains(out, "not compared with an enrolled key") {
		t.Errorf("verify without --key: exit %d\n%s", code, out)
	}
	sp := filepath.Join(t.TempDir(), "store.db")
	st, err := store.Open(sp)
	if err != nil {
		t.Fatal(err)
	}
	other, _, _ := ed25519.GenerateKey(rand.Reader)
	if err := st.Enroll(context.Background(), other, "another board"); err != nil {
		t.Fatal(err)
	}
	st.Close()
	code, out, _ = run(t, "journal", "verify", "--store", sp, p)
	if code != exitFailure || !strings.Contains(out, "which the store has not enrolled") {
		t.Errorf("verify --store, key not enrolled: exit %d\n%s", code, out)
	}
	st, _ = store.Open(sp)
	pub, _ := journal.ParsePublicKey(key)
	st.Enroll(context.Background(), pub, "Tollemby board 1")
	st.Close()
	code, out, _ = run(t, "journal", "verify", "--store", sp, p)
	if code != exitOK || !strings.Contains(out, `enrolled in `+sp+` as "Tollemby board 1"`) {
		t.Errorf("verify --store, enrolled: exit %d\n%s", code, out)
	}

	// journal key: the journal's own key is printed; another key file is
	// refused (it used to be printed, exit 0).
	code, out, _ = run(t, "journal", "key", "--journal", p)
	if code != exitOK || strings.TrimSpace(out) != key {
		t.Errorf("journal key: exit %d %q, want %s", code, out, key)
	}
	otherDir := filepath.Join(t.TempDir(), "keys")
	if _, err := journal.LoadOrCreateKey(filepath.Join(otherDir, journal.KeyFileName)); err != nil {
		t.Fatal(err)
	}
	code, _, errs := run(t, "journal", "key", "--journal", p, "--key-dir", otherDir)
	if code != exitFailure || !strings.Contains(errs, "journal belongs to another board") {
		t.Errorf("journal key with another key: exit %d %q", code, errs)
	}
	// With the journal's key missing, journal key does not make a new one.
	code, _, _ = run(t, "journal", "key", "--journal", p, "--key-dir", filepath.Join(t.TempDir(), "none"))
	if code != exitFailure {
		t.Errorf("journal key created a key for an existing journal: exit %d", code)
	}

	// Export verifies first.
	if code, out, _ := run(t, "journal", "export", p, "--json"); code != exitOK || strings.Count(out, "\n") < 10 {
		t.Errorf("export of a good journal: exit %d, %d lines", code, strings.Count(out, "\n"))
	}
	if err := os.Remove(journal.MarkPath(p)); err != nil {
		t.Fatal(err)
	}
	code, out, errs = run(t, "journal", "export", p, "--json")
	if code != exitFailure || out != "" || !strings.Contains(errs, "does not verify, refused") {
		t.Errorf("export of a journal without its mark: exit %d, stdout %d bytes, %q", code, len(out), errs)
	}
	code, out, errs = run(t, "journal", "export", p, "--json", "--unverified")
	if code != exitOK || out == "" || !strings.Contains(errs, "NOT VERIFIED") {
		t.Errorf("export --unverified: exit %d %q", code, errs)
	}
}
