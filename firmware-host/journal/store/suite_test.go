package store_test

import (
	"context"
	"crypto/ed25519"
	"database/sql"
	"encoding/hex"
	"errors"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/store/storetest"
	"kermalux/firmware-host/journal/transfer/wire"
	"kermalux/procedures/entry"
)

// The suite runs every test on both backends (storetest.Each).

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

// enrolledBoard opens the backend's store and a board journal enrolled
// in it as "van-1", and returns them with the store's target (for SQL
// edits of what it holds).
func enrolledBoard(t *testing.T, backend string) (*store.Store, *journal.Journal, string) {
	t.Helper()
	target := storetest.Target(t, backend)
	st := storetest.Open(t, target)
	j := openBoard(t, t.TempDir(), filepath.Join(t.TempDir(), "key"), time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC))
	if err := st.Enroll(context.Background(), j.PublicKey(), "van-1"); err != nil {
		t.Fatal(err)
	}
	return st, j, target
}

// seal returns records after..after+n of session, signed for audience.
func seal(t testing.TB, j *journal.Journal, audience, session string, after int64, n int) *wire.Segment {
	t.Helper()
	recs, err := j.Records(context.Background(), session, after, n)
	if err != nil {
		t.Fatal(err)
	}
	seg, err := wire.Seal(j, audience, recs)
	if err != nil {
		t.Fatal(err)
	}
	return seg
}

func TestGapConflictAndAtomicity(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
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
		st := storetest.New(t, backend)
		if err := st.Enroll(ctx, a.PublicKey(), "van-2"); err != nil {
			t.Fatal(err)
		}
		id := st.ID()
		if _, err := st.Apply(ctx, seal(t, a, id, s.ID, 0, 3), store.ApplyOptions{}); err != nil {
			t.Fatal(err)
		}
		// A replay of what is stored: refused, nothing stored.
		if _, err := st.Apply(ctx, seal(t, a, id, s.ID, 0, 3), store.ApplyOptions{}); !errors.Is(err, store.ErrReplay) {
			t.Errorf("replay: %v", err)
		}
		// A gap: records 6.. while the store holds 1..3.
		if _, err := st.Apply(ctx, seal(t, a, id, s.ID, 5, 3), store.ApplyOptions{}); !errors.Is(err, store.ErrGap) {
			t.Errorf("gap: %v", err)
		}
		// A fork: record 2 differs from the stored record 2; the refusal names it.
		if _, err := st.Apply(ctx, seal(t, b, id, s.ID, 0, 5), store.ApplyOptions{}); !errors.Is(err, store.ErrConflict) || !strings.Contains(err.Error(), "record 2") {
			t.Errorf("fork: %v", err)
		}
		// Signed for another store: refused.
		if _, err := st.Apply(ctx, seal(t, a, "kxs-another", s.ID, 3, 2), store.ApplyOptions{}); !errors.Is(err, store.ErrAudience) {
			t.Errorf("another audience: %v", err)
		}
		// Without an audience only where allowed (a bundle for any store).
		if _, err := st.Apply(ctx, seal(t, a, "", s.ID, 3, 1), store.ApplyOptions{}); !errors.Is(err, store.ErrAudience) {
			t.Errorf("no audience on a push: %v", err)
		}
		// Overlap that continues: stores only the new records.
		got, err := st.Apply(ctx, seal(t, a, id, s.ID, 1, 6), store.ApplyOptions{})
		if err != nil || got.Stored != 4 || got.Duplicates != 2 || got.High != 7 {
			t.Errorf("overlap: %+v %v", got, err)
		}
		// A transaction is all or nothing: a good segment followed by a bad one stores nothing.
		tx, err := st.Begin(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if _, err := tx.Apply(ctx, seal(t, a, id, s.ID, 7, 3), store.ApplyOptions{}); err != nil {
			t.Fatal(err)
		}
		bad := seal(t, a, id, s.ID, 10, 3)
		bad.Sig[5] ^= 1
		if _, err := tx.Apply(ctx, bad, store.ApplyOptions{}); !errors.Is(err, store.ErrRefused) || !strings.Contains(err.Error(), "does not verify") {
			t.Errorf("bad signature: %v", err)
		}
		tx.Rollback()
		m, err := st.Marks(ctx, a.BoardKey(), []string{s.ID})
		if err != nil || m[s.ID].Seq != 7 {
			t.Errorf("after a rolled back transaction the mark is %+v (%v), want 7", m[s.ID], err)
		}
		recs, _ := a.Records(ctx, s.ID, 6, 1)
		if m[s.ID].Head != recs[0].Hash {
			t.Errorf("mark head %s, record 7 hashes to %s", m[s.ID].Head, recs[0].Hash)
		}
		if _, err := st.Marks(ctx, "00"+a.BoardKey()[2:], []string{s.ID}); !errors.Is(err, store.ErrNotEnrolled) {
			t.Errorf("marks for an unknown board: %v", err)
		}
		// Issue 14 item 16: the same key in upper case is not another board.
		if _, err := st.Marks(ctx, strings.ToUpper(a.BoardKey()), []string{s.ID}); err == nil || !strings.Contains(err.Error(), "canonical") {
			t.Errorf("upper-case key: %v", err)
		}
		proofs, err := st.Proofs(ctx, s.ID)
		if err != nil || len(proofs) != 2 || proofs[1].Last != 7 || proofs[1].Head != recs[0].Hash {
			t.Errorf("proofs: %+v %v", proofs, err)
		}
	})
}

func TestSessionQueries(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		st := storetest.New(t, backend)
		keys := filepath.Join(t.TempDir(), "key")
		j := openBoard(t, t.TempDir(), keys, time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC))
		st.Enroll(ctx, j.PublicKey(), "van-1")
		tx, _ := st.Begin(ctx)
		for i := 0; i < 6; i++ {
			s := journaltest.Session(i) // rooms cycle 1..3, serials LX23-0100+i
			s.Started = time.Date(2020+i, 3, 1, 9, 0, 0, 0, time.UTC)
			if i%2 == 1 {
				s.Site = "Ostrelby Infirmary"
			}
			id, _ := j.Begin(ctx, s)
			journaltest.WriteSession(ctx, j, id, 1, true, nil)
			if _, err := tx.Apply(ctx, seal(t, j, st.ID(), id, 0, 0), store.ApplyOptions{}); err != nil {
				t.Fatal(err)
			}
		}
		if err := tx.Commit(); err != nil {
			t.Fatal(err)
		}
		for _, c := range []struct {
			name string
			q    store.Query
			want int
		}{
			{"all", store.Query{}, 6},
			{"site", store.Query{Site: "Ostrelby Infirmary"}, 3},
			{"site and room", store.Query{Site: "Tollemby Rise Clinic", Room: "Fluoro 1"}, 1},
			{"serial", store.Query{Serial: "LX23-0102"}, 1},
			{"from", store.Query{From: time.Date(2023, 1, 1, 0, 0, 0, 0, time.UTC)}, 3},
			{"from to", store.Query{From: time.Date(2021, 3, 1, 9, 0, 0, 0, time.UTC), To: time.Date(2023, 3, 1, 9, 0, 0, 0, time.UTC)}, 2},
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
		hist, err := st.History(ctx, "LX23-0101")
		if err != nil || len(hist) == 0 || hist[0].Result.Quantity == "" {
			t.Errorf("history: %+v %v", hist, err)
		}
		env, err := st.Envelopes(ctx, mustSessions(t, st)[0].ID)
		if err != nil || int64(len(env)) != journaltest.Records(1, true) || env[0].Kind != entry.KindSession {
			t.Errorf("envelopes: %d %v", len(env), err)
		}
	})
}

func mustSessions(t *testing.T, st *store.Store) []store.SessionInfo {
	ss, err := st.Sessions(context.Background(), store.Query{})
	if err != nil || len(ss) == 0 {
		t.Fatalf("sessions: %v", err)
	}
	return ss
}

// TestRevoke: issue 14 item 20. A revoked key's segments are refused and
// named in the store's log; what it sent before stays.
func TestRevoke(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		j := openBoard(t, t.TempDir(), filepath.Join(t.TempDir(), "key"), time.Date(2026, 5, 6, 8, 0, 0, 0, time.UTC))
		id, _ := j.Begin(ctx, journaltest.Session(0))
		journaltest.WriteSession(ctx, j, id, 3, false, nil)
		st := storetest.New(t, backend)
		st.Enroll(ctx, j.PublicKey(), "lost-van")
		if _, err := st.Apply(ctx, seal(t, j, st.ID(), id, 0, 4), store.ApplyOptions{}); err != nil {
			t.Fatal(err)
		}
		if _, err := st.Revoke(ctx, j.PublicKey()); err != nil {
			t.Fatal(err)
		}
		if _, err := st.Revoke(ctx, j.PublicKey()); err == nil || !strings.Contains(err.Error(), "already revoked") {
			t.Errorf("second revoke: %v", err)
		}
		if err := st.CheckBoard(ctx, j.PublicKey(), "192.0.2.7:4000"); !errors.Is(err, store.ErrRevoked) || !strings.Contains(err.Error(), "lost-van") {
			t.Errorf("check revoked board: %v", err)
		}
		if _, err := st.Apply(ctx, seal(t, j, st.ID(), id, 4, 2), store.ApplyOptions{}); !errors.Is(err, store.ErrRevoked) {
			t.Errorf("segment of a revoked board: %v", err)
		}
		log, err := st.Log(ctx)
		if err != nil {
			t.Fatal(err)
		}
		var named bool
		for _, e := range log {
			if e.Board == j.BoardKey() && e.Event == "refused: revoked key" && e.Detail == "192.0.2.7:4000" {
				named = true
			}
		}
		if !named {
			t.Errorf("the store's log does not name the refused push: %+v", log)
		}
		if m, _ := st.Sessions(ctx, store.Query{}); len(m) != 1 || m[0].Records != 4 {
			t.Errorf("what the board sent before revocation: %+v", m)
		}
		bs, _ := st.Boards(ctx)
		if len(bs) != 1 || bs[0].Revoked.IsZero() {
			t.Errorf("boards: %+v", bs)
		}
	})
}

// TestMigrateVersion1 opens an SQLite store written by the first schema
// (as kermalux 0.1 created it) and finds its data under version 2.
func TestMigrateVersion1(t *testing.T) {
	ctx := context.Background()
	path := filepath.Join(t.TempDir(), "old.db")
	db, err := sql.Open("sqlite", path)
	if err != nil {
		t.Fatal(err)
	}
	key := ed25519.NewKeyFromSeed(make([]byte, 32)).Public().(ed25519.PublicKey)
	for _, q := range []string{
		`CREATE TABLE schema_version(version INTEGER NOT NULL, created TEXT NOT NULL)`,
		`INSERT INTO schema_version VALUES (1, '2026-01-01T00:00:00Z')`,
		`CREATE TABLE boards(key TEXT PRIMARY KEY, name TEXT NOT NULL, enrolled TEXT NOT NULL)`,
		`INSERT INTO boards VALUES ('` + hex.EncodeToString(key) + `', 'old-van', '2026-01-01T00:00:00Z')`,
	} {
		if _, err := db.Exec(q); err != nil {
			t.Fatal(err)
		}
	}
	db.Close()
	st := storetest.Open(t, path)
	if v, err := st.Version(ctx); err != nil || v != store.SchemaVersion {
		t.Errorf("version after migration: %d %v", v, err)
	}
	bs, err := st.Boards(ctx)
	if err != nil || len(bs) != 1 || bs[0].Name != "old-van" || !bs[0].Revoked.IsZero() {
		t.Errorf("boards after migration: %+v %v", bs, err)
	}
	if st.ID() == "" {
		t.Error("no store id after migration")
	}
	id := st.ID()
	st.Close()
	if again := storetest.Open(t, path); again.ID() != id {
		t.Errorf("store id changed on reopening: %s -> %s", id, again.ID())
	}
}

// TestSessionStateAcrossSegments: a session's mark, end and results are
// the same whether it arrives in one segment or split anywhere (the
// session row is written with its state after the first segment and
// updated by the later ones).
func TestSessionStateAcrossSegments(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		j := openBoard(t, t.TempDir(), filepath.Join(t.TempDir(), "key"), time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC))
		id, _ := j.Begin(ctx, journaltest.Session(1))
		if err := journaltest.WriteSession(ctx, j, id, 3, true, nil); err != nil {
			t.Fatal(err)
		}
		all, _ := j.Records(ctx, id, 0, 0)
		n := int64(len(all))
		var results int
		for _, r := range all {
			if r.Kind == entry.KindResult {
				results++
			}
		}
		if results == 0 {
			t.Fatal("the fixture session holds no result record")
		}
		for _, cut := range []int64{n, 1, 2, n - 1} {
			st := storetest.New(t, backend)
			st.Enroll(ctx, j.PublicKey(), "van-1")
			for _, part := range [][2]int64{{0, cut}, {cut, n - cut}} {
				if part[1] == 0 {
					continue
				}
				if _, err := st.Apply(ctx, seal(t, j, st.ID(), id, part[0], int(part[1])), store.ApplyOptions{}); err != nil {
					t.Fatalf("cut at %d: %v", cut, err)
				}
				ss := mustSessions(t, st)
				high := part[0] + part[1]
				if ss[0].Records != high || (ss[0].End != nil) != (high == n) {
					t.Errorf("cut at %d, after record %d: mark %d, end %v", cut, high, ss[0].Records, ss[0].End)
				}
			}
			if ss := mustSessions(t, st); ss[0].End == nil || ss[0].End.Outcome == "" {
				t.Errorf("cut at %d: session end %+v", cut, ss[0].End)
			}
			if h, err := st.History(ctx, journaltest.Session(1).IntensifierSerial); err != nil || len(h) != results {
				t.Errorf("cut at %d: %d results in the history, the journal holds %d (%v)", cut, len(h), results, err)
			}
			if recs, err := st.Records(ctx, id, 0, 0); err != nil || int64(len(recs)) != n {
				t.Errorf("cut at %d: %d records stored, want %d (%v)", cut, len(recs), n, err)
			}
		}
	})
}
