package engine

import (
	"bytes"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/procedures/entry"
)

// results.json round-trips, and the baseline keys follow quantity@mode.
func TestResultsRoundTrip(t *testing.T) {
	sum := Summary{Session: "s1", Outcome: "complete", Results: []entry.Result{
		{Procedure: "conversion-factor", FieldMode: "32cm", Quantity: "conversion_factor", Value: 152, Unit: "cd·m⁻²/(µGy·s⁻¹)", ExpUnc: 4.8, K: 2, Verdict: "pass", Calibrated: true},
		{Procedure: "contrast-ratio", Quantity: "contrast_ratio", Value: 24, Unit: "1", ExpUnc: 0.3, K: 2, Verdict: "pass", Calibrated: true},
	}}
	var buf bytes.Buffer
	if err := WriteResults(&buf, NewResultsFile(sum, entry.Session{Site: "Tollemby Rise Clinic"})); err != nil {
		t.Fatal(err)
	}
	rf, err := ParseResults("x.json", buf.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	b := Baselines(rf)
	if b["conversion_factor@32cm"] != 152 || b["contrast_ratio"] != 24 {
		t.Errorf("baselines %v", b)
	}
	if _, err := ParseResults("bad.json", []byte("{\n\"results\": [\n}")); err == nil || !strings.Contains(err.Error(), "bad.json:3") {
		t.Errorf("error %v", err)
	}
}

func FuzzParseResults(f *testing.F) {
	f.Add([]byte(`{"results":[{"quantity":"conversion_factor","field_mode":"32cm","value":152}],"beam_on_s":3}`))
	f.Add([]byte(`{"results":[{}]}`))
	f.Add([]byte("{\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		rf, err := ParseResults("fuzz.json", data)
		if err == nil {
			for _, r := range rf.Results {
				if r.Quantity == "" {
					t.Fatal("result without quantity accepted")
				}
			}
		}
	})
}

// TestSimulatedResultsSayIt: a simulated session's results.json carries
// "simulated": true and a note, a real one "simulated": false.
func TestSimulatedResultsSayIt(t *testing.T) {
	sum := Summary{Session: "s1", Outcome: "complete", Results: []entry.Result{{Quantity: "conversion_factor", Value: 152}}}
	for _, sim := range []bool{true, false} {
		var buf bytes.Buffer
		if err := WriteResults(&buf, NewResultsFile(sum, entry.Session{Simulated: sim})); err != nil {
			t.Fatal(err)
		}
		rf, err := ParseResults("r.json", buf.Bytes())
		if err != nil {
			t.Fatal(err)
		}
		want := `"simulated": false`
		if sim {
			want = `"simulated": true`
		}
		if rf.Simulated != sim || !strings.Contains(buf.String(), want) || (sim && !strings.Contains(rf.Note, "not measurements")) {
			t.Errorf("simulated %v: %s", sim, buf.String())
		}
	}
}

// TestRoundToUncertainty: the uncertainty keeps two significant digits,
// the value is rounded to the same place (JCGM 100:2008 7.2.6), in fixed
// notation. The first two rows are the GUM's own examples of a stated
// result (7.2.2: m = 100.021 47 g, u = 0.35 mg; 7.2.4: U = 0.79 mg;
// quoted from memory of the text).
func TestRoundToUncertainty(t *testing.T) {
	for _, c := range []struct {
		v, u         float64
		wantV, wantU string
	}{
		{100.02147, 0.00035, "100.02147", "0.00035"},
		{100.02147, 0.00079, "100.02147", "0.00079"},
		{95.17, 3.5, "95.2", "3.5"},                  // the demo summary printed "95.17 ± 3.5"
		{0.03004, 5.4e-06, "0.0300400", "0.0000054"}, // and "0.03 ± 5.4e-06"
		{151.47, 5.43, "151.5", "5.4"},
		{0.0804, 0.00996, "0.080", "0.010"}, // U rounds up to 0.010: two digits, not three
		{1234.6, 47, "1235", "47"},
		{1234.5, 470, "1230", "470"},
		{24.07, 0, "24.07", ""},
		{0.03004, 0, "0.03004", ""},
		{120, 0, "120.0", ""},
	} {
		v, u := RoundToUncertainty(c.v, c.u)
		if v != c.wantV || u != c.wantU {
			t.Errorf("RoundToUncertainty(%g, %g) = %q, %q; want %q, %q", c.v, c.u, v, u, c.wantV, c.wantU)
		}
	}
	for _, c := range []struct {
		k    float64
		want string
	}{{2.002, "2.00"}, {2.01, "2.01"}, {2, "2.00"}, {2.128, "2.13"}} {
		if got := CoverageFactor(c.k); got != c.want {
			t.Errorf("CoverageFactor(%g) = %q, want %q", c.k, got, c.want)
		}
	}
}

// TestCheckResultsDir: a missing folder, a file in its place and a
// read-only folder are refused before any session starts.
func TestCheckResultsDir(t *testing.T) {
	dir := t.TempDir()
	if err := CheckResultsDir(dir); err != nil {
		t.Errorf("writable folder: %v", err)
	}
	missing := filepath.Join(dir, "no-such-folder")
	if err := CheckResultsDir(missing); err == nil || !strings.Contains(err.Error(), "no-such-folder") || !errors.Is(err, os.ErrNotExist) {
		t.Errorf("missing folder: %v", err)
	}
	file := filepath.Join(dir, "a-file")
	if err := os.WriteFile(file, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	if err := CheckResultsDir(file); err == nil || !strings.Contains(err.Error(), "not a folder") {
		t.Errorf("a file: %v", err)
	}
	if os.Geteuid() != 0 { // root writes anywhere
		ro := filepath.Join(dir, "ro")
		if err := os.Mkdir(ro, 0o500); err != nil {
			t.Fatal(err)
		}
		if err := CheckResultsDir(ro); err == nil {
			t.Errorf("read-only folder accepted")
		}
	}
}

// A figure that was not measurable in the baseline session is no baseline.
func TestBaselinesSkipNotMeasurable(t *testing.T) {
	rf := ResultsFile{Results: []ResultLine{
		{Quantity: "conversion_factor", FieldMode: "32cm", Value: 152, Verdict: "pass"},
		{Quantity: "conversion_factor", FieldMode: "17cm", Value: 0, Verdict: "not_measurable"},
	}}
	b := Baselines(rf)
	if b["conversion_factor@32cm"] != 152 {
		t.Errorf("baselines %v lack the measured one", b)
	}
	if _, ok := b["conversion_factor@17cm"]; ok {
		t.Errorf("baselines %v hold the not-measurable one", b)
	}
}
