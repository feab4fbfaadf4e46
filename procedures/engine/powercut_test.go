package engine

import (
	"context"
	"testing"
	"time"
)

// TestBeamOnSurvivesPowerCut: a power cut in the middle of a long exposure
// (the journal takes nothing after it, as after SIGKILL) loses at most one
// timer checkpoint and one reading period of the cumulative beam-on that a
// resume rebuilds. Before, a resume counted only to the last beam event:
// the whole exposure so far was lost (11.4 s in one of 39 kills), and the
// five-minute alarm (21 CFR 1020.32(h)) came after more real beam than five
// minutes. The truth is the fake physics' own beam log, up to the cut.
func TestBeamOnSurvivesPowerCut(t *testing.T) {
	const period = 100 * time.Millisecond // both rig meters read at 10 Hz
	for _, into := range []time.Duration{1500 * time.Millisecond, 4 * time.Second, 9 * time.Second, 20 * time.Second} {
		t.Run(into.String(), func(t *testing.T) {
			r := newRig(cfSteps())
			cf := r.cfg.Procedure.Steps[5]
			if cf.ID != "cf@32cm" {
				t.Fatalf("step 6 is %s, want the exposure", cf.ID)
			}
			// A tight target keeps the beam on for tens of seconds.
			cf.Measure.Precision, cf.Measure.MaxBeam = 0.002, 60*time.Second
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			var cutAt time.Duration
			r.dos.spike = func(v float64, at time.Duration) float64 {
				if on, _ := r.phys.beamState(); cutAt == 0 && on && at-r.phys.beamAt >= into {
					cutAt = at
					cancel() // the power goes: every later append fails
				}
				return v
			}
			sum, _ := r.run(ctx)
			if cutAt == 0 {
				t.Fatalf("the exposure ended before %s of beam", into)
			}
			_, ended := r.phys.beamState()
			truth := ended + cutAt - r.phys.beamAt
			st, err := rebuildFrom(t, r, r.jr.sessions[sum.Session])
			if err != nil {
				t.Fatal(err)
			}
			lost := truth - st.beamOn
			// Lost: at most a checkpoint interval and a reading period (the
			// cut may fall just before the next checkpoint is written). Over:
			// the timer takes out the meters' response, which the rig's
			// truth knows nothing of; a reading period either side.
			if lost > beamCheckpoint+period || lost < -2*period {
				t.Errorf("cut %s into the exposure (true beam-on %s): the resume counts %s, lost %s (at most %s allowed)",
					into, truth, st.beamOn, lost, beamCheckpoint+period)
			}
			t.Logf("cut %s into the exposure: true beam-on %s, resumed timer %s", into, truth, st.beamOn)
		})
	}
}
