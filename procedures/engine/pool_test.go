package engine

import (
	"context"
	"encoding/json"
	"strings"
	"testing"
	"time"

	"kermalux/procedures/panel"
)

// poolSteps is a uniformity map of four positions and a conversion
// factor reading, all counting against one beam-on budget of budget.
func poolSteps(budget time.Duration) []Step {
	pool := []BeamPool{{ID: "", Budget: budget}}
	return []Step{
		{ID: "safety", Kind: Checklist, Safety: true, Items: safetyItems},
		{ID: "dark", Kind: Measure, Text: "Keep the beam off. Press the switch for the dark reading.", Measure: &MeasureSpec{Meters: []string{Photometer}, Duration: 2 * time.Second}},
		{ID: "spots", Kind: Measure, Text: "Press the switch, then step on the pedal.", Pools: pool,
			Measure: &MeasureSpec{Meters: []string{Photometer}, Beam: true, MaxBeam: 20 * time.Second, MinBeam: 4 * time.Second,
				Positions: []Position{{Label: "centre"}, {Label: "up 0.5 r", Radius: 0.5, Angle: 90}, {Label: "down 0.5 r", Radius: 0.5, Angle: 270}, {Label: "left 0.5 r", Radius: 0.5, Angle: 180}}}},
		{ID: "cf", Kind: Measure, Text: "Press the switch, then step on the pedal.", Pools: pool,
			Measure: &MeasureSpec{Meters: []string{Dosimeter, Photometer}, Beam: true, MaxBeam: 20 * time.Second, MinBeam: 5 * time.Second}},
	}
}

// TestBudgetPoolKeepsReserves: a reading that does not settle (a
// brightness control still falling) may use what its pool has above the
// reserves of the readings still to come, not its whole max_beam: its
// attempts stop there (and its retake, with a steady beam, is accepted
// within that), the readings after it are measured, and the session's
// beam-on stays within the budget.
// Without pools, the first position would take its 20 s and the session
// some 40 s of a 34 s budget.
func TestBudgetPoolKeepsReserves(t *testing.T) {
	const budget = 34 * time.Second
	r := newRig(poolSteps(budget))
	// Meters quick enough that a settled reading fits its reserve.
	r.phot.resp, r.dos.resp = 100*time.Millisecond, 100*time.Millisecond
	beams := 0
	r.reply = func(p panel.Prompt) (panel.Response, bool) {
		if p.Action == panel.ActBeamOn {
			beams++
			r.phys.mu.Lock()
			if beams == 1 {
				r.phys.overshoot, r.phys.tau = 3, 6*time.Second // falls 8 %/s and more for the whole reading
			} else {
				r.phys.overshoot, r.phys.tau = 0.02, 100*time.Millisecond
			}
			r.phys.mu.Unlock()
		}
		return panel.Response{}, false
	}
	sum, err := r.run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if sum.Outcome != "complete" {
		t.Fatalf("outcome %s", sum.Outcome)
	}
	if sum.BeamOn > budget {
		t.Errorf("beam-on %v, above the budget %v", sum.BeamOn, budget)
	}
	var first positionStats
	measured := map[string]int{}
	for _, ev := range events(r.jr, sum.Session, evMeasured) {
		var p positionStats
		if err := json.Unmarshal([]byte(ev.Detail), &p); err != nil {
			t.Fatal(err)
		}
		if p.Step == "spots" && p.Index == 0 {
			first = p
		}
		if p.Unmeasurable == "" && !p.Dark {
			measured[p.Step]++
		}
	}
	// Its pool left it 34 s less the reserves after it (3 × (4 + 1) s and
	// 5 + 1 s) and its own release: 12 s, and a release beyond.
	if first.UsedS > 12+1.5 {
		t.Errorf("first position: used %.1f s, want within 13.5 s", first.UsedS)
	}
	if measured["spots"] != 4 || measured["cf"] != 1 {
		t.Errorf("measured %v: want every position (the first on its retake) and the conversion factor", measured)
	}
	t.Logf("first position %.1f s in all, the session %.1f s", first.UsedS, sum.BeamOn.Seconds())
}

// TestBudgetNoneLeft: a reading whose pool has less than a second left
// for it is not measurable without an exposure being asked for.
func TestBudgetNoneLeft(t *testing.T) {
	for _, tt := range []struct {
		budget time.Duration
		beams  int
	}{{60 * time.Second, 5}, {1500 * time.Millisecond, 0}} {
		r := newRig(poolSteps(tt.budget))
		beams := 0
		r.reply = func(p panel.Prompt) (panel.Response, bool) {
			if p.Action == panel.ActBeamOn {
				beams++
			}
			return panel.Response{}, false
		}
		sum, err := r.run(context.Background())
		if err != nil {
			t.Fatal(err)
		}
		if beams != tt.beams {
			t.Errorf("budget %v: %d beam prompts, want %d", tt.budget, beams, tt.beams)
		}
		if tt.beams == 0 {
			for _, ev := range events(r.jr, sum.Session, evMeasured) {
				if !strings.Contains(ev.Detail, `"dark":true`) && !strings.Contains(ev.Detail, "beam-on budget has none left") {
					t.Errorf("budget %v: %s", tt.budget, ev.Detail)
				}
			}
		}
	}
}
