package store

import (
	"context"
	"encoding/json"
	"fmt"
	"math/rand/v2"
	"path/filepath"
	"testing"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/procedures/entry"
)

// fillFixture writes intensifiers × years sessions straight into the
// tables in one transaction (invented data: 4 results a session over 10
// sites), to benchmark the queries without the cost of signing.
func fillFixture(b *testing.B, st *Store, intensifiers, years int) {
	ctx := context.Background()
	tx, err := st.db.BeginTx(ctx, nil)
	if err != nil {
		b.Fatal(err)
	}
	defer tx.Rollback()
	board := fmt.Sprintf("%064x", 1)
	tx.Exec(`INSERT INTO boards(key, name, enrolled) VALUES (?, 'bench', '2026-01-01T00:00:00Z')`, board)
	sess, _ := tx.Prepare(`INSERT INTO sessions(id, board, site, room, model, serial, started_ns, payload, high, head, ended, received) VALUES (?,?,?,?,?,?,?,?,?,?,1,'')`)
	res, _ := tx.Prepare(`INSERT INTO results VALUES (?,?,?,?,?,?,?,?,?)`)
	quantities := []string{"conversion_factor", "non_uniformity", "contrast_ratio", "input_kerma_rate"}
	for i := 0; i < intensifiers; i++ {
		serial := fmt.Sprintf("LX23-%05d", i)
		site := fmt.Sprintf("Site %d", i%10)
		for y := 0; y < years; y++ {
			start := time.Date(2006+y, time.Month(1+i%12), 1+i%28, 9, 0, 0, 0, time.UTC)
			id := fmt.Sprintf("%s-%s", start.Format("20060102T150405Z"), serial)
			s := entry.Session{ID: id, Site: site, Room: "Fluoro 1", IntensifierSerial: serial, Started: start, BoardKey: board}
			p, _ := json.Marshal(s)
			if _, err := sess.Exec(id, board, site, "Fluoro 1", "Lumora XI-23", serial, start.UnixNano(), string(p), 6, journal.ZeroHash()); err != nil {
				b.Fatal(err)
			}
			for q, name := range quantities {
				r := entry.Result{Step: q + 1, Quantity: name, Value: 20 - 0.4*float64(y), Verdict: "pass"}
				rp, _ := json.Marshal(r)
				if _, err := res.Exec(id, q+2, serial, start.UnixNano(), name, "", r.Value, r.Verdict, string(rp)); err != nil {
					b.Fatal(err)
				}
			}
		}
	}
	if err := tx.Commit(); err != nil {
		b.Fatal(err)
	}
}

// BenchmarkQueries: history of one intensifier and session lists, in a
// store of 1,000 intensifiers × 20 yearly sessions (80,000 results).
func BenchmarkQueries(b *testing.B) {
	ctx := context.Background()
	st := openStore(b)
	fillFixture(b, st, 1000, 20)
	rng := rand.New(rand.NewPCG(1, 2))
	b.Run("history", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			h, err := st.History(ctx, fmt.Sprintf("LX23-%05d", rng.IntN(1000)))
			if err != nil || len(h) != 80 {
				b.Fatalf("history: %d points, %v", len(h), err)
			}
		}
	})
	b.Run("sessions-by-serial", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			s, err := st.Sessions(ctx, Query{Serial: fmt.Sprintf("LX23-%05d", rng.IntN(1000))})
			if err != nil || len(s) != 20 {
				b.Fatalf("sessions: %d, %v", len(s), err)
			}
		}
	})
	b.Run("sessions-by-site-and-year", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			y := 2006 + rng.IntN(20)
			s, err := st.Sessions(ctx, Query{Site: fmt.Sprintf("Site %d", rng.IntN(10)),
				From: time.Date(y, 1, 1, 0, 0, 0, 0, time.UTC), To: time.Date(y+1, 1, 1, 0, 0, 0, 0, time.UTC)})
			if err != nil || len(s) != 100 {
				b.Fatalf("sessions: %d, %v", len(s), err)
			}
		}
	})
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
