package transfer

import (
	"context"
	"net/http/httptest"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/procedures/entry"
)

var bigJournal struct {
	dir string
	n   int64
}

// readingsJournal builds (once per run) a journal of one session with
// 100,000 readings, appended 1,000 to a transaction.
func readingsJournal(b *testing.B) *journal.Journal {
	ctx := context.Background()
	open := func(dir string) *journal.Journal {
		j, err := journal.Open(filepath.Join(dir, "journal.db"), journal.Options{KeyDir: filepath.Join(dir, "key"),
			Clock: clock.NewManual(time.Date(2026, 5, 6, 8, 0, 0, 0, time.UTC))})
		if err != nil {
			b.Fatal(err)
		}
		return j
	}
	if bigJournal.dir != "" {
		return open(bigJournal.dir)
	}
	dir, err := filepathTemp()
	if err != nil {
		b.Fatal(err)
	}
	j := open(dir)
	id, err := j.Begin(ctx, journaltest.Session(0))
	if err != nil {
		b.Fatal(err)
	}
	items := make([]journal.Item, 1000)
	for k := 0; k < 100; k++ {
		for i := range items {
			items[i] = journal.Item{Kind: entry.KindReading, Payload: benchReading(k*1000 + i)}
		}
		if _, err := j.AppendAll(ctx, id, items); err != nil {
			b.Fatal(err)
		}
	}
	bigJournal.dir, bigJournal.n = dir, 100001
	return j
}

// BenchmarkPush100k pushes 100,000 readings over loopback HTTP into a
// fresh store (target: under 5 s per push).
func BenchmarkPush100k(b *testing.B) {
	ctx := context.Background()
	j := readingsJournal(b)
	defer j.Close()
	var cpu time.Duration // process CPU time (user+system) spent pushing: the machine may be shared
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		b.StopTimer()
		st := workstation(b, j.PublicKey())
		srv := httptest.NewServer(Handler(st, quiet))
		c := cpuTime()
		b.StartTimer()
		sum, err := Push(ctx, j, PushOptions{URL: srv.URL})
		if err != nil {
			b.Fatal(err)
		}
		if sum.Sent != bigJournal.n {
			b.Fatalf("pushed %d records, want %d", sum.Sent, bigJournal.n)
		}
		b.StopTimer()
		cpu += cpuTime() - c
		srv.Close()
		st.Close()
		b.StartTimer()
	}
	b.ReportMetric(float64(bigJournal.n)*float64(b.N)/b.Elapsed().Seconds(), "records/s")
	b.ReportMetric(cpu.Seconds()/float64(b.N), "cpu-s/op")
}

func filepathTemp() (string, error) { return os.MkdirTemp("", "kx-push-bench-") }

// cpuTime is the process's user+system CPU time.
func cpuTime() time.Duration {
	var ru syscall.Rusage
	syscall.Getrusage(syscall.RUSAGE_SELF, &ru)
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// benchReading is a reading the size of the demo's (about 1.3 kB a
// record with its envelope, hashes and signature): invented values.
func benchReading(i int) entry.Reading {
	return entry.Reading{Step: 7, StepID: "kerma/rqa5-48", FieldMode: "48 cm", Meter: "dosimeter", Quantity: "air_kerma_rate",
		Raw: "RD 8.7120E-01 uGy/s OK", RawValue: 0.8712, RawUnit: "uGy/s", Value: 0.88253, Unit: "µGy/s", Status: "ok",
		Corrections: []entry.Correction{
			{Name: "calibration_coefficient", Factor: 1.008, Note: "certificate QX-26-0412, interpolated at tube voltage 70 kV (half-value layer not measured)"},
			{Name: "k_tp", Factor: 1.0336164069506417, Note: "T 23.5 °C, P 99.20 kPa; reference 20.0 °C, 101.325 kPa"},
			{Name: "backscatter", Factor: 0.970873786407767, Note: "B = 1.03 entered; chamber on the input face, grid removed"},
			{Name: "inverse_square", Factor: 1.0412, Note: "chamber 35 mm in front of the input plane"}},
		Certificate: "QX-26-0412", Calibrated: true, Mono: time.Duration(i) * time.Millisecond,
		Wall: time.Date(2026, 5, 6, 8, 0, 0, 0, time.UTC).Add(time.Duration(i) * time.Millisecond), BootID: "8f6001d7-2449-477c-a949-26ea910c4d7a", Used: true}
}
