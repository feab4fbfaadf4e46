package demo

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"kermalux/calib"
)

// TestPulseRateSweep runs the two pulsed benches (a dosimeter of 50 ms
// response that follows the pulses, read every 100 ms) at every pulse
// rate of fluoroscopy from 3 to 30 a second, three seeds each, none of
// them a rate the benches were written for but 15 and 30: the conversion
// factors, input kerma rates and contrast ratios measured must hold the
// simulator's truth (none beyond 2U, at least 90 % within U, JCGM
// 100:2008 6.2), and what cannot be measured is not measurable. On a
// fixed reading grid 10 and 30 pulses a second gave steady readings a
// quarter low (README, Known limits); at the low rates the dosimeter
// falls to nothing between pulses and the engine says so.
func TestPulseRateSweep(t *testing.T) {
	if testing.Short() {
		t.Skip("runs 60 sessions")
	}
	dir := t.TempDir()
	var files []string
	for _, bench := range []struct{ file, rate string }{
		{"../../testdata/scenarios/pelverton-pulsed-scpi.yaml", "rate_hz: 15"},
		{"../../testdata/scenarios/campaign/pulsed-30.yaml", "rate_hz: 30"},
	} {
		text, err := os.ReadFile(bench.file)
		if err != nil {
			t.Fatal(err)
		}
		if !strings.Contains(string(text), bench.rate) {
			t.Fatalf("%s: no %q to change", bench.file, bench.rate)
		}
		for _, hz := range []string{"3", "3.75", "5", "6", "7.5", "10", "12.5", "15", "25", "30"} {
			f := filepath.Join(dir, fmt.Sprintf("%s-%spps.yaml", strings.TrimSuffix(filepath.Base(bench.file), ".yaml"), hz))
			if err := os.WriteFile(f, []byte(strings.Replace(string(text), bench.rate, "rate_hz: "+hz, 1)), 0o644); err != nil {
				t.Fatal(err)
			}
			files = append(files, f)
		}
	}
	within, measured, unmeasured := 0, 0, 0
	for _, f := range files {
		for _, seed := range []int64{11, 12, 13} {
			ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
			out, err := Seeded(ctx, SeededOptions{Dir: t.TempDir(), Scenario: f, Seed: seed, HasSeed: true})
			cancel()
			if err != nil {
				t.Fatalf("%s seed %d: %v", filepath.Base(f), seed, err)
			}
			if out.Summary.Outcome != "complete" {
				t.Errorf("%s seed %d: outcome %s", filepath.Base(f), seed, out.Summary.Outcome)
			}
			truth := out.Model.Truth(out.Config.Clock.Mono())
			for _, r := range out.Summary.Results {
				if r.Quantity == "non_uniformity" {
					continue // its truth depends on the positions; the campaign checks it
				}
				want, ok := trueValue(r, truth, 0)
				if !ok {
					continue
				}
				if r.Verdict == string(calib.NotMeasurable) {
					unmeasured++
					continue
				}
				measured++
				d := math.Abs(r.Value - want)
				if d <= r.ExpUnc {
					within++
				}
				if d > 2*r.ExpUnc {
					t.Errorf("%s seed %d: %s %s = %.4g ± %.2g, true %.4g: beyond 2U", filepath.Base(f), seed, r.Quantity, r.FieldMode, r.Value, r.ExpUnc, want)
				}
			}
		}
	}
	t.Logf("%d of %d measured figures within U, %d not measurable", within, measured, unmeasured)
	if measured == 0 || float64(within) < 0.9*float64(measured) {
		t.Errorf("%d of %d measured figures within U, want at least 90 %%", within, measured)
	}
}
