package journal

import (
	"bufio"
	"context"
	"database/sql"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"testing"
	"time"

	"kermalux/firmware-host/journal/journaltest"
	"kermalux/procedures/entry"
)

func benchReading(i int) entry.Reading {
	return entry.Reading{Step: 3, StepID: "kerma-48", FieldMode: "48 cm", Meter: "dosimeter", Quantity: "air_kerma_rate",
		Raw: "MEAS 0.8712 uGy/s OK", RawValue: 0.8712, RawUnit: "µGy/s", Value: 0.8825, Unit: "µGy/s", Status: "ok",
		Corrections: []entry.Correction{{Name: "calibration_coefficient", Factor: 1.002}, {Name: "k_tp", Factor: 1.011}},
		Calibrated:  true, Mono: time.Duration(i) * time.Millisecond, Wall: time.Date(2026, 3, 4, 10, 0, 0, 0, time.UTC), BootID: "b", Used: true}
}

// BenchmarkDurableAppend compares journal appends with bare SQLite inserts
// of the same payload at the same durability (WAL, synchronous=FULL, one
// transaction each), interleaved in one run so both see the same disk.
// Metric "ratio" is journal appends/s over bare inserts/s (issue 11:
// at least 0.85).
//
// With KERMALUX_BENCH_C_APPEND naming the compiled bench-c/append.c (C and
// the system's libsqlite3; bench-c/README.md), the same run also times C
// SQLite at every record, at the same settings: the bare insert of the
// same payload, and a journal-shaped transaction (a record row of the
// journal's columns and sizes and the update of its head, without the
// hashing and signing). The build and go test never need cgo or a C
// compiler: without the variable these metrics are left out.
func BenchmarkDurableAppend(b *testing.B) {
	ctx := context.Background()
	dir := b.TempDir()
	j := openTest(b, dir)
	defer j.Close()
	sid, err := j.Begin(ctx, journaltest.Session(1))
	if err != nil {
		b.Fatal(err)
	}
	bare, err := sql.Open("sqlite", dsn(filepath.Join(dir, "bare.db"), true))
	if err != nil {
		b.Fatal(err)
	}
	defer bare.Close()
	bare.SetMaxOpenConns(1)
	if _, err := bare.Exec(`CREATE TABLE r(id INTEGER PRIMARY KEY, data TEXT NOT NULL)`); err != nil {
		b.Fatal(err)
	}
	c := startCAppend(b, dir, benchReading(0))
	var tj, tb time.Duration
	var rd entry.Reading
	dj, db := make([]time.Duration, 0, b.N), make([]time.Duration, 0, b.N)
	ops := []func(){
		func() { // the bare insert: encode and commit the payload
			t0 := time.Now()
			data, _ := json.Marshal(rd)
			tx, err := bare.BeginTx(ctx, nil)
			if err != nil {
				b.Fatal(err)
			}
			if _, err := tx.Exec(`INSERT INTO r(data) VALUES (?)`, string(data)); err != nil {
				b.Fatal(err)
			}
			if err := tx.Commit(); err != nil {
				b.Fatal(err)
			}
			d := time.Since(t0)
			tb += d
			db = append(db, d)
		},
		func() {
			t0 := time.Now()
			if _, err := j.Append(ctx, sid, entry.KindReading, rd); err != nil {
				b.Fatal(err)
			}
			d := time.Since(t0)
			tj += d
			dj = append(dj, d)
		},
	}
	if c != nil {
		ops = append(ops, func() { b.StopTimer(); c.run(b, 1); b.StartTimer() })
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		rd = benchReading(i)
		// The order turns each record, so that what follows the journal's
		// append (its high-water mark is synced in the background) is
		// each of the others in turn.
		for k := range ops {
			ops[(i+k)%len(ops)]()
		}
	}
	b.StopTimer()
	jr := float64(b.N) / tj.Seconds()
	br := float64(b.N) / tb.Seconds()
	b.ReportMetric(jr, "journal-appends/s")
	b.ReportMetric(br, "bare-inserts/s")
	b.ReportMetric(jr/br, "ratio")
	// Medians of the single records: a burst of another program's disk
	// writes lands on a few records of one kind and moves the totals'
	// ratio far more than the medians'.
	mj, mb := median(dj), median(db)
	b.ReportMetric(mb/mj, "median-ratio")
	if c != nil {
		cb := float64(c.n) / c.bare.Seconds()
		cj := float64(c.n) / c.journal.Seconds()
		b.ReportMetric(cb, "c-bare-inserts/s")
		b.ReportMetric(cj, "c-journal-shaped/s")
		b.ReportMetric(jr/cb, "ratio-to-c-bare")
		b.ReportMetric(br/cb, "go-bare-to-c-bare")
		b.ReportMetric(jr/cj, "ratio-to-c-journal-shaped")
		mcb, mcj := median(c.dbare), median(c.djournal)
		b.ReportMetric(mcb/mj, "median-ratio-to-c-bare")
		b.ReportMetric(mcb/mb, "median-go-bare-to-c-bare")
		b.ReportMetric(mcj/mj, "median-ratio-to-c-journal-shaped")
	}
}

// median is the median of ds in seconds (ds is sorted).
func median(ds []time.Duration) float64 {
	if len(ds) == 0 {
		return 0
	}
	slices.Sort(ds)
	return ds[len(ds)/2].Seconds()
}

// cAppend is the running bench-c/append program.
type cAppend struct {
	in            io.WriteCloser
	out           *bufio.Scanner
	cmd           *exec.Cmd
	n             int
	bare, journal time.Duration
	dbare         []time.Duration // each call's time, for medians
	djournal      []time.Duration
}

// startCAppend starts the C program named by KERMALUX_BENCH_C_APPEND on
// databases in dir with payload rd, or returns nil when it is not set.
func startCAppend(b *testing.B, dir string, rd entry.Reading) *cAppend {
	path := os.Getenv("KERMALUX_BENCH_C_APPEND")
	if path == "" {
		return nil
	}
	payload, err := json.Marshal(rd)
	if err != nil {
		b.Fatal(err)
	}
	cmd := exec.Command(path, dir)
	cmd.Stderr = os.Stderr
	in, err := cmd.StdinPipe()
	if err != nil {
		b.Fatal(err)
	}
	out, err := cmd.StdoutPipe()
	if err != nil {
		b.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		b.Fatalf("KERMALUX_BENCH_C_APPEND=%s: %v", path, err)
	}
	c := &cAppend{in: in, out: bufio.NewScanner(out), cmd: cmd}
	b.Cleanup(func() { in.Close(); cmd.Wait() })
	if _, err := fmt.Fprintf(in, "%s\n", payload); err != nil {
		b.Fatal(err)
	}
	return c
}

// run has C SQLite commit n bare inserts and n journal-shaped records.
func (c *cAppend) run(b *testing.B, n int) {
	for _, m := range []struct {
		mode string
		sum  *time.Duration
		each *[]time.Duration
	}{{"bare", &c.bare, &c.dbare}, {"journal", &c.journal, &c.djournal}} {
		if _, err := fmt.Fprintf(c.in, "%s %d\n", m.mode, n); err != nil {
			b.Fatal(err)
		}
		if !c.out.Scan() {
			b.Fatalf("bench-c append: no answer to %q: %v", m.mode, c.out.Err())
		}
		ns, err := strconv.ParseInt(c.out.Text(), 10, 64)
		if err != nil {
			b.Fatalf("bench-c append: answer %q: %v", c.out.Text(), err)
		}
		*m.sum += time.Duration(ns)
		*m.each = append(*m.each, time.Duration(ns)/time.Duration(max(n, 1)))
	}
	c.n += n
}
