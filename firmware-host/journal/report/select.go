package report

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"
	"time"

	"kermalux/firmware-host/journal/store"
)

// Selection chooses sessions of a workstation store: one session by id, or
// the sessions of one intensifier (all of them, or only the latest).
type Selection struct {
	Session string
	Serial  string
	Latest  bool
	// AllowUnverified renders sessions whose records do not verify,
	// stamped NOT VERIFIED on every page, instead of refusing them.
	AllowUnverified bool
}

// FromStore builds the reports of the selected sessions, each with its
// intensifier's conversion factor history up to and including that
// session (actionLevels as in Fit).
func FromStore(ctx context.Context, st *store.Store, sel Selection, actionLevels ...float64) ([]*Report, error) {
	var ids []string
	switch {
	case sel.Session != "":
		ids = []string{sel.Session}
	case sel.Serial != "":
		infos, err := st.Sessions(ctx, store.Query{Serial: sel.Serial})
		if err != nil {
			return nil, err
		}
		if len(infos) == 0 {
			return nil, fmt.Errorf("store %s: no session of intensifier %s", st.Path(), sel.Serial)
		}
		if sel.Latest {
			infos = infos[len(infos)-1:]
		}
		for _, in := range infos {
			ids = append(ids, in.ID)
		}
	default:
		return nil, fmt.Errorf("choose a session id or an intensifier serial")
	}
	histories := map[string][]HistoryPoint{}
	historyProblems := map[string][]string{}
	var out []*Report
	for _, id := range ids {
		problems, err := VerifyStoreSession(ctx, st, id)
		if err != nil {
			return nil, err
		}
		if err := gate("store "+st.Path()+" session "+id, problems, sel.AllowUnverified); err != nil {
			return nil, err
		}
		envs, err := st.Envelopes(ctx, id)
		if err != nil {
			return nil, err
		}
		r, err := Build(envs)
		if err != nil {
			return nil, fmt.Errorf("store %s: %w", st.Path(), err)
		}
		r.stamp(problems)
		serial := r.Session.IntensifierSerial
		hs, ok := histories[serial]
		if !ok {
			// The history shows the intensifier's earlier sessions: they
			// are verified too, and the index the history is read by.
			hp, err := VerifyStoreSerial(ctx, st, serial)
			if err != nil {
				return nil, err
			}
			if err := gate("store "+st.Path()+" intensifier "+serial+" (the report's history)", hp, sel.AllowUnverified); err != nil {
				return nil, err
			}
			if hs, err = (StoreHistory{st}).History(ctx, serial); err != nil {
				return nil, err
			}
			histories[serial], historyProblems[serial] = hs, hp
		}
		if len(r.Unverified) == 0 {
			r.stamp(historyProblems[serial]) // forced: the history's problems are stamped
		}
		r.AttachHistory(Until(hs, r.Session.Started), actionLevels...)
		out = append(out, r)
	}
	return out, nil
}

// Until keeps the history points dated at or before t: a report of an
// older session shows the history as it stood then.
func Until(hs []HistoryPoint, t time.Time) []HistoryPoint {
	var out []HistoryPoint
	for _, h := range hs {
		if !h.Date.After(t) {
			out = append(out, h)
		}
	}
	return out
}

// FromJournal builds the report of one session of a board journal file
// (or its JSON-lines export); session "" means the last one. The journal is
// verified first (VerifyJournalFile): one that does not verify is refused
// with an *UnverifiedError.
func FromJournal(ctx context.Context, path, session string) (*Report, error) {
	return FromJournalChecked(ctx, path, session, false)
}

// FromJournalChecked is FromJournal; with allowUnverified a journal that
// does not verify is rendered, stamped NOT VERIFIED on every page.
func FromJournalChecked(ctx context.Context, path, session string, allowUnverified bool) (*Report, error) {
	problems, err := VerifyJournalFile(ctx, path)
	if err != nil {
		return nil, err
	}
	if err := gate("journal "+path, problems, allowUnverified); err != nil {
		return nil, err
	}
	sessions, err := JournalSessions(ctx, path)
	if err != nil {
		return nil, err
	}
	envs, err := PickSession(sessions, session, "journal "+path)
	if err != nil {
		return nil, err
	}
	r, err := Build(envs)
	if err != nil {
		return nil, fmt.Errorf("journal %s: %w", path, err)
	}
	r.stamp(problems)
	return r, nil
}

// WriteTrendJSON prints trends as one JSON document (the fields of
// TrendJSON), for scripts.
func WriteTrendJSON(w io.Writer, trends []Trend) error {
	doc := TrendsJSON{Trends: []TrendJSON{}, BandLevel: BandLevel}
	for _, t := range trends {
		tj := TrendJSON{Serial: t.Serial, Quantity: t.Quantity, FieldMode: t.FieldMode, Unit: t.Unit, Baseline: t.Baseline,
			BaselineFrom: t.BaselineFrom, Simulated: t.Simulated, Note: t.Note, Points: []TrendPointJSON{}, Projections: []ProjectionJSON{}}
		for _, p := range t.Points {
			tj.Points = append(tj.Points, TrendPointJSON{Session: p.Session, Date: p.Date, Site: p.Site, Room: p.Room, Value: p.Value,
				ExpUnc: p.ExpUnc, K: p.K, Fraction: p.Fraction, Verdict: p.Verdict, Calibrated: p.Calibrated, Simulated: p.Simulated})
			if p.Simulated {
				doc.Simulated = true
			}
		}
		if t.Fitted {
			tj.Fit = &FitJSON{Origin: t.Origin, Intercept: t.Intercept, Slope: t.Slope, FracPerYear: t.FracPerYear, Points: t.FitPoints,
				DoF: t.Line.DoF, ResidualSD: t.Line.ResidualSD, SlopeSE: t.Line.SlopeSE(), T: t.Line.T}
		}
		for _, pr := range t.Projections {
			pj := ProjectionJSON{Kind: pr.Kind, Bound: pr.Bound, Fraction: pr.Fraction, Value: pr.Value, From: pr.From, Note: pr.Note}
			if pr.HasCrossing {
				pj.Crossing = &pr.Crossing
			}
			if pr.HasEarly {
				pj.Early = &pr.Early
			}
			if pr.HasLate {
				pj.Late = &pr.Late
			}
			tj.Projections = append(tj.Projections, pj)
		}
		doc.Trends = append(doc.Trends, tj)
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(doc); err != nil {
		return fmt.Errorf("trend JSON: %w", err)
	}
	return nil
}

// TrendsJSON is `kermalux trend --json`.
type TrendsJSON struct {
	Simulated bool        `json:"simulated"` // some session is simulated (each point says which)
	BandLevel float64     `json:"band_level"`
	Trends    []TrendJSON `json:"trends"`
}

// TrendJSON is one field mode's trend.
type TrendJSON struct {
	Serial       string           `json:"intensifier_serial"`
	Quantity     string           `json:"quantity"`
	FieldMode    string           `json:"field_mode"`
	Unit         string           `json:"unit"`
	Baseline     float64          `json:"baseline"`
	BaselineFrom string           `json:"baseline_from"`
	Simulated    bool             `json:"simulated"` // every session is simulated
	Points       []TrendPointJSON `json:"points"`
	Fit          *FitJSON         `json:"fit,omitempty"`
	Projections  []ProjectionJSON `json:"projections"`
	Note         string           `json:"note,omitempty"`
}

// TrendPointJSON is one session of a trend.
type TrendPointJSON struct {
	Session    string    `json:"session"`
	Date       time.Time `json:"date"`
	Site       string    `json:"site"`
	Room       string    `json:"room"`
	Value      float64   `json:"value"`
	ExpUnc     float64   `json:"expanded_uncertainty"`
	K          float64   `json:"coverage_factor"`
	Fraction   float64   `json:"baseline_fraction"`
	Verdict    string    `json:"verdict"`
	Calibrated bool      `json:"calibrated"`
	Simulated  bool      `json:"simulated"`
}

// FitJSON is the least-squares line: value = intercept + slope × years
// since origin.
type FitJSON struct {
	Origin      time.Time `json:"origin"`
	Intercept   float64   `json:"intercept"`
	Slope       float64   `json:"slope_per_year"`
	SlopeSE     float64   `json:"slope_standard_uncertainty"`
	FracPerYear float64   `json:"baseline_fraction_per_year"`
	Points      int       `json:"sessions_fitted"`
	DoF         int       `json:"degrees_of_freedom"`
	ResidualSD  float64   `json:"residual_sd"`
	T           float64   `json:"t_quantile"`
}

// ProjectionJSON is where the line and its band reach one limit.
type ProjectionJSON struct {
	Kind     string     `json:"kind"`
	Bound    string     `json:"bound"`
	Fraction float64    `json:"fraction,omitempty"`
	Value    float64    `json:"value"`
	From     string     `json:"from"`
	Crossing *time.Time `json:"crossing,omitempty"`
	Early    *time.Time `json:"band_early,omitempty"`
	Late     *time.Time `json:"band_late,omitempty"`
	Note     string     `json:"note,omitempty"`
}

// WriteTrendText prints trends as a table per trend followed by the rate
// of change and the projected date at the action level.
func WriteTrendText(w io.Writer, trends []Trend) error {
	for i, t := range trends {
		if i > 0 {
			fmt.Fprintln(w)
		}
		title := fmt.Sprintf("%s of %s", quantityWords(t.Quantity), t.Serial)
		if t.FieldMode != "" {
			title += ", " + t.FieldMode + " field"
		}
		fmt.Fprintf(w, "%s (%s)\n", title, unitForQuantity(t.Quantity, t.Unit))
		tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "date\tsite / room\tvalue ± U\tof baseline\tverdict\t")
		for _, p := range t.Points {
			cal := ""
			if !p.Calibrated {
				cal = " (not calibrated)"
			}
			if p.Simulated {
				cal += " SIMULATED, not a measurement"
			}
			fmt.Fprintf(tw, "%s\t%s / %s\t%s\t%s\t%s%s\t\n", Day(p.Date), p.Site, p.Room, ValueWithUnc(p.Value, p.ExpUnc), Percent(p.Fraction), p.Verdict, cal)
		}
		if err := tw.Flush(); err != nil {
			return err
		}
		fmt.Fprintln(w, trendSentence(t))
	}
	return nil
}

// WriteTrendCharts draws each trend to path (PNG or SVG by extension). With
// several trends (several field modes), each goes to its own file named
// path with "-<field mode>" before the extension. It returns the paths
// written.
func WriteTrendCharts(path string, trends []Trend) ([]string, error) {
	ext := strings.ToLower(filepath.Ext(path))
	if ext != ".png" && ext != ".svg" {
		return nil, fmt.Errorf("plot %s: the file name must end in .png or .svg", path)
	}
	var paths []string
	for _, t := range trends {
		p := path
		if len(trends) > 1 {
			p = strings.TrimSuffix(path, filepath.Ext(path)) + "-" + slug(t.FieldMode) + filepath.Ext(path)
		}
		spec, err := trendSpec(t, nil)
		if err != nil {
			return paths, err
		}
		c, err := spec.render(ext == ".svg", ext == ".png")
		if err != nil {
			return paths, err
		}
		data := c.PNG
		if ext == ".svg" {
			data = []byte(`<?xml version="1.0"?>` + "\n" + c.SVG)
		}
		if err := os.WriteFile(p, data, 0o644); err != nil {
			return paths, fmt.Errorf("plot: %w", err)
		}
		paths = append(paths, p)
	}
	return paths, nil
}

// FilterMode keeps the trends of one field mode ("" keeps all).
func FilterMode(trends []Trend, mode string) []Trend {
	if mode == "" {
		return trends
	}
	var out []Trend
	for _, t := range trends {
		if t.FieldMode == mode {
			out = append(out, t)
		}
	}
	return out
}
