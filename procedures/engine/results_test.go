package engine

import (
	"bytes"
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
