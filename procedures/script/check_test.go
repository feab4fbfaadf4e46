package script

import (
	"flag"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/drivers/units"
)

var update = flag.Bool("update", false, "rewrite golden files")

const badDir = "../../testdata/procedures/bad"

// want is one expected problem: its line and column and a part of its reason.
type want struct {
	line, col int
	reason    string
}

// dosimeterOnly is a bench with a dosimeter and no photometer.
var dosimeterOnly = Env{Quantities: map[string][]units.Quantity{"dosimeter": {units.AirKermaRate, units.AirKerma}}}

// TestBadScripts checks that each unsafe or malformed script is rejected
// with the right positions and reasons, and nothing else. The lines and
// columns were read off the files by hand.
func TestBadScripts(t *testing.T) {
	tests := []struct {
		file string
		env  Env
		want []want
	}{
		{"unknown-kind.yaml", Env{}, []want{{11, 11, `unknown step kind "shout"`}}},
		{"unknown-field.yaml", Env{}, []want{
			{10, 5, `unknown field "colour" for a say step`},
			{16, 7, `unknown setup field "mirror"`},
		}},
		{"bad-unit.yaml", Env{}, []want{
			{13, 21, `setup tube_voltage: unit "mm Al" is not a unit of tube_voltage`},
			{14, 21, `"70 kV" is not a filter thickness: unit "kV" is not a unit of length`},
			{20, 15, `max_beam: unit "furlongs" is not a unit of time`},
			{21, 16, `precision: "2 kV" is not a relative value`},
			{23, 23, `unit "cd/m²" is not a unit of air_kerma_rate`},
			{28, 12, `range: unit "kPa" is not a unit of temperature`},
		}},
		{"no-safety.yaml", Env{}, []want{{14, 5, "beam step with no pre-exposure safety checklist before it"}}},
		{"safety-after.yaml", Env{}, []want{{16, 5, "beam step comes before the pre-exposure safety checklist (the checklist at line 21"}}},
		// An unreadable budget is said once, for what it is (it used to
		// add "beam-on budget of 0 s is exceeded").
		{"bad-budget.yaml", Env{}, []want{{4, 14, `beam_budget: "soon" is not a number with a unit`}}},
		{"budget-repeat.yaml", Env{}, []want{{4, 1, `beam-on budget of 40 s is exceeded: the steps may use up to 48 s of beam ("modes" repeats 3 times)`}}},
		{"unmeasurable.yaml", dosimeterOnly, []want{{17, 7, "no configured meter reports luminance"}}},
		{"dangling-ref.yaml", Env{}, []want{
			{21, 13, `disk refers to "covered", which is not a step earlier`},
			{24, 5, `result refers to "ratoi", which is not a step earlier`},
		}},
		{"empty.yaml", Env{}, []want{{6, 8, "the procedure has no steps"}}},
		{"duplicate-id.yaml", Env{}, []want{{14, 9, `duplicate step id "hello" (first used at line 7)`}}},
		{"cycle-a.yaml", Env{}, []want{{9, 5, "include cycle: cycle-a → cycle-b → cycle-a"}}},
		{"no-expect.yaml", Env{}, []want{
			{9, 5, `beam step "rate" has no max_beam`},
			{9, 5, `beam step "rate" reads air_kerma_rate with no expected range`},
		}},
		{"wrong-input.yaml", Env{}, []want{
			{27, 18, `luminance refers to "rate", which does not read luminance`},
			{33, 13, `open refers to "light", a dark reading (beam off)`},
			{34, 13, `disk refers to "light", a dark reading (beam off)`},
			{39, 12, `min of contrast_ratio: unit "µGy/s" is not a unit of ratio`},
			{40, 12, `max refers to entered value "nothing"`},
		}},
		{"syntax.yaml", Env{}, []want{{6, 10, "YAML syntax"}}},
		{"missing.yaml", Env{}, []want{
			{1, 1, "procedure has no name"},
			{1, 1, "procedure has no version"},
			{1, 1, "procedure has no beam_budget"},
			{3, 5, "say step has no id"},
			{5, 5, `enter step "ask" has no name`},
			{5, 5, `enter step "ask" has no range`},
		}},
		{"mode-outside.yaml", Env{}, []want{
			{7, 5, `step "hello" uses {mode} outside a per_field_mode block`},
			{10, 5, "give max_modes"},
		}},
	}
	for _, tt := range tests {
		t.Run(tt.file, func(t *testing.T) {
			path := filepath.Join(badDir, tt.file)
			_, got := CheckFile(path, tt.env)
			if len(got) != len(tt.want) {
				t.Errorf("got %d problems, want %d:\n%s", len(got), len(tt.want), list(got))
			}
			for i, w := range tt.want {
				if i >= len(got) {
					break
				}
				g := got[i]
				if g.Pos.Line != w.line || g.Pos.Col != w.col || !strings.Contains(g.Reason, w.reason) {
					t.Errorf("problem %d = %s:%d:%d: %s\nwant line %d col %d containing %q", i, filepath.Base(g.Pos.File), g.Pos.Line, g.Pos.Col, g.Reason, w.line, w.col, w.reason)
				}
			}
		})
	}
}

func list(ps Problems) string {
	var b strings.Builder
	for _, p := range ps {
		b.WriteString("  " + p.String() + "\n")
	}
	return b.String()
}

// TestBadGolden keeps the full checker output for every bad script in one
// golden file, so a change of wording shows in review.
func TestBadGolden(t *testing.T) {
	files, err := filepath.Glob(filepath.Join(badDir, "*.yaml"))
	if err != nil || len(files) == 0 {
		t.Fatalf("no bad scripts: %v", err)
	}
	var b strings.Builder
	for _, f := range files {
		env := Env{}
		if filepath.Base(f) == "unmeasurable.yaml" {
			env = dosimeterOnly
		}
		_, ps := CheckFile(f, env)
		if len(ps) == 0 {
			t.Errorf("%s: accepted, but it is a bad script", f)
		}
		for _, p := range ps {
			b.WriteString(strings.TrimPrefix(p.String(), badDir+"/") + "\n")
		}
	}
	golden(t, filepath.Join(badDir, "problems.golden"), b.String())
}

// TestMeterEnv checks the meter rules against a configured bench.
func TestMeterEnv(t *testing.T) {
	src := `name: env
title: Env
version: "1"
beam_budget: 10 s
meters: [dosimeter, photometer]
defaults: {max_beam: 5 s}
steps:
  - id: safety
    kind: safety_checklist
  - id: light
    kind: measure
    read:
      photometer: luminance
    beam: on
`
	p, err := Parse("env.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name string
		env  Env
		want string // "" for no problem
	}{
		{"no bench given", Env{}, ""},
		{"photometer present", Env{Quantities: map[string][]units.Quantity{"photometer": {units.Luminance}}}, ""},
		{"no luminance anywhere", dosimeterOnly, "no configured meter reports luminance"},
		{"photometer under another name", Env{Quantities: map[string][]units.Quantity{"spotmeter": {units.Luminance}}}, `meter "photometer" is not configured on this bench (spotmeter reports luminance)`},
		{"photometer without luminance", Env{Quantities: map[string][]units.Quantity{"photometer": {units.AirKermaRate}, "spotmeter": {units.Luminance}}}, `meter "photometer" does not report luminance (spotmeter does)`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := Check(p, tt.env)
			switch {
			case tt.want == "" && len(got) != 0:
				t.Errorf("unexpected problems:\n%s", list(got))
			case tt.want != "" && (len(got) != 1 || !strings.Contains(got[0].Reason, tt.want) || got[0].Pos.Line != 13):
				t.Errorf("got:\n%swant one problem at line 13 containing %q", list(got), tt.want)
			}
		})
	}
}

// TestReadMeterNotDeclared: a read from a meter the procedure does not
// list in its meters.
func TestReadMeterNotDeclared(t *testing.T) {
	src := "name: m\ntitle: M\nversion: \"1\"\nbeam_budget: 0 s\nmeters: [photometer]\nsteps:\n  - id: d\n    kind: measure\n    read: {dosimeter: air_kerma_rate}\n    beam: off\n"
	p, err := Parse("m.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	got := Check(p, Env{})
	if len(got) != 1 || got[0].Pos.Line != 9 || !strings.Contains(got[0].Reason, `meter "dosimeter" is not in the procedure's meters`) {
		t.Errorf("got:\n%s", list(got))
	}
}

// A value the script takes from the bench must be in the bench file, and
// on a foot-switch panel (which cannot enter a number) every value asked
// needs a default: otherwise the built-in acceptance would stop at the
// lead disk diameter after its first exposures.
func TestEnterValuesOnBench(t *testing.T) {
	full := map[string]float64{"temperature": 22, "pressure": 101.3, "tube_voltage": 70, "tube_current": 1.2, "lead_disk_diameter": 32}
	without := func(k string) map[string]float64 {
		m := map[string]float64{}
		for n, v := range full {
			if n != k {
				m[n] = v
			}
		}
		return m
	}
	tests := []struct {
		name      string
		values    map[string]float64
		handsFree bool
		want      string // part of the one problem expected; "" none
	}{
		{"values not known", nil, true, ""},
		{"everything on the bench", full, true, ""},
		{"no lead disk on the bench", without("lead_disk_diameter"), false, "lead_disk_diameter comes from the bench file (source: bench), which gives no value for it (defaults: lead_disk_diameter_mm)"},
		{"no tube current, keyboard", without("tube_current"), false, ""},
		{"no tube current, foot switch", without("tube_current"), true, "tube_current has no default and the bench's panel is a foot switch"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			env := Env{FieldModes: []string{"32cm", "25cm", "17cm"}, Values: tc.values, HandsFree: tc.handsFree}
			_, probs := CheckBuiltin("acceptance", env)
			if tc.want == "" {
				if len(probs) > 0 {
					t.Fatalf("unexpected problems: %v", probs)
				}
				return
			}
			found := false
			for _, p := range probs {
				if strings.Contains(p.Reason, tc.want) {
					found = true
				} else {
					t.Errorf("other problem: %v", p)
				}
			}
			if !found {
				t.Errorf("no problem %q in %v", tc.want, probs)
			}
		})
	}
}
