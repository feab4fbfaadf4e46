package script

import (
	"math"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"
)

const goodDir = "../../testdata/procedures/good"

func loadGood(t *testing.T, name string) *Procedure {
	t.Helper()
	p, ps := CheckFile(goodDir+"/"+name, Env{})
	if p == nil || len(ps) > 0 {
		t.Fatalf("%s: %v\n%s", name, ps, list(ps))
	}
	return p
}

// TestFlattenTwoModes walks the two-mode script: the include of the local
// safety list appears once (the second include says once), each step of
// the repeated block appears once per listed mode with the mode in its id,
// text and setup, and references resolve within the same mode.
func TestFlattenTwoModes(t *testing.T) {
	p := loadGood(t, "two-modes.yaml")
	f, err := Flatten(p, Env{})
	if err != nil {
		t.Fatal(err)
	}
	wantIDs := []string{
		"safety/list", "dark",
		"select@30 cm", "light@30 cm", "factor@30 cm", "factor-check@30 cm", "scaling@30 cm",
		"select@20 cm", "light@20 cm", "factor@20 cm", "factor-check@20 cm", "scaling@20 cm",
		"compare",
	}
	if len(f.Steps) != len(wantIDs) {
		t.Fatalf("got %d steps, want %d", len(f.Steps), len(wantIDs))
	}
	for i, s := range f.Steps {
		if s.ID != wantIDs[i] || s.Index != i+1 || s.Of != len(wantIDs) {
			t.Errorf("step %d: id %q index %d of %d; want %q %d of %d", i, s.ID, s.Index, s.Of, wantIDs[i], i+1, len(wantIDs))
		}
	}
	byID := map[string]FlatStep{}
	for _, s := range f.Steps {
		byID[s.ID] = s
	}
	if got := byID["safety/list"].Step.Items; len(got) != 5 || byID["safety/list"].Procedure != "local-safety" {
		t.Errorf("safety list: %d items from %q", len(got), byID["safety/list"].Procedure)
	}
	sel := byID["select@20 cm"]
	if sel.Step.Text != "Select the 20 cm field." || sel.Step.Setup.Map()[SetFieldMode] != "20 cm" || sel.FieldMode != "20 cm" {
		t.Errorf("mode not substituted: %q %v %q", sel.Step.Text, sel.Step.Setup.Map(), sel.FieldMode)
	}
	light := byID["light@20 cm"]
	m := light.Step.Measure
	// RQA5 is 70 kV with 21 mm Al added (IEC 61267, as in reference.md).
	setup := light.Step.Setup.Map()
	if setup[SetTubeVoltage] != "70 kV" || setup[SetAddedFilter] != "21 mm Al" || setup[SetBeamQuality] != "RQA5" || setup[SetFieldMode] != "20 cm" {
		t.Errorf("light setup = %v", setup)
	}
	if m.FieldMode != "20 cm" || m.Precision != 0.02 || m.MaxBeam != 10*time.Second || len(m.Expect) != 1 {
		t.Errorf("light measure = %+v", m)
	}
	// Its max_beam and the release the checker allows it (ReleaseTime).
	if light.MaxBeam() != 10*time.Second+ReleaseTime {
		t.Errorf("light max beam = %v", light.MaxBeam())
	}
	fc := byID["factor@20 cm"].Step.Compute
	for role, want := range map[string]string{"luminance": "light@20 cm", "air_kerma_rate": "light@20 cm", "dark_luminance": "dark"} {
		if in, _ := fc.Input(role); in.Resolved != want {
			t.Errorf("factor@20 cm %s resolved to %q, want %q", role, in.Resolved, want)
		}
	}
	if in, _ := byID["scaling@20 cm"].Step.Compute.Input("reference"); in.Resolved != "light@30 cm" {
		t.Errorf("@first resolved to %q", in.Resolved)
	}
	if in, _ := byID["compare"].Step.Compute.Input("air_kerma_rate"); in.Resolved != "light@20 cm" {
		t.Errorf("explicit @mode resolved to %q", in.Resolved)
	}
	j := byID["factor-check@30 cm"].Step.Judge
	if j.Resolved != "factor@30 cm" {
		t.Errorf("judge resolved to %q", j.Resolved)
	}
	// 15 cd/m² per mR/s is 15 / 8.764 cd/m² per µGy/s: 1 mR ↔ 8.764 µGy
	// (W/e = 33.97 J/C, 1 R = 2.58e-4 C/kg; reference.md gives 8.76).
	for _, l := range j.Limits {
		switch l.Kind {
		case SpecMin:
			if math.Abs(l.Value-15/8.764) > 1e-3 || l.Unit != ConversionFactorUnit {
				t.Errorf("min = %v %s, want %v", l.Value, l.Unit, 15/8.764)
			}
		case BaselineMin:
			if l.Value != 0.9 {
				t.Errorf("baseline_min = %v, want 0.9", l.Value)
			}
		}
	}
	// The written procedure is not changed by flattening.
	if p.Steps[3].Repeat.Steps[1].Measure.FieldMode != "" || p.Steps[3].Repeat.Steps[2].Compute.Inputs[0].Resolved != "" {
		t.Error("flatten changed the written procedure")
	}
}

// TestFlattenBenchModes: modes taken from the bench need the bench's list
// to run, and the bound max_modes to be checked without one.
func TestFlattenBenchModes(t *testing.T) {
	src := `name: bench-modes
title: Modes from the bench
version: "1"
beam_budget: 33 s
meters: [dosimeter]
defaults:
  max_beam: 10 s
  expect: {air_kerma_rate: 0.02 to 20 µGy/s}
steps:
  - id: safety
    kind: safety_checklist
  - id: modes
    kind: per_field_mode
    modes: bench
    max_modes: 3
    steps:
      - id: rate
        kind: measure
        text: "{mode} field."
        read: {dosimeter: air_kerma_rate}
        beam: on
`
	p, err := Parse("bench-modes.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	if ps := Check(p, Env{}); len(ps) != 0 {
		t.Fatalf("check without bench: %s", list(ps))
	}
	if _, err := Flatten(p, Env{}); err == nil || !strings.Contains(err.Error(), "none were given") {
		t.Errorf("flatten without modes: %v", err)
	}
	f, err := Flatten(p, Env{FieldModes: []string{"40 cm", "28 cm"}})
	if err != nil {
		t.Fatal(err)
	}
	if len(f.Steps) != 3 || f.Steps[2].ID != "rate@28 cm" || f.Steps[2].Step.Text != "28 cm field." {
		t.Errorf("steps: %+v", f.Steps)
	}
	// Four modes exceed max_modes 3 and the 33 s budget (4 × (10 s + 1 s of release)).
	ps := Check(p, Env{FieldModes: []string{"a", "b", "c", "d"}})
	if len(ps) != 2 || !strings.Contains(ps[0].Reason, "beam-on budget of 33 s is exceeded") || !strings.Contains(ps[1].Reason, "more than max_modes 3") {
		t.Errorf("four modes: %s", list(ps))
	}
}

// TestSafetyInInclude: a checklist in an included procedure that runs
// before the exposure counts; one that runs after does not.
func TestSafetyInInclude(t *testing.T) {
	const body = `name: %s
title: T
version: "1"
beam_budget: 11 s
meters: [photometer]
defaults: {max_beam: 10 s}
steps:
`
	before := strings.Replace(body, "%s", "before", 1) + `  - id: s
    kind: include
    procedure: pre-exposure-safety
  - id: l
    kind: measure
    read: {photometer: luminance}
    beam: on
`
	after := strings.Replace(body, "%s", "after", 1) + `  - id: l
    kind: measure
    read: {photometer: luminance}
    beam: on
  - id: s
    kind: include
    procedure: pre-exposure-safety
`
	p, err := Parse("before.yaml", []byte(before))
	if err != nil {
		t.Fatal(err)
	}
	if ps := Check(p, Env{}); len(ps) != 0 {
		t.Errorf("checklist included before: %s", list(ps))
	}
	p, err = Parse("after.yaml", []byte(after))
	if err != nil {
		t.Fatal(err)
	}
	ps := Check(p, Env{})
	if len(ps) != 1 || ps[0].Pos.Line != 8 || !strings.Contains(ps[0].Reason, "comes before the pre-exposure safety checklist (the checklist at builtin/pre-exposure-safety.yaml:") {
		t.Errorf("checklist included after: %s", list(ps))
	}
}

// TestStandardSafetyItems: a safety_checklist without items reads the
// standard lines.
func TestStandardSafetyItems(t *testing.T) {
	src := "name: s\ntitle: S\nversion: \"1\"\nbeam_budget: 0 s\nmeters: []\nsteps:\n  - id: c\n    kind: safety_checklist\n"
	p, err := Parse("s.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	items := p.Steps[0].Items
	if len(items) != 4 || !strings.Contains(items[0].Text, "apron") || !strings.Contains(items[3].Text, "qualified") {
		t.Errorf("items = %+v", items)
	}
}

// TestBenchModeNames: mode names from the bench that would make step ids
// ambiguous are refused.
func TestBenchModeNames(t *testing.T) {
	p, err := LoadBuiltin("conversion-factor")
	if err != nil {
		t.Fatal(err)
	}
	for _, modes := range [][]string{{"36 cm", "36 cm"}, {"a@b"}, {""}} {
		if _, err := Flatten(p, Env{FieldModes: modes}); err == nil {
			t.Errorf("modes %q accepted", modes)
		}
	}
}

// TestLargestMode: "largest" becomes the bench's first (largest) mode.
func TestLargestMode(t *testing.T) {
	p, err := LoadBuiltin("contrast-ratio")
	if err != nil {
		t.Fatal(err)
	}
	f, err := Flatten(p, Env{FieldModes: []string{"40 cm", "28 cm"}})
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range f.Steps {
		if s.ID == "open" && (s.Step.Measure.FieldMode != "40 cm" || s.Step.Setup.Map()[SetFieldMode] != "40 cm") {
			t.Errorf("open: field mode %q, setup %v", s.Step.Measure.FieldMode, s.Step.Setup.Map())
		}
		if s.ID == "bench" && s.Step.Setup.Map()[SetFieldMode] != "40 cm" {
			t.Errorf("bench setup %v", s.Step.Setup.Map())
		}
	}
	f, err = Flatten(p, Env{})
	if err != nil {
		t.Fatal(err)
	}
	if f.Steps[2].Step.Setup.Map()[SetFieldMode] != LargestMode {
		t.Errorf("without a bench: %v", f.Steps[2].Step.Setup.Map())
	}
}

// TestBudgetPools: a sequence's budget may be less than its readings
// could use together, each up to its max_beam, when it keeps every
// reading's reserve (min_beam and a release): the budget is then a pool
// the engine enforces, and each beam step lists the pools it counts
// against, the sequence's and each included procedure's. A budget below
// the reserves is refused, naming them; a min_beam above the max_beam is
// refused at its line.
func TestBudgetPools(t *testing.T) {
	dir := t.TempDir()
	part := `name: part
title: Part
version: "1"
beam_budget: 40 s
meters: [photometer]
defaults:
  max_beam: 10 s
  min_beam: 5 s
steps:
  - id: spots
    kind: measure
    text: Press, then step on the pedal.
    read:
      photometer: luminance
    beam: on
    positions: [centre, up 0.5 r, down 0.5 r]
`
	if err := os.WriteFile(filepath.Join(dir, "part.yaml"), []byte(part), 0o644); err != nil {
		t.Fatal(err)
	}
	seq := func(budget string) string {
		return `name: seq
title: T
version: "1"
beam_budget: ` + budget + `
meters: [photometer]
steps:
  - id: safety
    kind: include
    procedure: pre-exposure-safety
  - id: p
    kind: include
    procedure: part
`
	}
	for _, tt := range []struct {
		budget, problem string
	}{
		// 3 × (10 s + 1 s) = 33 s at most, 3 × (5 s + 1 s) = 18 s kept.
		{"20 s", ""},
		{"18 s", ""},
		{"17 s", "beam-on budget of 17 s cannot keep every reading's reserve: the readings need at least 18 s (min_beam and a 1 s release each)"},
	} {
		path := filepath.Join(dir, "seq.yaml")
		if err := os.WriteFile(path, []byte(seq(tt.budget)), 0o644); err != nil {
			t.Fatal(err)
		}
		p, ps := CheckFile(path, Env{})
		if tt.problem != "" {
			if len(ps) != 1 || ps[0].Reason != tt.problem || ps[0].Pos.Line != 4 {
				t.Errorf("budget %s: problems %s, want line 4: %s", tt.budget, list(ps), tt.problem)
			}
			continue
		}
		if len(ps) > 0 {
			t.Fatalf("budget %s: %s", tt.budget, list(ps))
		}
		f, err := Flatten(p, Env{})
		if err != nil {
			t.Fatal(err)
		}
		var beam int
		for _, s := range f.Steps {
			if s.MaxBeam() == 0 {
				if s.Pools != nil {
					t.Errorf("%s: pools %v on a step without beam", s.ID, s.Pools)
				}
				continue
			}
			beam++
			want := []Pool{{ID: "", Procedure: "seq", Budget: f.BeamBudget}, {ID: "p/", Procedure: "part", Budget: 40 * time.Second}}
			if !slices.Equal(s.Pools, want) {
				t.Errorf("%s: pools %v, want %v", s.ID, s.Pools, want)
			}
			if s.Reserve() != 3*6*time.Second || s.MaxBeam() != 3*11*time.Second {
				t.Errorf("%s: reserve %v, most %v", s.ID, s.Reserve(), s.MaxBeam())
			}
		}
		if beam != 1 {
			t.Errorf("%d beam steps", beam)
		}
	}
	bad := strings.Replace(part, "  min_beam: 5 s", "  min_beam: 12 s", 1)
	path := filepath.Join(dir, "part.yaml")
	if err := os.WriteFile(path, []byte(bad), 0o644); err != nil {
		t.Fatal(err)
	}
	_, ps := CheckFile(path, Env{})
	found := false
	for _, p := range ps {
		found = found || strings.Contains(p.Reason, `beam step "spots" keeps min_beam 12 s in reserve, more than its max_beam 10 s`)
	}
	if !found {
		t.Errorf("min_beam above max_beam: %s", list(ps))
	}
}
