package calib

import (
	"strings"
	"testing"
)

func TestJudge(t *testing.T) {
	spec := Limit{Kind: KindSpecification, Bound: AtLeast, Value: 120}
	base := Limit{Kind: KindBaseline, Bound: AtLeast, Value: 0.8}
	act := Limit{Kind: KindActionLevel, Bound: AtLeast, Value: 130}
	res := func(v, u float64) Result {
		return Result{Quantity: QConversionFactor, Value: v, Unit: UnitConversion, ExpUnc: u, Calibrated: true}
	}
	tests := []struct {
		name     string
		r        Result
		baseline float64
		limits   []Limit
		verdict  string
		by       string
		marginal bool
	}{
		{"pass, closest limit named", res(150, 3), 168, []Limit{spec, base}, Pass, "baseline minimum 80 % of baseline", false},
		{"fail on spec", res(110, 3), 168, []Limit{base, spec}, Fail, "specification minimum 120", false},
		{"spec decides before baseline", res(110, 3), 200, []Limit{base, spec}, Fail, "specification minimum", false},
		{"fail on baseline", res(125, 3), 168, []Limit{spec, base}, Fail, "baseline minimum", false},
		{"fail on action level", res(125, 3), 0, []Limit{spec, act}, Fail, "action level minimum 130", false},
		{"marginal pass", res(121, 3), 0, []Limit{spec}, Pass, "(marginal)", true},
		{"marginal fail", res(119, 3), 0, []Limit{spec}, Fail, "(marginal)", true},
		{"no limits", res(150, 3), 0, nil, Info, "no limit set", false},
		{"no baseline", res(150, 3), 0, []Limit{base}, Info, "no limit set", false},
		{"at most", Result{Value: 0.12, Unit: UnitRatio, ExpUnc: 0.01, Calibrated: true}, 0, []Limit{{Kind: KindSpecification, Bound: AtMost, Value: 0.10}}, Fail, "specification maximum 0.1", false},
	}
	for _, tc := range tests {
		v := Judge(tc.r, tc.baseline, tc.limits)
		if v.Verdict != tc.verdict || !strings.Contains(v.DecidedBy, tc.by) || v.Marginal != tc.marginal {
			t.Errorf("%s: %+v; want %s by %q marginal %v", tc.name, v, tc.verdict, tc.by, tc.marginal)
		}
	}
	// Not calibrated: never pass or fail.
	r := res(110, 3)
	r.Calibrated = false
	r.Flags = []Flag{{FlagExpired, "certificate X expired on 2025-03-04: reading not calibrated"}}
	v := Judge(r, 0, []Limit{spec})
	if v.Verdict != Info || !strings.Contains(v.DecidedBy, "expired") || !strings.Contains(strings.Join(v.Notes, ";"), "would be fail") {
		t.Errorf("uncalibrated: %+v", v)
	}
}
