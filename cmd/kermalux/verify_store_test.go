//go:build !board

package main

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/store"
)

// copyJournal copies a board folder's journal, its high-water mark and
// its key (board-key/) into a new folder and returns the copy's journal.
func copyJournal(t *testing.T, jp string) string {
	t.Helper()
	dir := t.TempDir()
	for _, rel := range []string{"journal.db", "journal.db" + journal.MarkSuffix, filepath.Join("board-key", journal.KeyFileName)} {
		b, err := os.ReadFile(filepath.Join(filepath.Dir(jp), rel))
		if err != nil {
			t.Fatal(err)
		}
		os.MkdirAll(filepath.Dir(filepath.Join(dir, rel)), 0o700)
		if err := os.WriteFile(filepath.Join(dir, rel), b, 0o600); err != nil {
			t.Fatal(err)
		}
	}
	return filepath.Join(dir, "journal.db")
}

// journal verify --store compares each session with what the store holds
// of it (issue 14 item 7: a rollback is detected against the push mark
// and the store, not only against the journal's own high-water mark). An
// older copy of the journal, with its own mark, verifies on its own; the
// store, which received the later records, shows that it was rolled back.
// A copy grown by other records to the store's length is a fork.
func TestJournalVerifyAgainstStore(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	jp := filepath.Join(dir, "journal.db")
	j, err := journal.Open(jp, journal.Options{})
	if err != nil {
		t.Fatal(err)
	}
	id, _ := j.Begin(ctx, journaltest.Session(0))
	if err := journaltest.WriteSession(ctx, j, id, 3, false, nil); err != nil {
		t.Fatal(err)
	}
	key := j.BoardKey()
	j.Close()
	old := copyJournal(t, jp) // the session part way
	j, err = journal.Open(jp, journal.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if err := journaltest.WriteSession(ctx, j, id, 3, true, nil); err != nil {
		t.Fatal(err)
	}
	j.Close()

	sp := pushedStore(t, jp, key)
	st, err := store.Open(sp)
	if err != nil {
		t.Fatal(err)
	}
	marks, _ := st.Marks(ctx, key, []string{id})
	st.Close()
	if marks[id].Seq == 0 {
		t.Fatalf("the store holds nothing of %s", id)
	}

	if code, out, _ := run(t, "journal", "verify", "--store", sp, jp); code != exitOK {
		t.Errorf("verify --store of the journal the store holds: exit %d\n%s", code, out)
	}
	if code, out, _ := run(t, "journal", "verify", old); code != exitOK {
		t.Fatalf("the older copy on its own: exit %d, want it to verify (its mark is its own)\n%s", code, out)
	}
	code, out, _ := run(t, "journal", "verify", "--store", sp, old)
	if code != exitFailure || !strings.Contains(out, "the store holds this session up to record") {
		t.Errorf("verify --store of the older copy: exit %d, want %d and the rollback named\n%s", code, exitFailure, out)
	}

	// The older copy grown by other records past the store's mark: at the
	// mark its record differs from the store's.
	oj, err := journal.Open(old, journal.Options{})
	if err != nil {
		t.Fatal(err)
	}
	for s, _ := oj.Sessions(ctx); s[0].Last < marks[id].Seq; s, _ = oj.Sessions(ctx) {
		if _, err := oj.Append(ctx, id, "event", map[string]string{"name": "other branch"}); err != nil {
			t.Fatal(err)
		}
	}
	oj.Close()
	code, out, _ = run(t, "journal", "verify", "--store", sp, old)
	if code != exitFailure || !strings.Contains(out, "(a fork)") {
		t.Errorf("verify --store of a forked copy: exit %d, want %d and the fork named\n%s", code, exitFailure, out)
	}
}
