package receive

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/transfer/push"
	"kermalux/procedures/entry"
)

var bigJournal struct {
	dir   string
	n     int64
	bytes int64 // the records' bytes as stored (payload and envelope)
}

// readingsJournal builds (once per run) a journal of one session with
// 100,000 readings, appended 1,000 to a transaction.
func readingsJournal(b *testing.B) *journal.Journal {
	ctx := context.Background()
	open := func(dir string) *journal.Journal { return openBenchJournal(b, dir) }
	if bigJournal.dir != "" {
		return open(bigJournal.dir)
	}
	dir, err := os.MkdirTemp("", "kx-push-bench-")
	if err != nil {
		b.Fatal(err)
	}
	j := open(dir)
	id, err := j.Begin(ctx, journaltest.Session(0))
	if err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(11, 12))
	items := make([]journal.Item, 1000)
	for k := 0; k < 100; k++ {
		for i := range items {
			items[i] = journal.Item{Kind: entry.KindReading, Payload: benchReading(k*1000+i, rng)}
		}
		if _, err := j.AppendAll(ctx, id, items); err != nil {
			b.Fatal(err)
		}
	}
	recs, _ := j.Records(ctx, id, 0, 0)
	for _, r := range recs {
		bigJournal.bytes += int64(len(r.Canonical()) + len(r.Hash) + len(r.Sig))
	}
	bigJournal.dir, bigJournal.n = dir, int64(len(recs))
	return j
}

// openBenchJournal opens the benchmark journal in dir.
func openBenchJournal(b *testing.B, dir string) *journal.Journal {
	j, err := journal.Open(filepath.Join(dir, "journal.db"), journal.Options{KeyDir: filepath.Join(dir, "key"),
		Clock: clock.NewManual(time.Date(2026, 5, 6, 8, 0, 0, 0, time.UTC))})
	if err != nil {
		b.Fatal(err)
	}
	return j
}

// benchReading is a reading the size of the demo's, its raw and corrected
// values drawn with 1 % noise (invented values: a dosimeter's reading
// scatter, not a measurement).
func benchReading(i int, rng *rand.Rand) entry.Reading {
	raw := 0.8712 * (1 + 0.01*rng.NormFloat64())
	raw = math.Round(raw*1e4) / 1e4
	return entry.Reading{Step: 7, StepID: "kerma/rqa5-48", FieldMode: "48 cm", Meter: "dosimeter", Quantity: "air_kerma_rate",
		Raw: fmt.Sprintf("RD %.4E uGy/s OK", raw), RawValue: raw, RawUnit: "uGy/s", Value: raw * 1.008 * 1.0336164069506417 * 0.970873786407767 * 1.0412, Unit: "µGy/s", Status: "ok",
		Corrections: []entry.Correction{
			{Name: "calibration_coefficient", Factor: 1.008, Note: "certificate QX-26-0412, interpolated at tube voltage 70 kV (half-value layer not measured)"},
			{Name: "k_tp", Factor: 1.0336164069506417, Note: "T 23.5 °C, P 99.20 kPa; reference 20.0 °C, 101.325 kPa"},
			{Name: "backscatter", Factor: 0.970873786407767, Note: "B = 1.03 entered; chamber on the input face, grid removed"},
			{Name: "inverse_square", Factor: 1.0412, Note: "chamber 35 mm in front of the input plane"}},
		Certificate: "QX-26-0412", Calibrated: true, Mono: time.Duration(i) * 100 * time.Millisecond,
		Wall: time.Date(2026, 5, 6, 8, 0, 0, 0, time.UTC).Add(time.Duration(i) * 100 * time.Millisecond), BootID: "8f6001d7-2449-477c-a949-26ea910c4d7a", Used: true}
}

// BenchmarkPush100k pushes 100,000 readings over loopback HTTP into a
// fresh SQLite store, the receiver included (target: at most 2 s), beside
// its baselines in the same run: a raw HTTP copy of the records' bytes as
// stored (what the records weigh without the protocol) and of the bytes
// the push put on the wire.
func BenchmarkPush100k(b *testing.B) {
	ctx := context.Background()
	j := readingsJournal(b)
	defer j.Close()
	var wireBytes int64
	b.Run("push", func(b *testing.B) {
		var cpu time.Duration
		for i := 0; i < b.N; i++ {
			b.StopTimer()
			st := workstation(b, "sqlite", j.PublicKey())
			srv := httptest.NewServer(Handler(st, Options{Log: quiet}))
			c := cpuTime()
			b.StartTimer()
			sum, err := push.Push(ctx, j, push.Options{URL: srv.URL})
			if err != nil {
				b.Fatal(err)
			}
			b.StopTimer()
			cpu += cpuTime() - c
			if sum.Sent != bigJournal.n {
				b.Fatalf("pushed %d records, want %d", sum.Sent, bigJournal.n)
			}
			wireBytes = sum.WireBytes
			srv.Close()
			st.Close()
			b.StartTimer()
		}
		b.ReportMetric(float64(wireBytes)/float64(bigJournal.n), "wire-B/reading")
		b.ReportMetric(float64(bigJournal.bytes)/float64(bigJournal.n), "stored-B/reading")
		b.ReportMetric(cpu.Seconds()/float64(b.N), "cpu-s/op")
	})
	raw := func(name string, n func() int64) {
		b.Run(name, func(b *testing.B) {
			srv := httptest.NewServer(http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) { io.Copy(io.Discard, r.Body) }))
			defer srv.Close()
			data := bytes.Repeat([]byte{'x'}, int(n()))
			b.SetBytes(int64(len(data)))
			for i := 0; i < b.N; i++ {
				resp, err := http.Post(srv.URL, "application/octet-stream", bytes.NewReader(data))
				if err != nil {
					b.Fatal(err)
				}
				resp.Body.Close()
			}
		})
	}
	raw("raw-copy-of-stored-bytes", func() int64 { return bigJournal.bytes })
	raw("raw-copy-of-wire-bytes", func() int64 { return max(wireBytes, 1) })
}

// cpuTime is the process's user+system CPU time.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
