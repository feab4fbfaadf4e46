package bench

import (
	"strings"
	"testing"
	"time"

	"kermalux/drivers/clock"
)

func TestLoadExamples(t *testing.T) {
	for _, f := range []string{"tollemby-rise-room2.yaml", "demo-sim.yaml"} {
		b, err := Load("../../testdata/bench/" + f)
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		if len(b.SHA256) != 64 || len(b.Meters) != 2 || len(b.Intensifier.FieldModes) != 3 {
			t.Errorf("%s: %+v", f, b)
		}
		if _, err := b.EngineSettings(); err != nil {
			t.Errorf("%s: limits: %v", f, err)
		}
	}
}

func TestRoom2Settings(t *testing.T) {
	b, err := Load("../../testdata/bench/tollemby-rise-room2.yaml")
	if err != nil {
		t.Fatal(err)
	}
	l, err := b.EngineSettings()
	if err != nil {
		t.Fatal(err)
	}
	if s := l.Spec["conversion_factor@25cm"]; !s.HasMin || s.Min != 75 {
		t.Errorf("per-mode spec %+v", s)
	}
	if s := l.Spec["non_uniformity"]; !s.HasMax || s.Max != 0.25 {
		t.Errorf("non-uniformity spec %+v", s)
	}
	if l.Inputs["spec.contrast_ratio_min"] != 15 || l.Inputs["action.conversion_factor_min"] != 100 {
		t.Errorf("inputs %v", l.Inputs)
	}
	if l.Baseline["conversion_factor@32cm"] != 168 {
		t.Errorf("baseline %v", l.Baseline)
	}
	if b.Panel.Kind != "gpio" || b.Panel.Switch != "GPIO17" || b.Panel.LongPress != 1500*time.Millisecond {
		t.Errorf("panel %+v", b.Panel)
	}
	v := b.Values()
	if v["temperature"] != 22 || v["pressure"] != 101.3 {
		t.Errorf("values %v", v)
	}
	// The example certificates: valid on a day in 2026; the expired one
	// is said aloud.
	certs, problems, err := Certificates(b, time.Date(2026, 6, 1, 0, 0, 0, 0, time.UTC))
	if err != nil {
		t.Fatal(err)
	}
	if len(certs) != 2 || len(problems) != 0 {
		t.Errorf("%d certificates, problems %v", len(certs), problems)
	}
	_, problems, _ = Certificates(b, time.Date(2027, 4, 1, 0, 0, 0, 0, time.UTC))
	if len(problems) == 0 || !strings.Contains(problems[0], "expired") {
		t.Errorf("expired certificate not reported: %v", problems)
	}
}

// Bad bench files are refused with the file and, for YAML faults, the line.
func TestBadBenchFiles(t *testing.T) {
	for _, c := range []struct{ file, want string }{
		{"unknown-key.yaml", "unknown-key.yaml:8:5: unknown field \"colour\""},
		{"unknown-key.yaml", "colour"},
		{"two-dialects.yaml", "exactly one dialect"},
		{"bad-role.yaml", "want dosimeter or photometer"},
		{"not-yaml.yaml", "not-yaml.yaml:"},
	} {
		_, err := Load("../../testdata/bench/bad/" + c.file)
		if err == nil {
			t.Errorf("%s: accepted", c.file)
			continue
		}
		if !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), c.file) {
			t.Errorf("%s: error %q lacks %q", c.file, err, c.want)
		}
	}
}

func FuzzParse(f *testing.F) {
	for _, s := range []string{
		"site: a\nmeters:\n  - {name: d, role: dosimeter, port: /dev/x, profile: p.yaml}\n",
		"meters: []\n", "site: [", "limits: {baseline_fraction: 2}\n",
	} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		b, err := Parse("fuzz.yaml", data)
		if err == nil && len(b.Meters) == 0 {
			t.Fatal("a bench without meters was accepted")
		}
	})
}

// The built-in acceptance sequence passes the checker on the example
// bench and flattens into engine steps with a safety checklist before the
// first exposure.
func TestBuiltinAcceptanceOnBench(t *testing.T) {
	b, err := Load("../../testdata/bench/tollemby-rise-room2.yaml")
	if err != nil {
		t.Fatal(err)
	}
	p, err := b.Procedure("")
	if err != nil {
		t.Fatal(err)
	}
	if len(p.Steps) < 10 {
		t.Fatalf("%d steps", len(p.Steps))
	}
	safety := false
	for _, s := range p.Steps {
		if s.Safety {
			safety = true
		}
		if s.Kind == "measure" && s.Measure.Beam && !safety {
			t.Fatalf("beam step %s before the checklist", s.ID)
		}
	}
	if !safety {
		t.Fatal("no safety checklist")
	}
}

func TestConfigFromBench(t *testing.T) {
	b, err := Load("../../testdata/bench/tollemby-rise-room2.yaml")
	if err != nil {
		t.Fatal(err)
	}
	p, err := b.Procedure("conversion-factor")
	if err != nil {
		t.Fatal(err)
	}
	clk := clock.NewManual(time.Date(2026, 6, 1, 9, 0, 0, 0, time.UTC))
	cfg, err := b.Config(p, nil, nil, nil, clk, "test")
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Session.BenchHash != b.SHA256 || cfg.Session.IntensifierSerial != "HV-2291" || len(cfg.Session.Certificates) != 2 {
		t.Errorf("session %+v", cfg.Session)
	}
	for _, c := range cfg.Session.Certificates {
		if !c.Valid || len(c.SHA256) != 64 {
			t.Errorf("certificate %+v", c)
		}
	}
	if cfg.FieldModes["17cm"] != 170 || len(cfg.Correctors) != 2 {
		t.Errorf("modes %v, correctors %d", cfg.FieldModes, len(cfg.Correctors))
	}
}

// TestLegacyScalingLimitName (observation 10: a bench limit written under
// the figure's older name never applied to the result): a limit on
// kerma_mode_scaling applies to kerma_rate_scaling, the name of the
// result, and judge steps find it under either name.
func TestLegacyScalingLimitName(t *testing.T) {
	b := &Bench{Path: "legacy.yaml"}
	b.Limits.Action = map[string]float64{"kerma_mode_scaling_max": 4}
	b.Intensifier.Spec = map[string]float64{"kerma_mode_scaling_max@17cm": 3}
	l, err := b.EngineSettings()
	if err != nil {
		t.Fatal(err)
	}
	if a := l.Action["kerma_rate_scaling"]; !a.HasMax || a.Max != 4 {
		t.Errorf("action limit under today's name: %+v (all: %v)", a, l.Action)
	}
	if s := l.Spec["kerma_rate_scaling@17cm"]; !s.HasMax || s.Max != 3 {
		t.Errorf("per-mode spec under today's name: %+v (all: %v)", s, l.Spec)
	}
	for _, k := range []string{"action.kerma_rate_scaling_max", "action.kerma_mode_scaling_max", "spec.kerma_rate_scaling_max@17cm"} {
		if _, ok := l.Inputs[k]; !ok {
			t.Errorf("judge input %s missing: %v", k, l.Inputs)
		}
	}
}

// The example board has the pause on: two presses pause (the pause menu
// then offers going on, stopping and skipping the field mode) and three
// say the prompt again; with the gap off, neither gesture exists.
func TestExampleBoardPauses(t *testing.T) {
	b, err := Load("../../testdata/bench/tollemby-rise-room2.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if b.Panel.Kind != "gpio" || b.Panel.DoublePress <= 0 {
		t.Errorf("panel %s with double_press %s: the example board has no pause", b.Panel.Kind, b.Panel.DoublePress)
	}
}
