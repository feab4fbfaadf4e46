package receive

import (
	"context"
	"crypto/ed25519"
	"database/sql"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"runtime/metrics"
	"sync"
	"testing"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/store/storetest"
	"kermalux/firmware-host/journal/transfer/wire"
	"kermalux/procedures/entry"
)

// fleetSessions returns session k of an invented fleet (demo data only):
// a session record, 8 readings, 3 results and a session_end, chained and
// hashed the journal's way.
func fleetSession(k int, rng *rand.Rand) []journal.Record {
	start := time.Date(2006+k%20, time.Month(1+k%12), 1+k%28, 9, 0, 0, 0, time.UTC)
	id := fmt.Sprintf("%s-fleet-%05d", start.Format("20060102T150405Z"), k)
	var payloads []struct {
		kind entry.Kind
		v    any
	}
	add := func(kind entry.Kind, v any) {
		payloads = append(payloads, struct {
			kind entry.Kind
			v    any
		}{kind, v})
	}
	add(entry.KindSession, entry.Session{ID: id, Site: fmt.Sprintf("Invented Clinic %d", k%37), Room: fmt.Sprintf("Room %d", 1+k%4),
		IntensifierModel: "Lumora XI-23", IntensifierSerial: fmt.Sprintf("LX23-%05d", k%1000), Engineer: "Field service engineer",
		Procedure: "yearly", Started: start})
	for i := 0; i < 8; i++ {
		add(entry.KindReading, benchReading(i, rng))
	}
	for i, m := range []string{"32cm", "25cm", "17cm"} {
		g := 150 / float64(i+1) * (1 + 0.02*rng.NormFloat64())
		add(entry.KindResult, entry.Result{Step: i + 1, FieldMode: m, Quantity: "conversion_factor", Value: g, Unit: "cd·m⁻²/(µGy·s⁻¹)",
			ExpUnc: 0.035 * g, K: 2, Verdict: "pass", Calibrated: true})
	}
	add(entry.KindSessionEnd, entry.SessionEnd{Finished: start.Add(time.Hour), Steps: 3, Outcome: "complete"})
	return chain(id, start, time.Minute, "8f6001d7-2449-477c-a949-26ea910c4d7a", payloads)
}

// chain makes records of session id from payloads, one every step from
// start, linked by hash as a board's journal links them.
func chain(id string, start time.Time, step time.Duration, boot string, payloads []struct {
	kind entry.Kind
	v    any
}) []journal.Record {
	prev := journal.ZeroHash()
	recs := make([]journal.Record, len(payloads))
	for i, p := range payloads {
		body, _ := json.Marshal(p.v)
		recs[i] = journal.Record{Seq: int64(i + 1), Session: id, Kind: p.kind, Wall: start.Add(time.Duration(i) * step).Format(journal.WallFormat),
			Mono: int64(i) * int64(step), BootID: boot, Payload: body, Prev: prev}
		h := recs[i].ComputeHash()
		recs[i].Hash = hex.EncodeToString(h[:])
		prev = recs[i].Hash
	}
	return recs
}

type keySigner struct{ priv ed25519.PrivateKey }

func (s keySigner) PublicKey() ed25519.PublicKey { return s.priv.Public().(ed25519.PublicKey) }
func (s keySigner) Sign(m []byte) []byte         { return ed25519.Sign(s.priv, m) }

var fleetBundle struct {
	once    sync.Once
	path    string
	signer  keySigner
	records int64
}

// fleet writes (once per run) a bundle of 20,000 sessions to a file.
func fleet(b *testing.B) (string, keySigner, int64) {
	fleetBundle.once.Do(func() {
		seed := make([]byte, 32)
		seed[0] = 7
		fleetBundle.signer = keySigner{ed25519.NewKeyFromSeed(seed)}
		dir, err := os.MkdirTemp("", "kx-fleet-")
		if err != nil {
			b.Fatal(err)
		}
		fleetBundle.path = filepath.Join(dir, "fleet.kxb")
		f, _ := os.Create(fleetBundle.path)
		w, _ := wire.NewWriter(f, wire.KindBundle, "", fleetBundle.signer)
		rng := rand.New(rand.NewPCG(3, 4))
		for k := 0; k < 20000; k++ {
			recs := fleetSession(k, rng)
			if err := w.Segment(recs); err != nil {
				b.Fatal(err)
			}
			fleetBundle.records += int64(len(recs))
		}
		w.Close()
		f.Close()
	})
	return fleetBundle.path, fleetBundle.signer, fleetBundle.records
}

// peakMemory runs f while sampling every 2 ms the Go heap in use and the
// process's resident memory (/proc/self/statm: it includes SQLite's page
// cache, which the pure-Go driver allocates outside the Go heap), and
// returns their peaks above what was in use before f.
func peakMemory(f func()) (heap, rss uint64) {
	runtime.GC()
	samples := []metrics.Sample{{Name: "/memory/classes/heap/objects:bytes"}}
	metrics.Read(samples)
	h0, r0 := samples[0].Value.Uint64(), residentBytes()
	stop := make(chan struct{})
	done := make(chan struct{})
	go func() {
		defer close(done)
		tk := time.NewTicker(2 * time.Millisecond)
		defer tk.Stop()
		for {
			metrics.Read(samples)
			h, r := samples[0].Value.Uint64(), residentBytes()
			heap = max(heap, h-min(h0, h))
			rss = max(rss, r-min(r0, r))
			select {
			case <-stop:
				return
			case <-tk.C:
			}
		}
	}()
	f()
	close(stop)
	<-done
	return heap, rss
}

// residentBytes is the process's resident set size.
func residentBytes() uint64 {
	b, err := os.ReadFile("/proc/self/statm")
	if err != nil {
		return 0
	}
	var size, res uint64
	fmt.Sscan(string(b), &size, &res)
	return res * uint64(os.Getpagesize())
}

// BenchmarkImport20k imports a bundle of 20,000 sessions (13 records each)
// into a fresh SQLite store, beside its baseline in the same run: reading
// the bundle file through (what moving its bytes costs). It reports the
// peak memory the import held (issue 11: under 64 MB).
func BenchmarkImport20k(b *testing.B) {
	path, signer, records := fleet(b)
	fi, _ := os.Stat(path)
	b.Run("import", func(b *testing.B) {
		var heap, total uint64
		var cpu time.Duration
		for i := 0; i < b.N; i++ {
			b.StopTimer()
			st := workstation(b, "sqlite", signer.PublicKey())
			f, _ := os.Open(path)
			c := cpuTime()
			b.StartTimer()
			h, t := peakMemory(func() {
				sum, err := Import(context.Background(), st, f, "fleet.kxb", nil)
				if err != nil || sum.Stored != records {
					b.Fatalf("import: %+v %v", sum, err)
				}
			})
			b.StopTimer()
			cpu += cpuTime() - c
			heap, total = max(heap, h), max(total, t)
			f.Close()
			st.Close()
			b.StartTimer()
		}
		b.ReportMetric(cpu.Seconds()/float64(b.N), "cpu-s/op")
		b.ReportMetric(float64(heap)/(1<<20), "peak-heap-MB")
		b.ReportMetric(float64(total)/(1<<20), "peak-rss-MB")
		b.ReportMetric(float64(fi.Size())/float64(records), "B/record")
	})
	b.Run("v1-per-record-baseline", func(b *testing.B) {
		var heap uint64
		var cpu time.Duration
		for i := 0; i < b.N; i++ {
			b.StopTimer()
			target := storetest.Target(b, "sqlite")
			st := storetest.Open(b, target)
			if err := st.Enroll(context.Background(), signer.PublicKey(), "fleet"); err != nil {
				b.Fatal(err)
			}
			st.Close()
			db, err := sql.Open("sqlite", "file:"+target+"?_pragma=busy_timeout(10000)&_pragma=journal_mode(WAL)&_pragma=synchronous(FULL)&_pragma=foreign_keys(1)&_pragma=cache_size(-16384)&_txlock=immediate")
			if err != nil {
				b.Fatal(err)
			}
			db.SetMaxOpenConns(1)
			f, _ := os.Open(path)
			c := cpuTime()
			b.StartTimer()
			h, _ := peakMemory(func() {
				n, err := importV1Way(context.Background(), db, f)
				if err != nil || n != records {
					b.Fatalf("v1-way import: %d records, %v", n, err)
				}
			})
			b.StopTimer()
			cpu += cpuTime() - c
			heap = max(heap, h)
			f.Close()
			db.Close()
			b.StartTimer()
		}
		b.ReportMetric(cpu.Seconds()/float64(b.N), "cpu-s/op")
		b.ReportMetric(float64(heap)/(1<<20), "peak-heap-MB")
	})
	b.Run("read-file", func(b *testing.B) {
		b.SetBytes(fi.Size())
		for i := 0; i < b.N; i++ {
			f, _ := os.Open(path)
			io.Copy(io.Discard, f)
			f.Close()
		}
	})
}

// importV1Way is the baseline of BenchmarkImport20k: the version 1 import's
// way, which is no longer in the program (its bundle format is gone). It
// reads the whole bundle into memory first (version 1's ReadBundle held
// every batch), checks each segment's signature once (as version 1 checked
// each batch's), then stores it in one transaction with version 1's
// statements (applyTx before the sync v2 commit): the board and the
// session looked up per segment, one INSERT per record (prepared once per
// segment), the session, each result and the session end written as
// their records come, and the session's mark updated at the end. It
// decodes the v2 stream rather than version 1's JSON lines, so it is
// faster than version 1 was: the ratio understates the gain.
func importV1Way(ctx context.Context, db *sql.DB, r io.Reader) (int64, error) {
	rd, err := wire.ReadPreamble(r, "fleet.kxb")
	if err != nil {
		return 0, err
	}
	var segs []*wire.Segment
	for {
		seg, err := rd.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return 0, err
		}
		if err := seg.Verify(rd.Preamble().Board); err != nil {
			return 0, err
		}
		segs = append(segs, seg)
	}
	tx, err := db.BeginTx(ctx, nil)
	if err != nil {
		return 0, err
	}
	defer tx.Rollback()
	board := rd.Preamble().BoardHex()
	var n int64
	for _, seg := range segs {
		var key string
		if err := tx.QueryRowContext(ctx, `SELECT key FROM boards WHERE key = ?`, board).Scan(&key); err != nil {
			return 0, err
		}
		var high int64
		switch err := tx.QueryRowContext(ctx, `SELECT high FROM sessions WHERE id = ?`, seg.Session).Scan(&high); {
		case errors.Is(err, sql.ErrNoRows):
		case err != nil:
			return 0, err
		default:
			return 0, fmt.Errorf("session %s already stored", seg.Session)
		}
		ins, err := tx.PrepareContext(ctx, `INSERT INTO records VALUES (?,?,?,?,?,?,?,?,?,?)`)
		if err != nil {
			return 0, err
		}
		var serial string
		var startedNs int64
		for i := range seg.Records {
			r := &seg.Records[i]
			if _, err := ins.ExecContext(ctx, r.Session, r.Seq, string(r.Kind), r.Wall, r.Mono, r.BootID, string(r.Payload), r.Prev, r.Hash, r.Sig); err != nil {
				return 0, err
			}
			switch r.Kind {
			case entry.KindSession:
				var ss entry.Session
				if err := json.Unmarshal(r.Payload, &ss); err != nil {
					return 0, err
				}
				serial, startedNs = ss.IntensifierSerial, ss.Started.UnixNano()
				if _, err := tx.ExecContext(ctx, `INSERT INTO sessions(id, board, site, room, model, serial, started_ns, payload, high, head, received)
					VALUES (?,?,?,?,?,?,?,?,0,?,?)`, seg.Session, board, ss.Site, ss.Room, ss.IntensifierModel, ss.IntensifierSerial,
					startedNs, string(r.Payload), journal.ZeroHash(), time.Now().UTC().Format(time.RFC3339)); err != nil {
					return 0, err
				}
			case entry.KindResult:
				var res entry.Result
				if err := json.Unmarshal(r.Payload, &res); err != nil {
					return 0, err
				}
				if _, err := tx.ExecContext(ctx, `INSERT INTO results VALUES (?,?,?,?,?,?,?,?,?)`, r.Session, r.Seq, serial, startedNs,
					res.Quantity, res.FieldMode, res.Value, res.Verdict, string(r.Payload)); err != nil {
					return 0, err
				}
			case entry.KindSessionEnd:
				if _, err := tx.ExecContext(ctx, `UPDATE sessions SET ended = 1, end_payload = ? WHERE id = ?`, string(r.Payload), seg.Session); err != nil {
					return 0, err
				}
			}
			n++
		}
		ins.Close()
		if _, err := tx.ExecContext(ctx, `UPDATE sessions SET high = ?, head = ? WHERE id = ?`, seg.Last(), seg.Head(), seg.Session); err != nil {
			return 0, err
		}
	}
	return n, tx.Commit()
}
