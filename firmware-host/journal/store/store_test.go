package store

import (
	"context"
	"errors"
	"path/filepath"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/procedures/entry"
)

func openBoard(t testing.TB, dir, keyDir string, start time.Time) *journal.Journal {
	t.Helper()
	j, err := journal.Open(filepath.Join(dir, "journal.db"), journal.Options{KeyDir: keyDir,
		Clock: clock.NewManual(start), BootID: func() string { return "b" }})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { j.Close() })
	return j
}

func openStore(t testing.TB) *Store {
	t.Helper()
	st, err := Open(filepath.Join(t.TempDir(), "store.db"))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { st.Close() })
	return st
}

func TestGapConflictAndAtomicity(t *testing.T) {
	ctx := context.Background()
	keys := filepath.Join(t.TempDir(), "key")
	start := time.Date(2026, 5, 6, 8, 0, 0, 0, time.UTC)
	a := openBoard(t, t.TempDir(), keys, start)
	b := openBoard(t, t.TempDir(), keys, start) // the same board restored from an old copy
	s := journaltest.Session(0)
	s.ID = "20260506T080000Z-fork-0001"
	s.Started = start
	if _, err := a.Begin(ctx, s); err != nil {
		t.Fatal(err)
	}
	if _, err := b.Begin(ctx, s); err != nil {
		t.Fatal(err)
	}
	journaltest.WriteSession(ctx, a, s.ID, 2, true, nil)
	b.Append(ctx, s.ID, entry.KindEvent, entry.Event{Name: "paused"})
	st := openStore(t)
	if err := st.Enroll(ctx, a.PublicKey(), "van-2"); err != nil {
		t.Fatal(err)
	}
	first, _ := a.NextBatch(ctx, s.ID, 0, 3)
	if _, err := st.Apply(ctx, first); err != nil {
		t.Fatal(err)
	}
	// A gap: records 6.. while the store holds 1..3.
	later, _ := a.NextBatch(ctx, s.ID, 5, 3)
	if _, err := st.Apply(ctx, later); !errors.Is(err, ErrGap) {
		t.Errorf("gap: %v", err)
	}
	// A fork: record 2 differs from the stored record 2.
	fork, _ := b.NextBatch(ctx, s.ID, 0, 5)
	if _, err := st.Apply(ctx, fork); !errors.Is(err, ErrConflict) {
		t.Errorf("fork: %v", err)
	}
	// Overlap that continues: stores only the new records.
	overlap, _ := a.NextBatch(ctx, s.ID, 1, 6)
	got, err := st.Apply(ctx, overlap)
	if err != nil || got.Stored != 4 || got.Duplicates != 2 || got.High != 7 {
		t.Errorf("overlap: %+v %v", got, err)
	}
	// ApplyAll is all or nothing: a good batch followed by a bad one stores nothing.
	good, _ := a.NextBatch(ctx, s.ID, 7, 3)
	bad, _ := a.NextBatch(ctx, s.ID, 10, 3)
	bad.Records[0].Payload = append([]byte(nil), bad.Records[1].Payload...)
	if _, err := st.ApplyAll(ctx, []*journal.Batch{good, bad}, ApplyOptions{}); err == nil {
		t.Error("ApplyAll accepted a bad batch")
	}
	if m, _ := st.Marks(ctx, a.BoardKey(), []string{s.ID}); m[s.ID] != 7 {
		t.Errorf("after refused ApplyAll the mark is %d, want 7", m[s.ID])
	}
	if _, err := st.Marks(ctx, "00"+a.BoardKey()[2:], []string{s.ID}); !errors.Is(err, ErrNotEnrolled) {
		t.Errorf("marks for an unknown board: %v", err)
	}
}

func TestSessionQueries(t *testing.T) {
	ctx := context.Background()
	st := openStore(t)
	var batches []*journal.Batch
	keys := filepath.Join(t.TempDir(), "key")
	j := openBoard(t, t.TempDir(), keys, time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC))
	st.Enroll(ctx, j.PublicKey(), "van-1")
	for i := 0; i < 6; i++ {
		s := journaltest.Session(i) // rooms cycle 1..3, serials LX23-0100+i
		s.Started = time.Date(2020+i, 3, 1, 9, 0, 0, 0, time.UTC)
		if i%2 == 1 {
			s.Site = "Ostrelby Infirmary"
		}
		id, _ := j.Begin(ctx, s)
		journaltest.WriteSession(ctx, j, id, 1, true, nil)
		b, _ := j.NextBatch(ctx, id, 0, 0)
		batches = append(batches, b)
	}
	if _, err := st.ApplyAll(ctx, batches, ApplyOptions{}); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name string
		q    Query
		want int
	}{
		{"all", Query{}, 6},
		{"site", Query{Site: "Ostrelby Infirmary"}, 3},
		{"site and room", Query{Site: "Tollemby Rise Clinic", Room: "Fluoro 1"}, 1},
		{"serial", Query{Serial: "LX23-0102"}, 1},
		{"from", Query{From: time.Date(2023, 1, 1, 0, 0, 0, 0, time.UTC)}, 3},
		{"from to", Query{From: time.Date(2021, 3, 1, 9, 0, 0, 0, time.UTC), To: time.Date(2023, 3, 1, 9, 0, 0, 0, time.UTC)}, 2},
	} {
		got, err := st.Sessions(ctx, c.q)
		if err != nil || len(got) != c.want {
			t.Errorf("%s: %d sessions, %v; want %d", c.name, len(got), err, c.want)
		}
		for i := 1; i < len(got); i++ {
			if got[i].Session.Started.Before(got[i-1].Session.Started) {
				t.Errorf("%s: not oldest first", c.name)
			}
		}
	}
}
