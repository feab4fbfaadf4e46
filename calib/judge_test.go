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
		verdict  Outcome
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
		if v.Outcome != tc.verdict || !strings.Contains(v.DecidedBy, tc.by) || v.Marginal != tc.marginal {
			t.Errorf("%s: %+v; want %s by %q marginal %v", tc.name, v, tc.verdict, tc.by, tc.marginal)
		}
	}
	// Not calibrated: never pass or fail.
	r := res(110, 3)
	r.Calibrated = false
	r.Flags = []Flag{{FlagExpired, "certificate X expired on 2025-03-04: reading not calibrated"}}
	v := Judge(r, 0, []Limit{spec})
	if v.Outcome != Info || !strings.Contains(v.DecidedBy, "expired") || !strings.Contains(strings.Join(v.Notes, ";"), "would be fail") {
		t.Errorf("uncalibrated: %+v", v)
	}
}

// TestJudgeReportsEveryLimit: every limit compared is returned as an
// absolute value with its margin, not only the one that decided
// (arithmetic on the definitions: margin = value − limit for a minimum,
// limit − value for a maximum; a baseline limit is fraction × baseline).
func TestJudgeReportsEveryLimit(t *testing.T) {
	r := Result{Quantity: QConversionFactor, Value: 150, Unit: UnitConversion, ExpUnc: 5, Calibrated: true}
	v := Judge(r, 180, []Limit{
		{Kind: KindActionLevel, Bound: AtLeast, Value: 100},
		{Kind: KindSpecification, Bound: AtLeast, Value: 120},
		{Kind: KindBaseline, Bound: AtLeast, Value: 0.8},
		{Kind: KindSpecification, Bound: AtMost, Value: 153},
	})
	want := []struct {
		kind             string
		absolute, margin float64
		passed, withinU  bool
	}{
		{KindSpecification, 120, 30, true, false},
		{KindSpecification, 153, 3, true, true},
		{KindBaseline, 144, 6, true, false},
		{KindActionLevel, 100, 50, true, false},
	}
	if len(v.Checks) != len(want) {
		t.Fatalf("%d checks, want %d: %+v", len(v.Checks), len(want), v.Checks)
	}
	for i, w := range want {
		c := v.Checks[i]
		if c.Limit.Kind != w.kind || c.Absolute != w.absolute || c.Margin != w.margin || c.Passed != w.passed || c.WithinU != w.withinU {
			t.Errorf("check %d: %+v, want %+v", i, c, w)
		}
	}
	fail := Judge(Result{Value: 110, ExpUnc: 3, Calibrated: true}, 0, []Limit{{Kind: KindSpecification, Bound: AtLeast, Value: 120}})
	if len(fail.Checks) != 1 || fail.Checks[0].Passed || fail.Checks[0].Margin != -10 {
		t.Errorf("failed limit: %+v", fail.Checks)
	}
}

// "Marginal" is said only of the limit that decided: a fail against a
// specification minimum of 100 is not marginal because an action level of
// 60 lies within the uncertainty of a value of 61 (common practice,
// simple acceptance: each limit is compared with the value itself).
func TestMarginalOnlyForTheDecidingLimit(t *testing.T) {
	r := Result{Quantity: QConversionFactor, Value: 61, ExpUnc: 3, Unit: UnitConversion, Calibrated: true}
	limits := []Limit{{Kind: KindSpecification, Bound: AtLeast, Value: 100}, {Kind: KindActionLevel, Bound: AtLeast, Value: 60}}
	v := Judge(r, 0, limits)
	if v.Outcome != Fail || v.Marginal || v.Decided.Kind != KindSpecification || v.DecidedAt != 100 {
		t.Errorf("got %s by %q (%s at %g), marginal %v; want a plain fail by the specification at 100", v.Outcome, v.DecidedBy, v.Decided.Kind, v.DecidedAt, v.Marginal)
	}
	// The near action level is still noted for the report.
	noted := false
	for _, n := range v.Notes {
		noted = noted || strings.Contains(n, "action level minimum 60")
	}
	if !noted {
		t.Errorf("notes %v do not mention the near action level", v.Notes)
	}
	// Near the deciding limit: marginal.
	r.Value = 101
	if v := Judge(r, 0, limits); v.Outcome != Pass || !v.Marginal || v.DecidedAt != 100 {
		t.Errorf("101 ± 3 against 100: %s marginal %v at %g", v.Outcome, v.Marginal, v.DecidedAt)
	}
	// A baseline limit is decided at its absolute value.
	if v := Judge(Result{Value: 150, ExpUnc: 5, Unit: UnitConversion, Calibrated: true}, 168, []Limit{{Kind: KindBaseline, Bound: AtLeast, Value: 0.8}}); v.DecidedAt != 0.8*168 {
		t.Errorf("baseline limit decided at %g, want %g", v.DecidedAt, 0.8*168)
	}
}

// TestJudgeRangeFloor (observation 4: a photometer whose range floor is
// above the dark limit reported "dark 0 ± 0, pass" while the true dark was
// six times the limit): a maximum below the meter's range floor can never
// be passed, whatever value the readings averaged to; a value read under
// range passes a maximum at or above the floor and fails a minimum at or
// above it; an unknown floor leaves it not measurable. A fail on another
// limit still decides. (Logic of the bound, no outside value needed.)
func TestJudgeRangeFloor(t *testing.T) {
	maxL := func(v float64) Limit { return Limit{Kind: KindSpecification, Bound: AtMost, Value: v} }
	minL := func(v float64) Limit { return Limit{Kind: KindSpecification, Bound: AtLeast, Value: v} }
	for _, tc := range []struct {
		name   string
		r      Result
		limits []Limit
		want   Outcome
		words  string
	}{
		{"zeros averaged under a floor above the limit", Result{Value: 0, Floor: 0.1, BelowFloor: true, Calibrated: true}, []Limit{maxL(0.05)}, NotMeasurable, "range floor 0.1"},
		{"a value read below a limit that lies under the floor", Result{Value: 0.03, Floor: 0.1, Calibrated: true}, []Limit{maxL(0.05)}, NotMeasurable, "range floor"},
		{"under range, floor inside the maximum", Result{Value: 0, Floor: 0.1, BelowFloor: true, Calibrated: true}, []Limit{maxL(0.5)}, Pass, ""},
		{"under range, floor inside the minimum", Result{Value: 0, Floor: 0.1, BelowFloor: true, Calibrated: true}, []Limit{minL(0.5)}, Fail, ""},
		{"under range, floor unknown", Result{Value: 0, BelowFloor: true, Calibrated: true}, []Limit{maxL(0.5)}, NotMeasurable, "floor is not known"},
		{"read above the floor, minimum below it", Result{Value: 2, Floor: 0.1, Calibrated: true}, []Limit{minL(0.05)}, Pass, ""},
		{"not measurable on one, fail on another", Result{Value: 0.2, Floor: 0.1, Calibrated: true}, []Limit{maxL(0.05), minL(1)}, Fail, ""},
		{"not calibrated stays not measurable", Result{Value: 0, Floor: 0.1, BelowFloor: true}, []Limit{maxL(0.05)}, NotMeasurable, "range floor"},
	} {
		v := Judge(tc.r, 0, tc.limits)
		if v.Outcome != tc.want || !strings.Contains(v.DecidedBy, tc.words) {
			t.Errorf("%s: %s (%s), want %s mentioning %q", tc.name, v.Outcome, v.DecidedBy, tc.want, tc.words)
		}
	}
}
