package benchsim

import (
	"testing"
	"time"

	"kermalux/drivers"
)

// The true beam log adds up the exposures switched by the control calls
// (the answer key of the engine's beam-on timer), and Show turns a value
// outside the meter's range into a range state.
func TestBeamLogAndRangeStates(t *testing.T) {
	scn, err := LoadScenario("../../testdata/scenarios/tollemby-rise-room2.yaml")
	if err != nil {
		t.Fatal(err)
	}
	scn.Photometer.Range = RangeSpec{Min: 0.5, Max: 20}
	m, err := NewModel(scn)
	if err != nil {
		t.Fatal(err)
	}
	m.SetBeam(time.Second, true)
	m.SetBeam(3500*time.Millisecond, false)
	m.SetBeam(10*time.Second, true)
	if got := m.BeamOnTime(12 * time.Second); got != 4500*time.Millisecond {
		t.Errorf("beam-on at 12 s = %v, want 2.5 s + 2 s", got)
	}
	// 32 cm field: 152 cd/m² per µGy/s × 0.45 µGy/s ≈ 68 cd/m², above 20.
	if _, st := m.Show(RolePhotometer, 20*time.Second); st != drivers.StatusOverRange {
		t.Errorf("photometer at about 68 cd/m² with range 20: status %s", st)
	}
	m.SetBeam(21*time.Second, false)
	if got := m.BeamOnTime(22 * time.Second); got != 13500*time.Millisecond {
		t.Errorf("beam-on at 22 s = %v, want 2.5 s + 11 s", got)
	}
	if log := m.BeamLog(); len(log) != 2 || log[1].Off != 21*time.Second {
		t.Errorf("beam log %v", log)
	}
	// Dark 0.03 cd/m² is below the 0.5 cd/m² floor.
	if _, st := m.Show(RolePhotometer, 60*time.Second); st != drivers.StatusUnderRange {
		t.Errorf("dark photometer below its floor: status %s", st)
	}
}
