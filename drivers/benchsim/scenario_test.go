package benchsim

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

const scenarioDir = "../../testdata/scenarios"

func TestExampleScenariosLoad(t *testing.T) {
	files, err := filepath.Glob(filepath.Join(scenarioDir, "*.yaml"))
	if err != nil || len(files) < 8 {
		t.Fatalf("want at least 8 example scenarios, found %d (%v)", len(files), err)
	}
	kinds := map[string]bool{}
	protocols := map[string]bool{}
	for _, f := range files {
		s, err := LoadScenario(f)
		if err != nil {
			t.Errorf("%v", err)
			continue
		}
		if _, err := New(s, nil); err == nil {
			t.Errorf("New accepted a nil clock")
		}
		if _, err := NewModel(s); err != nil {
			t.Errorf("%s: %v", f, err)
		}
		for _, fl := range s.Faults {
			kinds[fl.Kind] = true
		}
		protocols[s.Dosimeter.Protocol] = true
	}
	for _, k := range []string{FaultCablePulled, FaultStalled, FaultGarbage, FaultOverRange, FaultWrongUnit} {
		if !kinds[k] {
			t.Errorf("no example scenario injects %s", k)
		}
	}
	if !protocols[ProtocolOndrakel] || !protocols[ProtocolVeltrane] {
		t.Errorf("examples cover dosimeter protocols %v, want both", protocols)
	}
}

func TestDefaultScenario(t *testing.T) {
	s, err := LoadScenario(filepath.Join(scenarioDir, "tollemby-rise-room2.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	if s.Intensifier.Serial != "HV-2291" || len(s.Intensifier.FieldModes) != 3 || len(s.Faults) != 0 {
		t.Errorf("default demo: serial %q, %d modes, %d faults; want HV-2291, 3, 0",
			s.Intensifier.Serial, len(s.Intensifier.FieldModes), len(s.Faults))
	}
	if s.Dosimeter.LinkName != "veltrane-KR40-1187" {
		t.Errorf("dosimeter link %q, want veltrane-KR40-1187 (meters.md)", s.Dosimeter.LinkName)
	}
}

// TestScenarioErrors: every bad input names the file and the line.
func TestScenarioErrors(t *testing.T) {
	const good = "intensifier:\n  field_modes:\n    - {name: 32cm, diameter_cm: 32, conversion_factor: 150, kerma_rate: 0.5}\n"
	for _, tc := range []struct {
		name, yaml string
		line       int
		want       string
	}{
		{"unknown top key", good + "colour: red\n", 4, "unknown field"},
		{"unknown nested key", "intensifier:\n  field_modes:\n    - {name: a, diameter_cm: 32, conversion_factor: 1, kerma_rate: 1}\n  glare: 3\n", 4, "glare"},
		{"syntax", good + "dosimeter: [\n", 4, ""},
		{"wrong type", good + "seed: lots\n", 4, ""},
		{"no modes", "seed: 3\nintensifier:\n  serial: X\n", 3, "field mode"},
		{"bad diameter", "intensifier:\n  field_modes:\n    - name: a\n      diameter_cm: -3\n      conversion_factor: 1\n      kerma_rate: 1\n", 4, "diameter_cm"},
		{"bad protocol", good + "dosimeter:\n  protocol: morse\n", 5, "morse"},
		{"bad unit", good + "photometer:\n  unit: lux\n", 5, "lux"},
		{"bad fault kind", good + "faults:\n  - kind: flood\n    meter: dosimeter\n    duration: 1s\n", 5, "flood"},
		{"fault without duration", good + "faults:\n  - kind: stalled\n    meter: dosimeter\n", 5, "duration"},
		{"fault bad meter", good + "faults:\n  - kind: stalled\n    meter: kettle\n    duration: 1s\n", 6, "kettle"},
		{"bad duration", good + "dosimeter:\n  response_time: soon\n", 5, ""},
		{"decoder panic (found by fuzzing)", "faults: ! ", 0, "malformed YAML"},
		{"pulse too wide", good + "  pulsed: {rate_hz: 30, width: 40ms}\n", 4, "width"},
		// NaN passes every range check written as "x < lo || x > hi".
		{"NaN conversion factor", "intensifier:\n  field_modes:\n    - {name: 32cm, diameter_cm: 32, conversion_factor: .nan, kerma_rate: 0.5}\n", 3, "field_modes[0].conversion_factor: NaN is not a number"},
		{"infinite kerma rate", "intensifier:\n  field_modes:\n    - name: 32cm\n      diameter_cm: 32\n      conversion_factor: 150\n      kerma_rate: .inf\n", 6, "kerma_rate: +Inf"},
		{"NaN air", good + "room_air:\n  temperature_c: .nan\n  pressure_kpa: 101\n", 5, "room_air.temperature_c: NaN"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ParseScenario("room.yaml", []byte(tc.yaml))
			var se *ScenarioError
			if !errors.As(err, &se) {
				t.Fatalf("error %v is not a ScenarioError", err)
			}
			if se.File != "room.yaml" || se.Line != tc.line {
				t.Errorf("error at %s:%d, want room.yaml:%d (%v)", se.File, se.Line, tc.line, err)
			}
			if !strings.HasPrefix(err.Error(), "room.yaml:") || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %q lacks %q", err, tc.want)
			}
		})
	}
}

func TestLoadScenarioMissingFile(t *testing.T) {
	_, err := LoadScenario(filepath.Join(t.TempDir(), "none.yaml"))
	if !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing file: %v", err)
	}
}

// FuzzParseScenario: no input makes the parser panic, and whatever it
// accepts builds a model.
func FuzzParseScenario(f *testing.F) {
	bases := [][]byte{[]byte(quietYAML)}
	files, _ := filepath.Glob(filepath.Join(scenarioDir, "*.yaml"))
	for _, p := range files {
		if b, err := os.ReadFile(p); err == nil {
			bases = append(bases, b)
		}
	}
	for i := range bases {
		f.Add(uint8(i), uint16(0), uint16(0), []byte{})
	}
	for _, whole := range []string{"intensifier: {field_modes: [{name: a, diameter_cm: 1e309}]}", "faults: ! "} {
		f.Add(uint8(0), uint16(0), uint16(len(quietYAML)), []byte(whole))
	}
	// An input edits one of the seed files (which) by writing patch at at
	// over drop bytes, so inputs stay a few bytes long (the fuzzer's
	// minimiser runs a number of inputs that grows with the square of an
	// input's length: whole files as inputs kept both workers minimising
	// for the whole run); a drop over the whole file writes any file.
	f.Fuzz(func(t *testing.T, which uint8, at, drop uint16, patch []byte) {
		base := bases[int(which)%len(bases)]
		off := int(at) % (len(base) + 1)
		data := append(append(append([]byte{}, base[:off]...), patch...), base[min(off+int(drop), len(base)):]...)
		if len(data) > 8<<10 {
			return // scenarios are a few kilobytes
		}
		s, err := ParseScenario("fuzz.yaml", data)
		if err != nil {
			if !strings.HasPrefix(err.Error(), "fuzz.yaml") {
				t.Fatalf("error without the file name: %v", err)
			}
			return
		}
		if _, err := NewModel(s); err != nil {
			t.Fatalf("accepted scenario gives no model: %v", err)
		}
	})
}
