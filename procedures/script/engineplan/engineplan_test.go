package engineplan

import (
	"testing"
	"time"

	"kermalux/procedures/engine"
	"kermalux/procedures/script"
)

// TestAcceptance converts the built-in acceptance sequence with three
// field modes: 69 steps (33 + 12 × 3, counted by hand in
// procedures/builtin's test), the safety checklist marked, every compute
// input naming a measure step that comes before it, and RQA5's 70 kV and
// 21 mm Al (IEC 61267) in the conversion factor's setup.
func TestAcceptance(t *testing.T) {
	p, err := script.LoadBuiltin("acceptance")
	if err != nil {
		t.Fatal(err)
	}
	f, err := script.Flatten(p, script.Env{FieldModes: []string{"36 cm", "25 cm", "17 cm"}})
	if err != nil {
		t.Fatal(err)
	}
	ep, err := FromFlat(f)
	if err != nil {
		t.Fatal(err)
	}
	if len(ep.Steps) != 69 || ep.Name != "acceptance" || ep.BeamBudget != 240*time.Second || len(ep.Hash) != 64 {
		t.Fatalf("procedure %q: %d steps, budget %v, hash %q", ep.Name, len(ep.Steps), ep.BeamBudget, ep.Hash)
	}
	index := map[string]int{}
	var safety int
	for i, s := range ep.Steps {
		index[s.ID] = i
		if s.Safety {
			safety++
			if s.Kind != engine.Checklist || len(s.Items) != 4 {
				t.Errorf("safety step %s: %s with %d items", s.ID, s.Kind, len(s.Items))
			}
		}
		if s.Compute != nil {
			for role, id := range s.Compute.Inputs {
				j, ok := index[id]
				if !ok || j >= i || ep.Steps[j].Kind != engine.Measure {
					t.Errorf("%s: input %s = %q is not an earlier measure step", s.ID, role, id)
				}
			}
		}
		if s.Judge != nil {
			if j, ok := index[s.Judge.Result]; !ok || ep.Steps[j].Kind != engine.Compute {
				t.Errorf("%s: result %q is not an earlier compute step", s.ID, s.Judge.Result)
			}
		}
	}
	if safety != 1 {
		t.Errorf("%d safety checklists, want 1", safety)
	}
	light := ep.Steps[index["cf/light@25 cm"]]
	if light.Setup["tube_voltage"] != "70 kV" || light.Setup["added_filter"] != "21 mm Al" || light.FieldMode != "25 cm" ||
		!light.Measure.Beam || light.Measure.Quality != "RQA5" || len(light.Measure.Meters) != 2 || light.Measure.MaxBeamOn != 15*time.Second {
		t.Errorf("cf/light@25 cm = %+v %+v", light, light.Measure)
	}
	spots := ep.Steps[index["uniformity/spots"]].Measure
	if len(spots.Positions) != 9 || spots.Positions[2].Label != "up 0.9 r" || spots.Positions[2].R != 0.9 || spots.Positions[2].Angle != 90 {
		t.Errorf("uniformity positions = %+v", spots.Positions)
	}
}

func TestNotFlattened(t *testing.T) {
	if _, err := FromFlat(nil); err == nil {
		t.Error("nil accepted")
	}
	p, err := script.LoadBuiltin("conversion-factor")
	if err != nil {
		t.Fatal(err)
	}
	// A compute step straight from the script, not resolved by Flatten.
	f := &script.Flat{Procedure: p, Steps: []script.FlatStep{{Index: 1, Of: 1, ID: "x", Step: p.Steps[4].Repeat.Steps[3]}}}
	if _, err := FromFlat(f); err == nil {
		t.Error("unresolved compute step accepted")
	}
}
