package report

import (
	"context"
	"fmt"
	"math"
	"sort"
	"time"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"

	"kermalux/calib"
	"kermalux/procedures/entry"
)

// HistoryPoint is one earlier (or the current) result of an intensifier,
// as the workstation store keeps it.
type HistoryPoint struct {
	Session string
	Date    time.Time
	Site    string
	Room    string
	Result  entry.Result
	// Simulated: the session's readings came from the bench simulator.
	Simulated bool
}

// HistorySource gives an intensifier's history of results, oldest first or
// in any order (Fit sorts).
type HistorySource interface {
	History(ctx context.Context, serial string) ([]HistoryPoint, error)
}

// BandLevel is the confidence level of the band around the fitted line
// and of the projected dates (two-sided, from Student's t at n − 2
// degrees of freedom).
const BandLevel = 0.95

// TrendPoint is one session in a trend.
type TrendPoint struct {
	Session    string
	Date       time.Time
	Site       string
	Room       string
	Value      float64
	ExpUnc     float64
	K          float64
	Verdict    string
	Fraction   float64 // of baseline
	Calibrated bool
	Simulated  bool // from the bench simulator: not a measurement
}

// Projection is where the fitted line, and the confidence band around it,
// reach one configured limit.
type Projection struct {
	Kind     string  // "specification", "baseline", "action level"
	Bound    string  // "at_least" or "at_most"
	Fraction float64 // baseline limits: the fraction of baseline
	Value    float64 // the limit in the trend's unit
	From     string  // "recorded" (journalled with the latest result) or "command line"

	Crossing    time.Time // where the fitted line reaches Value
	HasCrossing bool
	// Early and Late bound the date at BandLevel: where the band's edges
	// reach Value. A missing bound (HasEarly or HasLate false with
	// HasCrossing true) is unbounded: the slope is not known well enough.
	Early, Late       time.Time
	HasEarly, HasLate bool
	Note              string // why there is no crossing, or what limits it
}

// Trend is one quantity of one intensifier in one field mode over the years.
type Trend struct {
	Serial    string
	Quantity  string
	FieldMode string
	Unit      string
	Points    []TrendPoint
	Baseline  float64 // value the fractions refer to
	// BaselineFrom says where the baseline came from: "recorded" (the
	// results carried it) or "first session".
	BaselineFrom string

	// Least-squares line value = Intercept + Slope·(years since Origin),
	// fitted through the measured (not simulated) sessions, or through
	// all when every session is simulated.
	Origin      time.Time
	Intercept   float64
	Slope       float64 // unit per year
	FracPerYear float64 // Slope / Baseline
	Fitted      bool    // at least two sessions on different days
	Line        LineFit
	FitPoints   int  // sessions the line was fitted through
	Simulated   bool // the fit is through simulated sessions only

	// Projections: one per limit recorded with the latest result (the
	// bench's specification, action levels and baseline rule), and one
	// per fraction of baseline given on the command line.
	Projections []Projection
	// Note explains a missing fit or missing limits in plain words.
	Note string
}

// LineFit is an ordinary least-squares line y = Alpha + Beta·x with what
// its confidence band needs (NIST/SEMATECH e-Handbook of Statistical
// Methods, 4.1.4.1 and 4.5.2.1; the same estimates as NIST StRD's
// certified values for linear regression):
//
//	s² = Σ(y − ŷ)² / (n − 2)           residual variance
//	u(β) = s / √Sxx,  Sxx = Σ(x − x̄)²
//	u(ŷ(x)) = s·√(1/n + (x − x̄)²/Sxx)  the line's standard error at x
//
// and the band ŷ(x) ± t·u(ŷ(x)) with t Student's quantile at n − 2
// degrees of freedom.
type LineFit struct {
	N           int
	Alpha, Beta float64
	MeanX       float64
	MeanY       float64
	Sxx         float64
	ResidualSD  float64 // s; 0 with two points
	DoF         int     // n − 2
	T           float64 // two-sided BandLevel quantile (0 without degrees of freedom)
}

// FitLine fits y against x. It needs two points with different x; a band
// needs three.
func FitLine(xs, ys []float64) (LineFit, error) {
	n := len(xs)
	if n < 2 || len(ys) != n {
		return LineFit{}, fmt.Errorf("line fit: %d points: need two or more", n)
	}
	f := LineFit{N: n, MeanX: stat.Mean(xs, nil), MeanY: stat.Mean(ys, nil)}
	for _, x := range xs {
		f.Sxx += (x - f.MeanX) * (x - f.MeanX)
	}
	if !(f.Sxx > 0) {
		return LineFit{}, fmt.Errorf("line fit: every point at the same x: no slope")
	}
	f.Alpha, f.Beta = stat.LinearRegression(xs, ys, nil, false)
	f.DoF = n - 2
	if f.DoF > 0 {
		var ss float64
		for i := range xs {
			r := ys[i] - (f.Alpha + f.Beta*xs[i])
			ss += r * r
		}
		f.ResidualSD = math.Sqrt(ss / float64(f.DoF))
		f.T = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(f.DoF)}.Quantile(1 - (1-BandLevel)/2)
	}
	return f, nil
}

// At is the line's value at x.
func (f LineFit) At(x float64) float64 { return f.Alpha + f.Beta*x }

// SE is the standard error of the fitted line at x (0 without degrees of
// freedom).
func (f LineFit) SE(x float64) float64 {
	return f.ResidualSD * math.Sqrt(1/float64(f.N)+(x-f.MeanX)*(x-f.MeanX)/f.Sxx)
}

// SlopeSE is the standard uncertainty of the slope.
func (f LineFit) SlopeSE() float64 { return f.ResidualSD / math.Sqrt(f.Sxx) }

// Reach returns where the line reaches level (x0) and the interval of x
// over which the band ŷ(x) ± t·u(ŷ(x)) contains level, the component
// that holds x0 (Fieller's interval of inverse regression). lo or hi is
// infinite when the band never leaves level on that side: the slope is
// then not significantly different from zero at BandLevel. ok is false
// for a level line.
//
// Writing d = x − x̄, the band contains level where
//
//	(β² − t²s²/Sxx)·d² + 2β(ȳ − level)·d + (ȳ − level)² − t²s²/n ≤ 0.
func (f LineFit) Reach(level float64) (x0, lo, hi float64, ok bool) {
	if f.Beta == 0 {
		return 0, 0, 0, false
	}
	x0 = (level - f.Alpha) / f.Beta
	if f.DoF == 0 || f.ResidualSD == 0 {
		return x0, x0, x0, true
	}
	ts2 := f.T * f.T * f.ResidualSD * f.ResidualSD
	dy := f.MeanY - level
	a := f.Beta*f.Beta - ts2/f.Sxx
	b := f.Beta * dy
	c := dy*dy - ts2/float64(f.N)
	d0 := x0 - f.MeanX
	disc := b*b - a*c
	inf := math.Inf(1)
	switch {
	case a > 0:
		r := math.Sqrt(math.Max(disc, 0))
		lo, hi = (-b-r)/a, (-b+r)/a
	case disc <= 0:
		lo, hi = -inf, inf
	default: // a ≤ 0 and two roots: the band holds level outside them
		r := math.Sqrt(disc)
		d1, d2 := (-b-r)/a, (-b+r)/a
		if d1 > d2 {
			d1, d2 = d2, d1
		}
		if d0 <= d1 {
			lo, hi = -inf, d1
		} else {
			lo, hi = d2, inf
		}
	}
	return x0, f.MeanX + lo, f.MeanX + hi, true
}

// yearDays is the year used to turn dates into years (the Julian year,
// as calib does for its rates).
const yearDays = 365.25

// Fit builds the trends of quantity (e.g. "conversion_factor") from a
// history, one per field mode (a history without field modes gives one
// trend).
//
// The line is an unweighted least-squares fit of value against time in
// years (FitLine) through the sessions measured on a real bench; simulated
// sessions are shown but not fitted unless every session is simulated.
// Each limit the latest result was judged against (the bench's
// specification, action levels and baseline rule, journalled with the
// result as absolute values) gets a projection: the date the line reaches
// it, and the dates the BandLevel confidence band reaches it. actionLevels
// adds fractions of baseline (given on the command line) to those.
//
// The baseline is the one recorded with the results (the latest point that
// carries one) or else the first session's value.
func Fit(serial, quantity string, history []HistoryPoint, actionLevels ...float64) []Trend {
	// The store keeps every result record; a session that judged a result
	// twice has two records of it: the later one counts.
	latest := map[string]int{}
	for i, h := range history {
		if h.Result.Quantity == quantity {
			latest[h.Session+"\x00"+h.Result.FieldMode] = i
		}
	}
	groups := map[string][]HistoryPoint{}
	var modes []string
	for i, h := range history {
		if h.Result.Quantity != quantity || latest[h.Session+"\x00"+h.Result.FieldMode] != i {
			continue
		}
		if h.Result.Verdict == string(calib.NotMeasurable) {
			// No value to follow: a figure that could not be measured
			// is not a point of the trend (a zero would drag the fit).
			continue
		}
		if _, ok := groups[h.Result.FieldMode]; !ok {
			modes = append(modes, h.Result.FieldMode)
		}
		groups[h.Result.FieldMode] = append(groups[h.Result.FieldMode], h)
	}
	// Field modes keep the order they first appear in (the procedure's
	// order, usually the full field first).
	var out []Trend
	for _, mode := range modes {
		out = append(out, fitOne(serial, quantity, mode, groups[mode], actionLevels))
	}
	return out
}

func fitOne(serial, quantity, mode string, hs []HistoryPoint, actionLevels []float64) Trend {
	sort.SliceStable(hs, func(i, j int) bool { return hs[i].Date.Before(hs[j].Date) })
	t := Trend{Serial: serial, Quantity: quantity, FieldMode: mode}
	for i := len(hs) - 1; i >= 0; i-- {
		if hs[i].Result.Baseline > 0 {
			t.Baseline, t.BaselineFrom = hs[i].Result.Baseline, "recorded"
			break
		}
	}
	if t.Baseline == 0 && len(hs) > 0 {
		t.Baseline, t.BaselineFrom = hs[0].Result.Value, "first session"
	}
	nReal := 0
	for _, h := range hs {
		if !h.Simulated {
			nReal++
		}
	}
	t.Simulated = nReal == 0
	var xs, ys []float64
	var last *HistoryPoint
	for i, h := range hs {
		p := TrendPoint{Session: h.Session, Date: h.Date, Site: h.Site, Room: h.Room,
			Value: h.Result.Value, ExpUnc: h.Result.ExpUnc, K: h.Result.K, Verdict: h.Result.Verdict,
			Calibrated: h.Result.Calibrated, Simulated: h.Simulated}
		if t.Baseline != 0 {
			p.Fraction = p.Value / t.Baseline
		}
		t.Points = append(t.Points, p)
		if h.Simulated && !t.Simulated {
			continue
		}
		if last == nil {
			t.Origin, t.Unit = h.Date, h.Result.Unit
		}
		xs = append(xs, years(h.Date.Sub(t.Origin)))
		ys = append(ys, h.Result.Value)
		last = &hs[i]
	}
	t.FitPoints = len(xs)
	if t.Unit == "" && len(hs) > 0 {
		t.Unit = hs[0].Result.Unit
	}
	// The limits to project to: those journalled with the latest fitted
	// result, then the command line's fractions of baseline.
	var limits []Projection
	if last != nil {
		for _, l := range last.Result.Limits {
			limits = append(limits, Projection{Kind: l.Kind, Bound: l.Bound, Fraction: l.Fraction, Value: l.Value, From: "recorded"})
		}
	}
	bound := "at_least"
	if quantity == "non_uniformity" || quantity == "input_kerma_rate" {
		bound = "at_most"
	}
	for _, a := range actionLevels {
		if a > 0 && t.Baseline > 0 {
			limits = append(limits, Projection{Kind: calib.KindActionLevel, Bound: bound, Fraction: a, Value: a * t.Baseline, From: "command line"})
		}
	}
	line, err := FitLine(xs, ys)
	switch {
	case len(xs) < 2:
		t.Note = "one session only: no rate of change yet"
	case xs[len(xs)-1]-xs[0] < minTrendSpan:
		// Sessions days apart (a repeat after a repair, the demo's runs
		// minutes apart) give a slope a year of noise divided by a
		// sliver of a year.
		t.Note = fmt.Sprintf("the sessions span %s, too short for a rate of change a year (at least %.0f days)", spanWords(xs[len(xs)-1]-xs[0]), minTrendSpan*yearDays)
	case err != nil:
		t.Note = "no rate of change: " + err.Error()
	default:
		t.Fitted, t.Line = true, line
		t.Intercept, t.Slope = line.Alpha, line.Beta
		if t.Baseline != 0 {
			t.FracPerYear = line.Beta / t.Baseline
		}
		if line.DoF == 0 {
			t.Note = "two sessions: the line runs through both and has no confidence band (three or more needed)"
		}
	}
	if len(limits) == 0 {
		t.Note = joinNote(t.Note, "no limit recorded with the results and none given: nothing to project to (the bench's spec, limits.action and limits.baseline_fraction are journalled with each result; --action-level adds a fraction of baseline)")
	}
	for _, pr := range limits {
		if t.Fitted {
			pr = t.project(pr, last)
		}
		t.Projections = append(t.Projections, pr)
	}
	return t
}

// project fills the dates at which the line and its band reach the limit.
func (t Trend) project(pr Projection, last *HistoryPoint) Projection {
	now := years(last.Date.Sub(t.Origin))
	v := last.Result.Value
	if (pr.Bound == "at_least" && v < pr.Value) || (pr.Bound == "at_most" && v > pr.Value) {
		pr.Note = "the latest value is already past this limit"
		return pr
	}
	toward := (pr.Bound == "at_least" && t.Slope < 0) || (pr.Bound == "at_most" && t.Slope > 0)
	if !toward {
		pr.Note = "not moving toward this limit: no crossing projected"
		return pr
	}
	x0, lo, hi, ok := t.Line.Reach(pr.Value)
	if !ok {
		pr.Note = "no rate of change"
		return pr
	}
	pr.Crossing, pr.HasCrossing = t.date(math.Max(x0, now)), true
	if t.Line.DoF == 0 {
		pr.Note = "no confidence band from two sessions"
		return pr
	}
	if !math.IsInf(lo, 0) {
		pr.Early, pr.HasEarly = t.date(math.Max(lo, now)), true
	}
	if !math.IsInf(hi, 0) {
		pr.Late, pr.HasLate = t.date(math.Max(hi, now)), true
	}
	switch {
	case !pr.HasLate:
		pr.Note = fmt.Sprintf("the slope is not significantly different from zero at %.0f %%: no latest date", 100*BandLevel)
	case pr.HasEarly && !pr.Early.After(last.Date):
		pr.Note = fmt.Sprintf("the %.0f %% band already reaches this limit", 100*BandLevel)
	}
	return pr
}

// date turns years since the origin into a date.
func (t Trend) date(x float64) time.Time {
	const maxYears = 200 // beyond any intensifier's life: clamp, do not overflow
	x = math.Min(x, maxYears)
	return t.Origin.Add(time.Duration(x * yearDays * 24 * float64(time.Hour)))
}

func joinNote(a, b string) string {
	if a == "" {
		return b
	}
	return a + "; " + b
}

// minTrendSpan is the least time, in years, the fitted sessions must
// span for a rate of change a year: 90 days (common practice for an
// annual check's trend, not from a standard).
const minTrendSpan = 90 / yearDays

// spanWords says a span in years as days, hours or minutes.
func spanWords(y float64) string {
	d := time.Duration(y * yearDays * 24 * float64(time.Hour))
	switch {
	case d >= 48*time.Hour:
		return fmt.Sprintf("%.0f days", d.Hours()/24)
	case d >= 2*time.Hour:
		return fmt.Sprintf("%.0f hours", d.Hours())
	}
	return fmt.Sprintf("%.0f minutes", d.Minutes())
}

func years(d time.Duration) float64 { return d.Hours() / 24 / yearDays }

// AttachHistory fits the conversion factor history of the report's
// intensifier and keeps it for the trend chart and table (actionLevels as
// in Fit).
func (r *Report) AttachHistory(history []HistoryPoint, actionLevels ...float64) {
	r.Trends = Fit(r.Session.IntensifierSerial, "conversion_factor", history, actionLevels...)
}

// LoadTrends reads an intensifier's history from src and fits it.
func LoadTrends(ctx context.Context, src HistorySource, serial, quantity string, actionLevels ...float64) ([]Trend, error) {
	hs, err := src.History(ctx, serial)
	if err != nil {
		return nil, fmt.Errorf("history of intensifier %s: %w", serial, err)
	}
	if len(hs) == 0 {
		return nil, fmt.Errorf("history of intensifier %s: no sessions in the store", serial)
	}
	ts := Fit(serial, quantity, hs, actionLevels...)
	if len(ts) == 0 {
		return nil, fmt.Errorf("history of intensifier %s: no %s results", serial, quantity)
	}
	return ts, nil
}
