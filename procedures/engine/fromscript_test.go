package engine

import (
	"math"
	"reflect"
	"testing"
	"time"

	"kermalux/procedures/script"
)

// TestFromScriptCoversKinds: the kinds that reach the engine are those of
// the flat steps of every-kind.yaml (which has a step of every script
// kind, and flattens into steps of every kind that does not expand: the
// script package's TestEveryKind), and each has a conversion; no other
// kind has one.
func TestFromScriptCoversKinds(t *testing.T) {
	flat := flatEveryKind(t)
	reach := map[script.StepKind]bool{}
	for _, s := range flat.Steps {
		reach[s.Step.Kind] = true
	}
	for _, k := range script.Kinds {
		if _, ok := fromScript[k]; ok != reach[k] {
			t.Errorf("%s: a conversion %v, reaches the engine %v", k, ok, reach[k])
		}
	}
	if len(fromScript) != len(reach) {
		t.Errorf("%d conversions for the %d kinds that reach the engine", len(fromScript), len(reach))
	}
}

// flatEveryKind checks and flattens every-kind.yaml.
func flatEveryKind(t *testing.T) *script.Flat {
	t.Helper()
	p, probs := script.CheckFile("../../testdata/procedures/good/every-kind.yaml", script.Env{})
	if len(probs) > 0 {
		t.Fatal(probs)
	}
	flat, err := script.Flatten(p, script.Env{})
	if err != nil {
		t.Fatal(err)
	}
	return flat
}

// TestFromFlatEveryKind converts the procedure with a step of every kind
// (testdata/procedures/good/every-kind.yaml): each script kind becomes
// the engine kind DEVELOPERS.md's glossary gives it (say → announce,
// prepare → instruct, both checklists → checklist, the safety one with
// Safety set) with its own part converted.
func TestFromFlatEveryKind(t *testing.T) {
	flat := flatEveryKind(t)
	proc := FromFlat(flat)
	if len(proc.Steps) != len(flat.Steps) || proc.Name != "every-kind" || proc.BeamBudget != time.Minute || proc.Hash != flat.Procedure.SHA256 {
		t.Fatalf("%d steps of %d, %q, %v, %q", len(proc.Steps), len(flat.Steps), proc.Name, proc.BeamBudget, proc.Hash)
	}
	byID := map[string]Step{}
	for _, s := range proc.Steps {
		byID[s.ID] = s
	}
	want := map[string]StepKind{"hello": Say, "cables": Checklist, "safety": Checklist, "air/temperature": Enter,
		"kv": Enter, "select@32 cm": Prepare, "light@32 cm": Measure, "factor@32 cm": Compute, "factor-check@32 cm": Judge}
	for id, k := range want {
		if byID[id].Kind != k {
			t.Errorf("%s: kind %q, want %q", id, byID[id].Kind, k)
		}
	}
	if s := byID["cables"]; s.Safety || len(s.Items) != 1 {
		t.Errorf("checklist: safety %v, %d items", s.Safety, len(s.Items))
	}
	if s := byID["safety"]; !s.Safety || !reflect.DeepEqual(s.Items, script.StandardSafetyItems) {
		t.Errorf("safety checklist: safety %v, items %q", s.Safety, s.Items)
	}
	if v := byID["kv"].Value; v == nil || *v != (ValueRequest{Name: "tube_voltage", Unit: "kV", Min: 40, Max: 150, Default: 70, HasDefault: true, Source: "operator"}) {
		t.Errorf("enter: %+v", v)
	}
	if s := byID["air/temperature"]; s.Value == nil || s.Value.Source != "sensor" || s.Part != "air" || s.PartTitle != "Room temperature and pressure" {
		t.Errorf("included enter: %+v, part %q %q", s.Value, s.Part, s.PartTitle)
	}
	// RQA5 is 70 kV with 21 mm Al added (IEC 61267, as in reference.md);
	// the expected range is written in µGy/s, the canonical unit.
	m := byID["light@17 cm"]
	wantM := MeasureSpec{Meters: []string{Dosimeter, Photometer}, Beam: true, BeamQuality: "RQA5", MaxBeam: 20 * time.Second,
		Expect: []Expect{{Quantity: "air_kerma_rate", Min: 0.02, Max: 20}}}
	if m.Measure == nil || !reflect.DeepEqual(*m.Measure, wantM) || m.FieldMode != "17 cm" ||
		m.Setup["tube_voltage"] != "70 kV" || m.Setup["added_filter"] != "21 mm Al" {
		t.Errorf("measure: %+v in %q, setup %v", m.Measure, m.FieldMode, m.Setup)
	}
	if c := byID["factor@17 cm"].Compute; c == nil || c.Figure != "conversion_factor" ||
		!reflect.DeepEqual(c.Inputs, map[string]string{"luminance": "light@17 cm", "air_kerma_rate": "light@17 cm"}) {
		t.Errorf("compute: %+v", c)
	}
	// 15 cd/m² per mR/s is 15 / 8.764 cd/m² per µGy/s: 1 R is
	// 2.58e-4 C/kg (NIST SP 811, Appendix B), and W/e = 33.97 J/C makes 1 mR of
	// exposure 8.764 µGy of air kerma (reference.md).
	j := byID["factor-check@17 cm"].Judge
	if j == nil || j.Result != "factor@17 cm" || len(j.Limits) != 1 || j.Limits[0].Kind != "min" || math.Abs(j.Limits[0].Value-15/(2.58e-4*33.97*1e3)) > 1e-6 {
		t.Errorf("judge: %+v", j)
	}
}
