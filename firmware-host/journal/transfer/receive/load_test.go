package receive

import (
	"bytes"
	"context"
	"crypto/ed25519"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"os"
	"sync"
	"testing"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/store/storetest"
	"kermalux/firmware-host/journal/transfer/push"
	"kermalux/firmware-host/journal/transfer/wire"
	"kermalux/procedures/entry"
)

// loadBoards is how many boards push at once (issue 11: 20).
const loadBoards = 20

// loadFleet makes boards journals in dirs of their own, each with sessions
// sessions of readings readings per step, built in parallel.
func loadFleet(t testing.TB, boards, sessions, readings int) []*journal.Journal {
	t.Helper()
	js := make([]*journal.Journal, boards)
	var wg sync.WaitGroup
	for i := range js {
		wg.Add(1)
		go func() {
			defer wg.Done()
			js[i] = board(t, t.TempDir(), sessions, readings, false)
		}()
	}
	wg.Wait()
	t.Cleanup(func() {
		for _, j := range js {
			j.Close()
		}
	})
	return js
}

// refusedPush posts, for board j's first session, one good segment of
// records 1..good and then a segment the workstation must refuse: one
// whose record good+3 was changed after it was hashed (tampered: 403,
// named), or one that skips a record (gap: 409). It returns the status.
func refusedPush(t testing.TB, url, audience string, j *journal.Journal, good int, tampered bool) int {
	t.Helper()
	ctx := context.Background()
	recs, err := j.Records(ctx, mustSession(t, j), 0, 0)
	if err != nil || len(recs) < 2*good+2 {
		t.Errorf("board journal: %d records, %v", len(recs), err)
		return 0
	}
	var body bytes.Buffer
	sw, _ := wire.NewWriter(&body, wire.KindPush, audience, j)
	sw.Segment(recs[:good])
	bad := append([]journal.Record(nil), recs[good:2*good]...)
	if tampered {
		bad[2].Payload = bytes.Replace(bad[2].Payload, []byte(`"dosimeter"`), []byte(`"photometer"`), 1)
	} else {
		bad = bad[1:]
	}
	if err := sw.Segment(bad); err != nil {
		t.Error(err)
	}
	sw.Close()
	resp, err := http.Post(url+wire.PathPush, wire.ContentType, &body)
	if err != nil {
		t.Error(err)
		return 0
	}
	resp.Body.Close()
	return resp.StatusCode
}

// TestTwentyBoardsAtOnce: 20 boards push at once into one store, four of
// them from two copies at the same moment (the same records racing), while
// four more enrolled boards send a segment the store must refuse after a
// good one. Every journal record ends up stored exactly once, nothing of a
// refused segment is stored (the good segment before it is), and it all
// ends within the test's deadline (no deadlock).
func TestTwentyBoardsAtOnce(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
		defer cancel()
		good := loadFleet(t, loadBoards, 2, 12)
		bad := loadFleet(t, 4, 1, 12)
		st := workstation(t, backend)
		for i, j := range append(append([]*journal.Journal(nil), good...), bad...) {
			if err := st.Enroll(ctx, j.PublicKey(), fmt.Sprintf("van-%02d", i+1)); err != nil {
				t.Fatal(err)
			}
		}
		failed := &failures{}
		srv := httptest.NewServer(Handler(st, Options{Log: slog.New(failed), Concurrent: 2 * loadBoards}))
		defer srv.Close()
		var wg sync.WaitGroup
		errs := make(chan error, 2*loadBoards)
		for i, j := range good {
			copies := 1
			if i < 4 {
				copies = 2
			}
			for range copies {
				wg.Add(1)
				go func() {
					defer wg.Done()
					if _, err := push.Push(ctx, j, push.Options{URL: srv.URL, SegmentSize: 7, RetryDelay: 20 * time.Millisecond, Retries: 20}); err != nil {
						errs <- fmt.Errorf("board %d: %w", i+1, err)
					}
				}()
			}
		}
		status := make([]int, len(bad))
		for i, j := range bad {
			wg.Add(1)
			go func() {
				defer wg.Done()
				status[i] = refusedPush(t, srv.URL, st.ID(), j, 10, i%2 == 0)
			}()
		}
		done := make(chan struct{})
		go func() { wg.Wait(); close(done) }()
		select {
		case <-done:
		case <-ctx.Done():
			t.Fatal("pushes still running after 2 minutes: deadlock or stall")
		}
		close(errs)
		for err := range errs {
			t.Error(err)
		}
		var total int
		for _, j := range good {
			total += sameRecords(t, j, st)
		}
		for i, j := range bad {
			want := map[bool]int{true: http.StatusForbidden, false: http.StatusConflict}[i%2 == 0]
			if status[i] != want {
				t.Errorf("refused push %d: HTTP %d, want %d", i+1, status[i], want)
			}
			recs, err := st.Records(ctx, mustSession(t, j), 0, 0)
			if err != nil || len(recs) != 10 {
				t.Errorf("refused push %d: %d records stored (%v), want the 10 of the good segment before the refused one", i+1, len(recs), err)
			}
			proofs, _ := st.Proofs(ctx, mustSession(t, j))
			if len(proofs) != 1 || proofs[0].Last != 10 {
				t.Errorf("refused push %d: signed heads stored %+v, want only the good segment's", i+1, proofs)
			}
		}
		// A race between the two copies is answered as what it is (409: the
		// other stored it; ask the marks again), never as a failure.
		for _, reason := range failed.reasons {
			t.Errorf("the receiver failed under load: %s", reason)
		}
		t.Logf("%s: %d records of %d boards stored once each", backend, total, loadBoards)
	})
}

// failures is a log handler that keeps the reasons of the requests the
// receiver answered with a server error (status 5xx).
type failures struct {
	mu      sync.Mutex
	reasons []string
}

func (f *failures) Enabled(context.Context, slog.Level) bool { return true }
func (f *failures) WithAttrs([]slog.Attr) slog.Handler       { return f }
func (f *failures) WithGroup(string) slog.Handler            { return f }

func (f *failures) Handle(_ context.Context, r slog.Record) error {
	var status int64
	var reason string
	r.Attrs(func(a slog.Attr) bool {
		switch a.Key {
		case "status":
			status = a.Value.Int64()
		case "reason":
			reason = a.Value.String()
		}
		return true
	})
	if status >= 500 {
		f.mu.Lock()
		f.reasons = append(f.reasons, reason)
		f.mu.Unlock()
	}
	return nil
}

var loadJournals struct {
	once sync.Once
	dirs []string
}

// loadBenchFleet builds (once per run) loadBoards journals of one session
// with 5,000 readings each (100,000 in all, as BenchmarkPush100k's one
// board), appended 1,000 to a transaction, and opens them.
func loadBenchFleet(b *testing.B) []*journal.Journal {
	ctx := context.Background()
	open := func(dir string) *journal.Journal { return openBenchJournal(b, dir) }
	loadJournals.once.Do(func() {
		loadJournals.dirs = make([]string, loadBoards)
		var wg sync.WaitGroup
		for i := range loadJournals.dirs {
			wg.Add(1)
			go func() {
				defer wg.Done()
				dir, err := os.MkdirTemp("", "kx-load-bench-")
				if err != nil {
					b.Error(err)
					return
				}
				j := open(dir)
				defer j.Close()
				id, err := j.Begin(ctx, journaltest.Session(i))
				if err != nil {
					b.Error(err)
					return
				}
				rng := rand.New(rand.NewPCG(uint64(i), 12))
				items := make([]journal.Item, 1000)
				for k := 0; k < 5; k++ {
					for n := range items {
						items[n] = journal.Item{Kind: entry.KindReading, Payload: benchReading(k*1000+n, rng)}
					}
					if _, err := j.AppendAll(ctx, id, items); err != nil {
						b.Error(err)
						return
					}
				}
				loadJournals.dirs[i] = dir
			}()
		}
		wg.Wait()
	})
	if b.Failed() {
		b.FailNow()
	}
	js := make([]*journal.Journal, loadBoards)
	for i, dir := range loadJournals.dirs {
		js[i] = open(dir)
	}
	b.Cleanup(func() {
		for _, j := range js {
			j.Close()
		}
	})
	return js
}

// BenchmarkLoad20Boards: 20 boards push 5,000 readings each at once into
// one store (SQLite, and PostgreSQL when KERMALUX_TEST_POSTGRES is set),
// beside one board pushing the same 100,000 readings alone into the same
// backend in the same run. Metric: readings stored per second.
func BenchmarkLoad20Boards(b *testing.B) {
	ctx := context.Background()
	fleet := loadBenchFleet(b)
	one := readingsJournal(b)
	defer one.Close()
	for _, backend := range storetest.Backends {
		b.Run(backend+"/20-boards", func(b *testing.B) {
			var stored int64
			for i := 0; i < b.N; i++ {
				b.StopTimer()
				var keys []ed25519.PublicKey
				for _, j := range fleet {
					keys = append(keys, j.PublicKey())
				}
				st := workstation(b, backend, keys...)
				srv := httptest.NewServer(Handler(st, Options{Log: quiet, Concurrent: loadBoards}))
				b.StartTimer()
				var wg sync.WaitGroup
				sent := make([]int64, len(fleet))
				for k, j := range fleet {
					wg.Add(1)
					go func() {
						defer wg.Done()
						sum, err := push.Push(ctx, j, push.Options{URL: srv.URL})
						if err != nil {
							b.Error(err)
						}
						sent[k] = sum.Sent
					}()
				}
				wg.Wait()
				b.StopTimer()
				for _, n := range sent {
					stored += n
				}
				srv.Close()
				st.Close()
				b.StartTimer()
			}
			b.ReportMetric(float64(stored)/b.Elapsed().Seconds(), "readings/s")
		})
		b.Run(backend+"/1-board-baseline", func(b *testing.B) {
			var stored int64
			for i := 0; i < b.N; i++ {
				b.StopTimer()
				st := workstation(b, backend, one.PublicKey())
				srv := httptest.NewServer(Handler(st, Options{Log: quiet}))
				b.StartTimer()
				sum, err := push.Push(ctx, one, push.Options{URL: srv.URL})
				if err != nil {
					b.Fatal(err)
				}
				b.StopTimer()
				stored += sum.Sent
				srv.Close()
				st.Close()
				b.StartTimer()
			}
			b.ReportMetric(float64(stored)/b.Elapsed().Seconds(), "readings/s")
		})
	}
}
