package journal

import (
	"context"
	"database/sql"
	"encoding/json"
	"path/filepath"
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
// Metric "ratio" is journal appends/s over bare inserts/s (target >= 0.8).
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
	var tj, tb time.Duration
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		rd := benchReading(i)
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
		t1 := time.Now()
		if _, err := j.Append(ctx, sid, entry.KindReading, rd); err != nil {
			b.Fatal(err)
		}
		t2 := time.Now()
		tb += t1.Sub(t0)
		tj += t2.Sub(t1)
	}
	b.StopTimer()
	jr := float64(b.N) / tj.Seconds()
	br := float64(b.N) / tb.Seconds()
	b.ReportMetric(jr, "journal-appends/s")
	b.ReportMetric(br, "bare-inserts/s")
	b.ReportMetric(jr/br, "ratio")
}
