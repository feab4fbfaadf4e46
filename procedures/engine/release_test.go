package engine

import (
	"context"
	"testing"

	"kermalux/procedures/entry"
)

// "Release the beam" is said before the accepted exposure's held readings
// are journalled, not after (issue 14 item 17: every held reading was
// written durably first, 0.6 s for 1,400 readings at 60x, and the beam
// stayed on meanwhile). The journal is watched at each append: when the
// first reading used by the beam step is written, the panel must already
// have said to release the beam.
func TestReleaseSaidBeforeHeldReadingsWritten(t *testing.T) {
	r := newRig(cfSteps())
	checked, releasedFirst := false, false
	r.jr.failOn = func(kind entry.Kind, payload any) bool {
		rd, ok := payload.(entry.Reading)
		if checked || kind != entry.KindReading || !ok || !rd.Used || rd.StepID != "cf@32cm" {
			return false
		}
		checked = true
		for _, m := range r.pan.Messages() {
			releasedFirst = releasedFirst || m.Text == "Release the beam."
		}
		return false
	}
	sum, err := r.run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if sum.Outcome != "complete" || !checked {
		t.Fatalf("outcome %s, a used reading of the beam step journalled: %v", sum.Outcome, checked)
	}
	if !releasedFirst {
		t.Errorf("the accepted exposure's readings were journalled before 'Release the beam.' was said:\n%s", r.pan.Dialogue())
	}
}
