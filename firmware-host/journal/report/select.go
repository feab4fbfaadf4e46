package report

import (
	"context"
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
}

// FromStore builds the reports of the selected sessions, each with its
// intensifier's conversion factor history up to and including that
// session (actionLevel as in Fit).
func FromStore(ctx context.Context, st *store.Store, sel Selection, actionLevel float64) ([]*Report, error) {
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
	var out []*Report
	for _, id := range ids {
		envs, err := st.Envelopes(ctx, id)
		if err != nil {
			return nil, err
		}
		r, err := Build(envs)
		if err != nil {
			return nil, fmt.Errorf("store %s: %w", st.Path(), err)
		}
		serial := r.Session.IntensifierSerial
		hs, ok := histories[serial]
		if !ok {
			if hs, err = (StoreHistory{st}).History(ctx, serial); err != nil {
				return nil, err
			}
			histories[serial] = hs
		}
		r.AttachHistory(Until(hs, r.Session.Started), actionLevel)
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
// (or its JSON-lines export); session "" means the last one.
func FromJournal(ctx context.Context, path, session string) (*Report, error) {
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
	return r, nil
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
		fmt.Fprintf(w, "%s (%s)\n", title, t.Unit)
		tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
		fmt.Fprintln(tw, "date\tsite / room\tvalue ± U\tof baseline\tverdict\t")
		for _, p := range t.Points {
			cal := ""
			if !p.Calibrated {
				cal = " (not calibrated)"
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
		spec, err := trendSpec(t)
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
