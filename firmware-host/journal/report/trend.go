package report

import (
	"context"
	"fmt"
	"math"
	"sort"
	"time"

	"gonum.org/v1/gonum/stat"

	"kermalux/firmware-host/journal/entry"
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

// yearDays is the mean Gregorian year, for converting dates to years.
const yearDays = 365.2425

// Fit builds the trends of quantity (e.g. "conversion_factor") from a
// history, one per field mode (a history without field modes gives one
// trend). actionLevel is a fraction of baseline (≤ 0 means
// DefaultActionLevel).
//
// The line is an unweighted least-squares fit of value against time in
// years (gonum stat.LinearRegression), the annual rate is its slope, and
// the projected date is where the line reaches actionLevel × baseline:
//
//	t_cross = (A·B − α) / β   years after the first session
//
// with α the intercept, β the slope, A the action level and B the baseline.
// The baseline is the one recorded with the results (the latest point that
// carries one) or else the first session's value.
func Fit(serial, quantity string, history []HistoryPoint, actionLevel float64) []Trend {
	if actionLevel <= 0 {
		actionLevel = DefaultActionLevel
	}
	groups := map[string][]HistoryPoint{}
	var modes []string
	for _, h := range history {
		if h.Result.Quantity != quantity {
			continue
		}
		if _, ok := groups[h.Result.FieldMode]; !ok {
			modes = append(modes, h.Result.FieldMode)
		}
		groups[h.Result.FieldMode] = append(groups[h.Result.FieldMode], h)
	}
	sort.Strings(modes)
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
	xs := make([]float64, 0, len(hs))
	ys := make([]float64, 0, len(hs))
	if len(hs) > 0 {
		t.Origin = hs[0].Date
		t.Unit = hs[0].Result.Unit
	}
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
	}
	t.ActionValue = actionLevel * t.Baseline
	if len(xs) < 2 || xs[len(xs)-1] == xs[0] {
		t.CrossingNote = "one session only: no rate of change yet"
		return t
	}
	t.Intercept, t.Slope = stat.LinearRegression(xs, ys, nil, false)
	t.Fitted = true
	if t.Baseline != 0 {
		t.FracPerYear = t.Slope / t.Baseline
	}
	last := t.Points[len(t.Points)-1]
	lastX := years(last.Date.Sub(t.Origin))
	toGo := t.ActionValue - (t.Intercept + t.Slope*lastX)
	switch {
	case t.Slope == 0:
		t.CrossingNote = "no change: no crossing projected"
	case toGo != 0 && (toGo > 0) != (t.Slope > 0):
		t.CrossingNote = "not moving toward the action level: no crossing projected"
	default:
		tc := (t.ActionValue - t.Intercept) / t.Slope
		if math.IsNaN(tc) || math.IsInf(tc, 0) || tc > 1000 {
			t.CrossingNote = "no crossing within 1000 years"
			return t
		}
		t.Crossing = t.Origin.Add(time.Duration(tc * yearDays * 24 * float64(time.Hour)))
		t.HasCrossing = true
		if !t.Crossing.After(last.Date) {
			t.CrossingNote = "the fitted line is already past the action level"
		}
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
