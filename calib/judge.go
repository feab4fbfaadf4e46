package calib

import (
	"fmt"
	"math"
	"sort"
	"strings"
)

// Bound is which side of a limit passes.
type Bound string

// Bounds.
const (
	AtLeast Bound = "at_least" // value ≥ limit passes
	AtMost  Bound = "at_most"  // value ≤ limit passes
)

// Kinds of limit, in the order they are checked.
const (
	KindSpecification = "specification" // from the intensifier's data, entered in the session
	KindBaseline      = "baseline"      // a fraction of the intensifier's own baseline
	KindActionLevel   = "action level"  // a local decision
)

// Limit is one acceptance limit of a figure of merit. For KindBaseline,
// Value is a fraction of the baseline (0.8: at least 80 % of baseline);
// otherwise it is in the result's unit.
type Limit struct {
	Kind  string
	Bound Bound
	Value float64
}

func (l Limit) words(unit string) string {
	side := "minimum"
	if l.Bound == AtMost {
		side = "maximum"
	}
	if l.Kind == KindBaseline {
		return fmt.Sprintf("%s %s %.0f %% of baseline", l.Kind, side, 100*l.Value)
	}
	if unit == UnitRatio {
		unit = ""
	}
	return strings.TrimSpace(fmt.Sprintf("%s %s %.4g %s", l.Kind, side, l.Value, unit))
}

// Outcome is what a judgement concluded; its text is the journal's
// (entry.Result.Verdict).
type Outcome string

// Outcomes.
const (
	Pass Outcome = "pass"
	Fail Outcome = "fail"
	Info Outcome = "info" // not judged: no limit, or the result is not calibrated
	// NotMeasurable: the meter cannot show on which side of a limit the
	// value lies (its range floor is above the limit, or it read under
	// range with no known floor). Never a pass or a fail.
	NotMeasurable Outcome = "not_measurable"
)

// Judgement is a judged result.
type Judgement struct {
	Outcome   Outcome // Pass, Fail, Info or NotMeasurable
	DecidedBy string  // which limit decided it, in words
	Marginal  bool    // the deciding limit lies within the expanded uncertainty of the value
	Notes     []string
	// Checks are the limits compared, in the order checked, as absolute
	// values with the margin to each (for the report).
	Checks []Check
	// Decided is the limit that decided the verdict, and DecidedAt its
	// value in the result's unit (for a baseline limit, the fraction times
	// the baseline); Decided.Kind is empty when no limit was checked.
	Decided   Limit
	DecidedAt float64
}

// Check is one limit compared with a value: the limit in the value's unit
// (a baseline fraction times the baseline), the margin (positive inside
// the limit, negative outside) and whether the limit lies within the
// expanded uncertainty.
type Check struct {
	Limit    Limit
	Absolute float64
	Margin   float64
	Passed   bool
	WithinU  bool
}

// Judge judges r against limits. baseline is the intensifier's baseline
// value of the same figure (0: none; baseline limits are then skipped).
//
// How uncertainty enters (common practice, "simple acceptance"): the value
// itself is compared with each limit; when a limit lies within the
// expanded uncertainty U of the value the verdict stands but is marked
// Marginal, so the report asks a physicist to look. Limits are checked in
// the order specification, baseline, action level, and the first one
// failed decides a Fail. When all pass, the one with the smallest margin
// is named. A result that is not calibrated is never Pass or Fail: it is
// Info, and the note says what the comparison would have given.
//
// The meter's range floor (r.Floor) bounds what can be shown: a value the
// meter read under range (r.BelowFloor) is only known to lie below the
// floor, so it passes a maximum at or above the floor and fails a minimum
// at or above it; a limit below the floor can never be passed, however the
// readings were averaged: such a limit, and any limit when the floor is
// not known, makes the result NotMeasurable, with the reason. A fail on
// another limit still decides a Fail.
func Judge(r Result, baseline float64, limits []Limit) Judgement {
	order := map[string]int{KindSpecification: 0, KindBaseline: 1, KindActionLevel: 2}
	ls := append([]Limit(nil), limits...)
	sort.SliceStable(ls, func(i, j int) bool { return order[ls[i].Kind] < order[ls[j].Kind] })
	var v Judgement
	var failed *Limit
	var failedWords string
	var failedAt, closestAt float64
	var failedNear, closestNear bool
	var closestLimit Limit
	closest, closestWords := math.Inf(1), ""
	checked := 0
	unmeasurable := ""
	for i := range ls {
		l := ls[i]
		limit := l.Value
		if l.Kind == KindBaseline {
			if !(baseline > 0) {
				v.Notes = append(v.Notes, "no baseline: baseline limit not checked")
				continue
			}
			limit = l.Value * baseline
		}
		if math.IsNaN(limit) || (l.Bound != AtLeast && l.Bound != AtMost) {
			v.Notes = append(v.Notes, fmt.Sprintf("limit %q not understood: not checked", l.Kind))
			continue
		}
		checked++
		w := l.words(r.Unit)
		if why := floorBlocks(r, l.Bound, limit, w); why != "" {
			if unmeasurable == "" {
				unmeasurable = why
			}
			continue
		}
		ok := r.Value >= limit
		margin := r.Value - limit
		if l.Bound == AtMost {
			ok, margin = r.Value <= limit, limit-r.Value
		}
		if r.BelowFloor {
			// Below a floor at or inside the limit: the side is known,
			// and the margin is at least the floor's distance.
			ok, margin = l.Bound == AtMost, math.Abs(limit-r.Floor)
		}
		near := math.Abs(r.Value-limit) <= r.ExpUnc
		v.Checks = append(v.Checks, Check{Limit: l, Absolute: limit, Margin: margin, Passed: ok, WithinU: near})
		if near {
			v.Notes = append(v.Notes, fmt.Sprintf("%s lies within the expanded uncertainty (±%.2g)", w, r.ExpUnc))
		}
		if !ok && failed == nil {
			failed, failedWords, failedAt, failedNear = &ls[i], w, limit, near
		}
		if ok && margin < closest {
			closest, closestWords, closestAt, closestNear, closestLimit = margin, w, limit, near, l
		}
	}
	// Marginal is said of the limit that decided: a limit far from the
	// value is not made doubtful by another one near it.
	switch {
	case checked == 0:
		v.Outcome, v.DecidedBy = Info, "no limit set"
	case failed != nil:
		v.Outcome, v.DecidedBy, v.Decided, v.DecidedAt, v.Marginal = Fail, failedWords, *failed, failedAt, failedNear
	case unmeasurable != "":
		v.Outcome, v.DecidedBy = NotMeasurable, unmeasurable
	default:
		v.Outcome, v.DecidedBy, v.Decided, v.DecidedAt, v.Marginal = Pass, closestWords, closestLimit, closestAt, closestNear
	}
	if !r.Calibrated && v.Outcome != Info && v.Outcome != NotMeasurable {
		v.Notes = append(v.Notes, fmt.Sprintf("would be %s on %s", v.Outcome, v.DecidedBy))
		reason := "result not calibrated"
		if t := FlagTexts(r.Flags); len(t) > 0 {
			reason += ": " + t[0]
		}
		v.Outcome, v.DecidedBy = Info, reason
	}
	if v.Marginal && (v.Outcome == Pass || v.Outcome == Fail) {
		v.DecidedBy += " (marginal)"
	}
	return v
}

// floorBlocks says why a limit cannot be judged against the meter's range
// floor ("" when it can): the meter read under range and its floor is not
// known, or the limit lies below the floor where no reading can show a
// value under it. A minimum below the floor is no obstacle to a value
// read above the floor.
func floorBlocks(r Result, b Bound, limit float64, words string) string {
	switch {
	case r.BelowFloor && !(r.Floor > 0):
		return fmt.Sprintf("the meter read under range and its range floor is not known: %s cannot be judged", words)
	case r.Floor > 0 && limit < r.Floor && (b == AtMost || r.BelowFloor):
		return fmt.Sprintf("the meter's range floor %.4g lies above the %s: not measurable with this meter", r.Floor, words)
	}
	return ""
}
