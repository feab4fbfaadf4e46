package demo

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"kermalux/calib"
	"kermalux/drivers/benchsim"
	"kermalux/procedures/entry"
)

// TestAccuracyCampaign runs the acceptance sequence, in process on the
// simulator's physics (Seeded), over benches far from the shipped ones:
// slow and overshooting brightness controls, noisy meters, dim light
// behind the lead disk, over range on each meter, fast beams, a
// certificate of another meter, a photometer whose range floor is above
// the dark light (the
// scenario files under testdata/scenarios/campaign say what each is), and
// vignetted dark light (ostrelby-bright-dark), three seeds each. The truth
// is the simulator's own (benchsim.Truth, its beam log).
//
// What it requires, over all calibrated figures: at least 90 % within U
// and every one within 2U (U is meant to hold the truth with about 95 %
// probability, JCGM 100:2008 6.2); a figure that cannot be measured is
// not_measurable, never pass or fail; every session ends by itself within
// its declared beam-on budget; the beam-on timer within 1 % of the
// simulator's true beam-on on the default bench, 1.5 % on the edge ones
// (twice that on the safe side, counting more).
func TestAccuracyCampaign(t *testing.T) {
	if testing.Short() {
		t.Skip("the campaign runs 33 sessions")
	}
	type expect struct {
		notMeasurable []string // quantities that must be not_measurable (at least once)
		uncalibrated  []string // quantities that must not be calibrated
		belowFloor    string   // the meter whose dark must be reported as under its range floor
		timer         float64  // the beam-on timer's allowed relative error over the session
		measured      []string // quantities that must be calibrated (at least once)
	}
	scenarios := []struct {
		file string
		want expect
	}{
		{"../tollemby-rise-room2", expect{timer: 0.01}},
		{"slow-overshoot", expect{}},
		{"slow-rise-lagging", expect{}},
		{"noisy-meters", expect{}},
		{"dim-disk", expect{}},
		{"fast-beam", expect{}},
		{"photometer-over-range", expect{notMeasurable: []string{"conversion_factor", "contrast_ratio"}}},
		{"dosimeter-over-range", expect{notMeasurable: []string{"input_kerma_rate"}}},
		{"certificate-of-another", expect{uncalibrated: []string{"conversion_factor", "contrast_ratio", "non_uniformity"}}},
		{"photometer-floor-above-dark", expect{belowFloor: "photometer"}},
		{"../ostrelby-bright-dark", expect{}},
		// Pulsed fluoroscopy read by a dosimeter that follows the pulses,
		// at 15 pulses a second (100 ms readings on a fixed grid see two
		// phases: the figures 23 % low, outside U) and at 30 (one phase:
		// a quarter low, the readings steady). Read at dithered times, as
		// the drivers poll, the conversion factors are measured within U.
		{"../pelverton-pulsed-scpi", expect{measured: []string{"conversion_factor"}}},
		{"pulsed-30", expect{measured: []string{"conversion_factor", "input_kerma_rate"}}},
	}
	seeds := []int64{11, 12, 13}
	within, total := 0, 0
	var far []string
	for _, sc := range scenarios {
		for _, seed := range seeds {
			name := fmt.Sprintf("%s/seed%d", filepath.Base(sc.file), seed)
			t.Run(name, func(t *testing.T) {
				ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
				defer cancel()
				out, err := Seeded(ctx, SeededOptions{Dir: t.TempDir(), Scenario: filepath.Join("../../testdata/scenarios/campaign", sc.file+".yaml"), Seed: seed, HasSeed: true})
				if err != nil {
					t.Fatal(err)
				}
				sum := out.Summary
				if ctx.Err() != nil || sum.Outcome != "complete" {
					t.Fatalf("outcome %s after %d of %d steps: the session must end by itself", sum.Outcome, sum.Steps, sum.Of)
				}
				if budget := out.Config.Procedure.BeamBudget; sum.BeamOn > budget {
					t.Errorf("beam-on %.1f s, above the declared budget %s", sum.BeamOn.Seconds(), budget)
				}
				now := out.Config.Clock.Mono()
				trueOn := out.Model.BeamOnTime(now)
				// A share of the whole; a session of many short exposures (the
				// over-range retakes, under a second each) is allowed half a
				// reading period per exposure instead, what interpolating
				// the two edges between readings 0.1 s apart leaves.
				// The edge benches (slow, lagging and overshooting
				// signals) are held to 1.5 %, the default bench to 1 %.
				rel := sc.want.timer
				if rel == 0 {
					rel = 0.015
				}
				// A timer that counts more than the true beam-on errs on
				// the safe side (the alarm comes early, never late): it
				// is allowed twice as much, for the exposures the
				// sequence's budget cuts while a slow signal still rises
				// (slow-rise-lagging: 2.1-2.5 % over), whose edges a
				// first-order correction cannot place.
				tol := math.Max(rel*trueOn.Seconds(), 0.05*float64(len(out.Model.BeamLog())))
				if d := (sum.BeamOn - trueOn).Seconds(); d < -tol || d > 2*tol {
					t.Errorf("beam-on timer %.2f s, true beam-on %.2f s: off by %+.1f %%", sum.BeamOn.Seconds(), trueOn.Seconds(), 100*d/trueOn.Seconds())
				}
				truth := out.Model.Truth(now)
				lo, hi := math.Inf(1), math.Inf(-1)
				for _, p := range uniformityPositions(t) {
					v := truth.RelativeLuminance(p[0], p[1])
					lo, hi = math.Min(lo, v), math.Max(hi, v)
				}
				nm := map[string]bool{}
				darkUnder := false
				for _, r := range sum.Results {
					if r.Quantity == "dark_level" && strings.HasPrefix(r.Unit, "cd") && r.BelowRangeFloor && r.RangeFloor > 0 {
						darkUnder = true
					}
					if r.Verdict == string(calib.NotMeasurable) {
						nm[r.Quantity] = true
						continue
					}
					if slices.Contains(sc.want.uncalibrated, r.Quantity) && r.Calibrated {
						t.Errorf("%s %s calibrated with the certificate of another meter", r.Quantity, r.FieldMode)
					}
					want, ok := trueValue(r, truth, (hi-lo)/(hi+lo))
					if !ok || !r.Calibrated {
						continue
					}
					d := math.Abs(r.Value - want)
					total++
					if d <= r.ExpUnc {
						within++
					} else {
						t.Logf("%s %s = %.4g ± %.2g, true %.4g: outside U", r.Quantity, r.FieldMode, r.Value, r.ExpUnc, want)
					}
					if d > 2*r.ExpUnc {
						far = append(far, fmt.Sprintf("%s: %s %s = %.4g ± %.2g, true %.4g", name, r.Quantity, r.FieldMode, r.Value, r.ExpUnc, want))
					}
				}
				if sc.want.belowFloor == "photometer" && !darkUnder {
					t.Errorf("no photometer dark reported under its range floor: %s", verdicts(sum.Results))
				}
				for _, q := range sc.want.notMeasurable {
					if !nm[q] {
						t.Errorf("%s is not not_measurable: %s", q, verdicts(sum.Results))
					}
				}
				// Figures that must be measured, calibrated or not (an
				// uncalibrated one is checked against the truth too: its
				// meters' calibration errors are a fraction of its U).
				for _, q := range sc.want.measured {
					n := 0
					for _, r := range sum.Results {
						want, ok := trueValue(r, truth, (hi-lo)/(hi+lo))
						if r.Quantity != q || r.Verdict == string(calib.NotMeasurable) || !ok {
							continue
						}
						n++
						t.Logf("%s %s = %.4g ± %.2g, true %.4g", r.Quantity, r.FieldMode, r.Value, r.ExpUnc, want)
						if d := math.Abs(r.Value - want); d > 2*r.ExpUnc {
							far = append(far, fmt.Sprintf("%s: %s %s = %.4g ± %.2g, true %.4g", name, r.Quantity, r.FieldMode, r.Value, r.ExpUnc, want))
						}
					}
					if n == 0 {
						t.Errorf("no %s measured: %s", q, verdicts(sum.Results))
					}
				}
			})
		}
	}
	for _, f := range far {
		t.Errorf("beyond 2U: %s", f)
	}
	if total == 0 || float64(within) < 0.9*float64(total) {
		t.Errorf("%d of %d calibrated figures within U, want at least 90 %%", within, total)
	}
	t.Logf("%d of %d calibrated figures within U", within, total)
}

// trueValue is the simulator's true value of a figure (false for the
// figures the campaign does not check).
func trueValue(r entry.Result, truth benchsim.Truth, trueNU float64) (float64, bool) {
	switch r.Quantity {
	case "conversion_factor":
		m, ok := truth.Mode(r.FieldMode)
		return m.ConversionFactor, ok
	case "input_kerma_rate":
		m, ok := truth.Mode(r.FieldMode)
		return m.KermaRate, ok
	case "contrast_ratio":
		return truth.ContrastRatio, true
	case "non_uniformity":
		return trueNU, true
	}
	return 0, false
}

func verdicts(rs []entry.Result) string {
	var b strings.Builder
	for _, r := range rs {
		fmt.Fprintf(&b, "%s %s %s; ", r.Quantity, r.FieldMode, r.Verdict)
	}
	return b.String()
}
