package demo

import (
	"context"
	"fmt"
	"math"
	"strings"
	"testing"
	"time"

	"kermalux/procedures/panel"
)

// TestWholeVisit runs the built-in acceptance sequence, the whole visit,
// on the four-mode simulated intensifier (tollemby-rise-room4-four-modes),
// three seeds: four conversion factors, the 13-point uniformity map, the
// contrast ratio and four input kerma rates, every figure calibrated and
// within 2U of the simulator's truth (JCGM 100:2008 6.2: U holds the
// truth with about 95 % probability), in 23 exposures, with the beam-on
// well under the sequence's 120 s budget (under 100 s, so that a retake
// or two fits). On benches whose readings each need far more beam (slow,
// lagging, overshooting or noisy signals) the budget holds all the same:
// the engine stops a reading where the readings still to come would lose
// their reserve, and what it could not measure is not_measurable, never a
// figure off by more than 2U. The figures are logged for the README.
func TestWholeVisit(t *testing.T) {
	if testing.Short() {
		t.Skip("runs nine whole visits")
	}
	for _, sc := range []struct {
		file    string
		modes   int
		beamMax time.Duration // the beam-on this bench must stay under
		full    bool          // every figure measured
	}{
		{"../../testdata/scenarios/tollemby-rise-room4-four-modes.yaml", 4, 100 * time.Second, true},
		{"../../testdata/scenarios/campaign/slow-rise-lagging.yaml", 0, 120 * time.Second, false},
		{"../../testdata/scenarios/campaign/slow-overshoot.yaml", 0, 120 * time.Second, false},
		{"../../testdata/scenarios/campaign/noisy-meters.yaml", 0, 120 * time.Second, false},
	} {
		for _, seed := range []int64{21, 22, 23} {
			name := fmt.Sprintf("%s/seed%d", strings.TrimSuffix(sc.file[strings.LastIndex(sc.file, "/")+1:], ".yaml"), seed)
			t.Run(name, func(t *testing.T) {
				ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
				defer cancel()
				exposures := 0
				out, err := Seeded(ctx, SeededOptions{Dir: t.TempDir(), Scenario: sc.file, Seed: seed, HasSeed: true,
					OnAsk: func(p panel.Prompt) {
						if p.Action == panel.ActBeamOn {
							exposures++
						}
					}})
				if err != nil {
					t.Fatal(err)
				}
				sum := out.Summary
				if sum.Outcome != "complete" {
					t.Fatalf("outcome %s", sum.Outcome)
				}
				if b := out.Config.Procedure.BeamBudget; b != 120*time.Second {
					t.Errorf("budget %v, want 120 s", b)
				}
				if sum.BeamOn > sc.beamMax {
					t.Errorf("beam-on %.1f s, want under %v", sum.BeamOn.Seconds(), sc.beamMax)
				}
				// The board's timer, which the budget holds, is within 1.5 %
				// of the true beam-on (TestAccuracyCampaign).
				trueOn := out.Model.BeamOnTime(out.Config.Clock.Mono())
				if trueOn > 120*time.Second*1015/1000 {
					t.Errorf("true beam-on %.1f s, above the 120 s budget", trueOn.Seconds())
				}
				truth := out.Model.Truth(out.Config.Clock.Mono())
				lo, hi := math.Inf(1), math.Inf(-1)
				for _, p := range uniformityPositions(t) {
					v := truth.RelativeLuminance(p[0], p[1])
					lo, hi = math.Min(lo, v), math.Max(hi, v)
				}
				count, missed := map[string]int{}, 0
				for _, r := range sum.Results {
					want, ok := trueValue(r, truth, (hi-lo)/(hi+lo))
					if !ok {
						continue
					}
					count[r.Quantity]++
					if r.Verdict == "not_measurable" && !sc.full {
						missed++
						continue
					}
					if !r.Calibrated || r.Verdict == "not_measurable" {
						t.Errorf("%s %s: %s, calibrated %v", r.Quantity, r.FieldMode, r.Verdict, r.Calibrated)
						continue
					}
					if d := math.Abs(r.Value - want); d > 2*r.ExpUnc {
						t.Errorf("%s %s = %.4g ± %.2g, true %.4g: beyond 2U", r.Quantity, r.FieldMode, r.Value, r.ExpUnc, want)
					}
				}
				modes := len(out.Config.FieldModes)
				if sc.modes > 0 && modes != sc.modes {
					t.Errorf("%d field modes, want %d", modes, sc.modes)
				}
				if count["conversion_factor"] != modes || count["input_kerma_rate"] != modes || count["non_uniformity"] != 1 || count["contrast_ratio"] != 1 {
					t.Errorf("figures %v for %d modes", count, modes)
				}
				if want := 2*modes + 13 + 2; sc.full && exposures != want {
					t.Errorf("%d exposures, want %d", exposures, want)
				}
				t.Logf("beam-on %.1f s (true %.1f s), %d exposures, %d modes, %d figures not measurable", sum.BeamOn.Seconds(), trueOn.Seconds(), exposures, modes, missed)
			})
		}
	}
}
