package report

import (
	"context"
	"fmt"
	"math"
	"sort"
	"time"

	"gonum.org/v1/gonum/stat"

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
}

// HistorySource gives an intensifier's history of results, oldest first or
// in any order (Fit sorts).
type HistorySource interface {
	History(ctx context.Context, serial string) ([]HistoryPoint, error)
}

// DefaultActionLevel is the fraction of baseline used as the action level
// when none is configured. Action levels are local decisions; 0.5 of the
// acceptance value is the figure this program assumes (common practice for
// considering replacement of an ageing tube, from memory) and the report
// prints which level was used.
const DefaultActionLevel = 0.5

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

	// Least-squares line value = Intercept + Slope·(years since Origin).
	Origin      time.Time
	Intercept   float64
	Slope       float64 // unit per year
	FracPerYear float64 // Slope / Baseline
	Fitted      bool    // at least two sessions on different days

	ActionLevel float64   // fraction of baseline
	ActionValue float64   // ActionLevel × Baseline
	Crossing    time.Time // projected date the line reaches ActionValue
	HasCrossing bool
	// CrossingNote explains a missing or past crossing in plain words.
	CrossingNote string
}

// yearDays is the year used to turn dates into years (the Julian year,
// as calib does for its rates).
const yearDays = 365.25

// Fit builds the trends of quantity (e.g. "conversion_factor") from a
// history, one per field mode (a history without field modes gives one
// trend). actionLevel is a fraction of baseline (≤ 0 means
// DefaultActionLevel).
//
// The rate and the projected date come from calib.Compare: an unweighted
// least-squares line of value against time in years through all sessions
// (the line through two when there are two); the projected date is where
// that line reaches actionLevel × baseline:
//
//	t_cross = (A·B − α) / β   years after the first session
//
// with α the intercept, β the slope, A the action level and B the baseline.
// The baseline is the one recorded with the results (the latest point that
// carries one) or else the first session's value. For non-uniformity the
// action level is a ceiling; for everything else a floor.
func Fit(serial, quantity string, history []HistoryPoint, actionLevel float64) []Trend {
	if actionLevel <= 0 {
		actionLevel = DefaultActionLevel
	}
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
		if _, ok := groups[h.Result.FieldMode]; !ok {
			modes = append(modes, h.Result.FieldMode)
		}
		groups[h.Result.FieldMode] = append(groups[h.Result.FieldMode], h)
	}
	// Field modes keep the order they first appear in (the procedure's
	// order, usually the full field first).
	var out []Trend
	for _, mode := range modes {
		out = append(out, fitOne(serial, quantity, mode, groups[mode], actionLevel))
	}
	return out
}

func fitOne(serial, quantity, mode string, hs []HistoryPoint, actionLevel float64) Trend {
	sort.SliceStable(hs, func(i, j int) bool { return hs[i].Date.Before(hs[j].Date) })
	t := Trend{Serial: serial, Quantity: quantity, FieldMode: mode, ActionLevel: actionLevel}
	for i := len(hs) - 1; i >= 0; i-- {
		if hs[i].Result.Baseline > 0 {
			t.Baseline, t.BaselineFrom = hs[i].Result.Baseline, "recorded"
			break
		}
	}
	if t.Baseline == 0 && len(hs) > 0 {
		t.Baseline, t.BaselineFrom = hs[0].Result.Value, "first session"
	}
	if len(hs) > 0 {
		t.Origin = hs[0].Date
		t.Unit = hs[0].Result.Unit
	}
	var xs, ys []float64
	var dated []calib.Dated
	for _, h := range hs {
		p := TrendPoint{Session: h.Session, Date: h.Date, Site: h.Site, Room: h.Room,
			Value: h.Result.Value, ExpUnc: h.Result.ExpUnc, K: h.Result.K, Verdict: h.Result.Verdict,
			Calibrated: h.Result.Calibrated}
		if t.Baseline != 0 {
			p.Fraction = p.Value / t.Baseline
		}
		t.Points = append(t.Points, p)
		xs = append(xs, years(h.Date.Sub(t.Origin)))
		ys = append(ys, h.Result.Value)
		dated = append(dated, calib.Dated{Day: h.Date, Value: h.Result.Value})
	}
	t.ActionValue = actionLevel * t.Baseline
	if len(hs) < 2 || xs[len(xs)-1] == xs[0] {
		t.CrossingNote = "one session only: no rate of change yet"
		return t
	}
	bound := calib.AtLeast
	if quantity == "non_uniformity" {
		bound = calib.AtMost
	}
	last := len(dated) - 1
	ct, err := calib.Compare(dated[last], t.Baseline, dated[:last], &calib.Limit{Kind: calib.KindBaseline, Bound: bound, Value: actionLevel})
	if err != nil || math.IsNaN(ct.AnnualRate) {
		t.CrossingNote = "no rate of change"
		if err != nil {
			t.CrossingNote += ": " + err.Error()
		}
		return t
	}
	t.Fitted = true
	t.FracPerYear = ct.AnnualRate
	t.Slope = ct.AnnualRate * t.Baseline
	// The least-squares line (and the line through two points) passes
	// through the centroid of the points: that fixes the intercept.
	t.Intercept = stat.Mean(ys, nil) - t.Slope*stat.Mean(xs, nil)
	switch {
	case ct.Beyond:
		t.CrossingNote = "the latest value is already past the action level"
	case ct.Crossing.IsZero():
		t.CrossingNote = "not moving toward the action level: no crossing projected"
	default:
		t.Crossing, t.HasCrossing = ct.Crossing, true
	}
	return t
}

func years(d time.Duration) float64 { return d.Hours() / 24 / yearDays }

// AttachHistory fits the conversion factor history of the report's
// intensifier and keeps it for the trend chart and table.
func (r *Report) AttachHistory(history []HistoryPoint, actionLevel float64) {
	r.Trends = Fit(r.Session.IntensifierSerial, "conversion_factor", history, actionLevel)
}

// LoadTrends reads an intensifier's history from src and fits it.
func LoadTrends(ctx context.Context, src HistorySource, serial, quantity string, actionLevel float64) ([]Trend, error) {
	hs, err := src.History(ctx, serial)
	if err != nil {
		return nil, fmt.Errorf("history of intensifier %s: %w", serial, err)
	}
	if len(hs) == 0 {
		return nil, fmt.Errorf("history of intensifier %s: no sessions in the store", serial)
	}
	ts := Fit(serial, quantity, hs, actionLevel)
	if len(ts) == 0 {
		return nil, fmt.Errorf("history of intensifier %s: no %s results", serial, quantity)
	}
	return ts, nil
}
