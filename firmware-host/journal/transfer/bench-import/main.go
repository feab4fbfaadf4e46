// Command bench-import writes a board journal of many short invented
// sessions (demo data only: a session record, 8 readings, 3 results and a
// session end each, the shape of BenchmarkImport20k's fleet), for run.sh,
// which bundles and imports it with the kermalux command line of two
// commits in the same run. It is a measuring aid, not part of the program.
package main

import (
	"context"
	"flag"
	"fmt"
	"log/slog"
	"os"
	"time"

	"kermalux/firmware-host/journal"
	"kermalux/procedures/entry"
)

func main() {
	path := flag.String("journal", "", "journal file to create (its board key is made beside it)")
	sessions := flag.Int("sessions", 20000, "how many sessions to write")
	flag.Parse()
	if *path == "" {
		fmt.Fprintln(os.Stderr, "usage: bench-import --journal FILE [--sessions N]")
		os.Exit(2)
	}
	if err := write(context.Background(), *path, *sessions); err != nil {
		slog.Error("bench-import", "err", err)
		os.Exit(1)
	}
}

// write appends n sessions to a new journal at path, each session's records
// after the first in one AppendAll (one transaction, one fsync).
func write(ctx context.Context, path string, n int) error {
	if _, err := os.Stat(path); err == nil {
		return fmt.Errorf("%s exists: give a new file", path)
	}
	j, err := journal.Open(path, journal.Options{SoftwareVersion: "bench-import"})
	if err != nil {
		return err
	}
	defer j.Close()
	t0 := time.Now()
	for k := 0; k < n; k++ {
		start := time.Date(2006+k%20, time.Month(1+k%12), 1+k%28, 9, 0, 0, 0, time.UTC)
		id, err := j.Begin(ctx, entry.Session{Site: fmt.Sprintf("Invented Clinic %d", k%37), Room: fmt.Sprintf("Room %d", 1+k%4),
			IntensifierModel: "Lumora XI-23", IntensifierSerial: fmt.Sprintf("LX23-%05d", k%1000), Engineer: "Field service engineer",
			Procedure: "yearly", Started: start})
		if err != nil {
			return err
		}
		var items []journal.Item
		for i := 0; i < 8; i++ {
			v := 0.87 + 0.001*float64((k+i)%7)
			items = append(items, journal.Item{Kind: entry.KindReading, Payload: entry.Reading{Step: 3, StepID: "kerma-48", FieldMode: "48 cm",
				Meter: "dosimeter", Quantity: "air_kerma_rate", Raw: fmt.Sprintf("MEAS %.4f uGy/s OK", v), RawValue: v, RawUnit: "µGy/s",
				Value: v * 1.013, Unit: "µGy/s", Status: "ok", Corrections: []entry.Correction{{Name: "k_tp", Factor: 1.013}},
				Calibrated: true, Mono: time.Duration(i) * 100 * time.Millisecond, Wall: start.Add(time.Duration(i) * time.Second), Used: true}})
		}
		for i, m := range []string{"32cm", "25cm", "17cm"} {
			g := 150 / float64(i+1) * (1 + 0.001*float64(k%11))
			items = append(items, journal.Item{Kind: entry.KindResult, Payload: entry.Result{Step: i + 1, FieldMode: m,
				Quantity: "conversion_factor", Value: g, Unit: "cd·m⁻²/(µGy·s⁻¹)", ExpUnc: 0.035 * g, K: 2, Verdict: "pass", Calibrated: true}})
		}
		items = append(items, journal.Item{Kind: entry.KindSessionEnd, Payload: entry.SessionEnd{Finished: start.Add(time.Hour), Steps: 3, Outcome: "complete"}})
		if _, err := j.AppendAll(ctx, id, items); err != nil {
			return err
		}
		if (k+1)%2000 == 0 {
			fmt.Fprintf(os.Stderr, "bench-import: %d sessions, %s\n", k+1, time.Since(t0).Round(time.Millisecond))
		}
	}
	return nil
}
