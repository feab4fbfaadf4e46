package bench

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestSimulatedBaselineRefused: a demo's results.json has the shape of a
// real one; a real bench refuses it as its baseline, the demo's bench
// (marked simulated) accepts it.
func TestSimulatedBaselineRefused(t *testing.T) {
	dir := t.TempDir()
	sim := `{"session": "demo", "outcome": "complete", "simulated": true,
  "results": [{"quantity": "conversion_factor", "field_mode": "32cm", "value": 152}], "beam_on_s": 100}`
	if err := os.WriteFile(filepath.Join(dir, "demo-results.json"), []byte(sim), 0o644); err != nil {
		t.Fatal(err)
	}
	text := "site: S\nroom: R\ntest_type: yearly\nintensifier:\n  serial: HV-1\n  baseline: demo-results.json\n" +
		"meters:\n  - {name: dosimeter, role: dosimeter, scpi: {}}\n  - {name: photometer, role: photometer, scpi: {}}\n"
	path := filepath.Join(dir, "bench.yaml")
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	b, err := Load(path)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := b.EngineSettings(); !errors.Is(err, ErrSimulatedBaseline) || !strings.Contains(err.Error(), "demo-results.json") {
		t.Errorf("real bench with a simulated baseline: %v", err)
	}
	b.Simulated = true
	l, err := b.EngineSettings()
	if err != nil || l.Baseline["conversion_factor@32cm"] != 152 {
		t.Errorf("simulated bench: %v, %v", err, l.Baseline)
	}
	// A test type the report cannot name is refused with its line.
	bad := strings.Replace(text, "test_type: yearly", "test_type: monthly", 1)
	if _, err := Parse(path, []byte(bad)); err == nil || !strings.Contains(err.Error(), "test_type") || !strings.Contains(err.Error(), ":3:") {
		t.Errorf("test_type monthly: %v", err)
	}
}
