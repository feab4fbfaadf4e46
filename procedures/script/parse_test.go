package script

import (
	"strings"
	"testing"
)

// head is a valid procedure header; each case appends steps.
const head = "name: p\ntitle: P\nversion: \"1\"\nbeam_budget: 30 s\nmeters: [dosimeter, photometer]\nsteps:\n"

// TestParseProblems: small scripts with one mistake each; the line is
// counted from the top of the file (the header is lines 1 to 6).
func TestParseProblems(t *testing.T) {
	tests := []struct {
		name  string
		steps string
		line  int
		want  string
	}{
		{"step not a mapping", "  - just text\n", 7, "step: expected a mapping"},
		{"no kind", "  - id: a\n    text: Hi.\n", 7, "step has no kind"},
		{"duplicate key", "  - id: a\n    kind: say\n    text: Hi.\n    text: Again.\n", 10, `mapping key "text" already defined`},
		{"bad id", "  - id: a b\n    kind: say\n    text: Hi.\n", 7, `step id "a b"`},
		{"grid true", "  - id: a\n    kind: prepare\n    text: Go.\n    setup:\n      grid: true\n", 11, "write in or removed, not true"},
		{"radius without r", "  - id: a\n    kind: prepare\n    text: Go.\n    setup:\n      photometer_radius: 0.9\n", 11, `write it as "0.9 r"`},
		{"unknown quality", "  - id: a\n    kind: measure\n    read: {dosimeter: air_kerma_rate}\n    beam: off\n    beam_quality: RQA11\n", 11, `unknown radiation quality "RQA11"`},
		{"unknown quantity", "  - id: a\n    kind: measure\n    read: {dosimeter: temperature}\n    beam: off\n", 9, `unknown quantity "temperature"`},
		{"beam maybe", "  - id: a\n    kind: measure\n    read: {dosimeter: air_kerma_rate}\n    beam: maybe\n", 10, `beam: expected on or off`},
		{"unknown figure", "  - id: a\n    kind: compute\n    figure: brightness\n    from: {x: y}\n", 9, `unknown figure "brightness"`},
		{"unknown limit", "  - id: a\n    kind: judge\n    result: r\n    limits: {at_least: 3}\n", 10, `unknown limit "at_least"`},
		{"range backwards", "  - id: a\n    kind: enter\n    name: t\n    unit: °C\n    range: 40 to 10 °C\n", 11, "the low end is above the high end"},
		{"range without to", "  - id: a\n    kind: enter\n    name: t\n    unit: °C\n    range: 10-40 °C\n", 11, "expected a range"},
		{"unknown unit", "  - id: a\n    kind: enter\n    name: t\n    unit: parsec\n    range: 1 to 2\n", 10, `unknown unit "parsec"`},
		{"bad source", "  - id: a\n    kind: enter\n    name: t\n    unit: °C\n    range: 1 to 2\n    source: guess\n", 12, "source: expected operator, bench or sensor"},
		{"empty items", "  - id: a\n    kind: checklist\n    items: []\n", 9, "the checklist is empty"},
		{"nested repeat", "  - id: a\n    kind: per_field_mode\n    modes: [x]\n    steps:\n      - id: b\n        kind: per_field_mode\n        modes: [y]\n        steps: [{id: c, kind: say, text: Hi.}]\n", 12, "per_field_mode inside per_field_mode"},
		{"modes twice", "  - id: a\n    kind: per_field_mode\n    modes: [x, x]\n    steps: [{id: c, kind: say, text: Hi.}]\n", 9, `"x" listed twice`},
		{"max_modes huge", "  - id: a\n    kind: per_field_mode\n    modes: bench\n    max_modes: 100\n    steps: [{id: c, kind: say, text: Hi.}]\n", 10, "max_modes: expected a whole number from 1 to 16"},
		{"position unknown field", "  - id: a\n    kind: measure\n    read: {photometer: luminance}\n    beam: off\n    positions:\n      - {label: x, radius: 0.5 r, colour: red}\n", 12, `unknown position field "colour"`},
		{"alias", "  - id: a\n    kind: say\n    text: &t Hi.\n  - id: b\n    kind: say\n    text: *t\n", 12, "alias"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := Parse("p.yaml", []byte(head+tt.steps))
			ps, _ := err.(Problems)
			for _, p := range ps {
				if p.Pos.Line == tt.line && strings.Contains(p.Reason, tt.want) {
					return
				}
			}
			t.Errorf("want a problem at line %d containing %q; got:\n%s", tt.line, tt.want, list(ps))
		})
	}
}

func TestParseDocuments(t *testing.T) {
	for _, tt := range []struct{ name, src, want string }{
		{"empty file", "", "empty file"},
		{"comment only", "# nothing\n", "empty file"},
		{"two documents", head + "  - {id: a, kind: say, text: Hi.}\n---\nname: q\n", "more than one YAML document"},
		{"a list", "- a\n- b\n", "procedure: expected a mapping"},
		{"unknown key", head + "  - {id: a, kind: say, text: Hi.}\nauthor: me\n", `unknown procedure field "author"`},
		{"bad name", strings.Replace(head, "name: p", "name: P Q", 1) + "  - {id: a, kind: say, text: Hi.}\n", `name "P Q"`},
	} {
		_, err := Parse("d.yaml", []byte(tt.src))
		if err == nil || !strings.Contains(err.Error()+list(asProblems(err)), tt.want) {
			t.Errorf("%s: got %v\n%s", tt.name, err, list(asProblems(err)))
		}
	}
}

func asProblems(err error) Problems {
	ps, _ := err.(Problems)
	return ps
}

// TestSetupMap: a setup is normalised and handed on as string key/values.
func TestSetupMap(t *testing.T) {
	src := head + `  - id: a
    kind: prepare
    text: Go.
    setup:
      tube_voltage: 70kV
      added_filter: 2.1 cm Al
      photometer_radius: 0.90 r
      photometer_angle: 90°
      grid: Removed
      field_mode: 32 cm
`
	p, err := Parse("s.yaml", []byte(src))
	if err != nil {
		t.Fatalf("%v\n%s", err, list(asProblems(err)))
	}
	got := p.Steps[0].Setup.Map()
	want := map[string]string{"tube_voltage": "70 kV", "added_filter": "21 mm Al", "photometer_radius": "0.9 r",
		"photometer_angle": "90 deg", "grid": "removed", "field_mode": "32 cm"}
	for k, v := range want {
		if got[k] != v {
			t.Errorf("%s = %q, want %q", k, got[k], v)
		}
	}
	if len(got) != len(want) {
		t.Errorf("setup = %v", got)
	}
	if (Setup{}).Map() != nil {
		t.Error("empty setup should map to nil")
	}
}

// TestLegacyFigureName: procedures written before the rename say
// kerma_mode_scaling; they are read as kerma_rate_scaling, the name of the
// result the figure gives (one name per quantity).
func TestLegacyFigureName(t *testing.T) {
	src := head + "  - id: a\n    kind: compute\n    figure: kerma_mode_scaling\n    from: {air_kerma_rate: x, reference: y}\n"
	p, err := Parse("old.yaml", []byte(src))
	if err != nil {
		t.Fatalf("%v\n%s", err, list(asProblems(err)))
	}
	if got := p.Steps[0].Compute.Figure; got != "kerma_rate_scaling" {
		t.Errorf("figure = %q, want kerma_rate_scaling", got)
	}
}
