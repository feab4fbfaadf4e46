package report

import (
	"bytes"
	_ "embed"
	"fmt"
	"html/template"
	"io"
	"math"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"

	"kermalux/procedures/entry"
)

//go:embed report.html.tmpl
var htmlText string

// Options are what a rendering adds to the session's own records.
type Options struct {
	// Generated is the time printed as the rendering time (zero: now).
	Generated time.Time
	// Version is the renderer's software version.
	Version string
	// Language is the language to render in (a built-in catalog's code:
	// en, de, fr); empty: the language the session journalled.
	Language string
}

func (o Options) generated() time.Time {
	if o.Generated.IsZero() {
		return time.Now()
	}
	return o.Generated
}

var htmlTemplate = newHTMLTemplate(noBreak, ":")

// newHTMLTemplate parses the report's page with nw as the function that
// keeps a cell's words with digits or hyphens on one line (a rendering in
// another language translates the cell first) and colon as the colon the
// page's own headings put after a name (words.colon).
func newHTMLTemplate(nw func(string) template.HTML, colon string) *template.Template {
	return template.Must(template.New("report").Funcs(template.FuncMap{
		"colon":         func() string { return colon },
		"day":           Day,
		"stamp":         Stamp,
		"clock":         Clock,
		"short":         abbrevHex,
		"num":           Number,
		"exact":         Exact,
		"kf":            Kf,
		"nw":            nw,
		"right":         func(t infoTable, i int) bool { return i < len(t.Right) && t.Right[i] },
		"dof":           DoF,
		"valu":          ValueWithUnc,
		"pct":           Percent,
		"pctSigned":     func(f float64) string { return fmt.Sprintf("%+.1f %%", 100*f) },
		"beam":          BeamTime,
		"factor":        Factor,
		"quantity":      quantityWords,
		"correction":    correctionWords,
		"corrections":   correctionsText,
		"verdictClass":  verdictClass,
		"verdictWords":  verdictWords,
		"certClass":     certClass,
		"neg":           func(n int) int { return -n },
		"inc":           func(n int) int { return n + 1 },
		"unit":          unitShown,
		"unitq":         unitForQuantity,
		"join":          func(s []string) string { return strings.Join(s, ", ") },
		"trendSentence": trendSentence,
		"rel":           func(u, v float64) float64 { return u / math.Abs(v) },
		// svg marks a chart rendered by this package as safe HTML: it is
		// produced by gonum/plot's SVG canvas, which escapes all text.
		"svg": func(s string) template.HTML { return template.HTML(s) },
	}).Parse(htmlText))
}

type eventRow struct {
	Event
	What string
	Beam bool
}

type htmlView struct {
	R          *Report
	Title      string   // the page's title, in the rendering's language
	Review     []string // the review list in the rendering's language
	S          entry.Session
	Verdict    string
	Pass, Fail int
	Info       int
	Charts     []Chart
	ChartNotes []string
	Safety     []Ack
	Others     []Ack
	Events     []eventRow
	Exposures  []Exposure
	Generated  time.Time
	Version    string
	Cautions   []string
	Groups     []ReadingGroup
	Signing    []infoTable
	// The same blocks where the page shows them: the test, meters, beam
	// and geometry before the results; the limits after them; the set-up
	// per step and the formulas after the corrections.
	SigningPre, SigningLimits, SigningPost []infoTable
	Budgets                                []budgetView
}

// budgetView is one result's budget with the expected components that
// are not in it.
type budgetView struct {
	Result
	Gaps []budgetGap
}

// chartUse says which chart formats a rendering needs.
type chartUse int

const (
	noCharts chartUse = iota
	chartsSVG
	chartsPNG
)

func (r *Report) view(opt Options, use chartUse) htmlView {
	v := htmlView{R: r, S: r.Session, Verdict: r.Verdict(), Pass: r.Count("pass"), Fail: r.Count("fail"), Info: r.Count("info"),
		Generated: opt.generated(), Version: opt.Version, Cautions: cautions(r.Simulated), Review: r.reviewShown(r.wordsFor(opt))}
	if v.Version == "" {
		v.Version = r.Session.SoftwareVersion
	}
	// Composed here: the site and room are names, which a translation of
	// the whole title would refuse to take as prose.
	v.Title = fmt.Sprintf(r.wordsFor(opt).text("Intensifier check %s, %s %s, %s"), r.Session.IntensifierSerial, r.Session.Site, r.Session.Room, Day(r.Session.Started))
	if use != noCharts {
		v.Charts, v.ChartNotes = r.charts(r.wordsFor(opt), use == chartsSVG, use == chartsPNG)
	}
	for _, a := range r.Acks {
		if a.Safety {
			v.Safety = append(v.Safety, a)
		} else {
			v.Others = append(v.Others, a)
		}
	}
	v.Exposures = r.Exposures()
	v.Groups = r.ReadingGroups()
	v.Signing = r.signing(r.wordsFor(opt))
	v.SigningPre, v.SigningLimits, v.SigningPost = v.Signing[:4], v.Signing[6:7], v.Signing[4:6]
	for _, res := range r.Results {
		if len(res.Budget) > 0 {
			v.Budgets = append(v.Budgets, budgetView{Result: res, Gaps: r.budgetGaps(res)})
		}
	}
	for _, e := range r.Events {
		// Beam on/off are in the exposures table; the beam-time
		// announcements and the engine's measurement bookkeeping (for
		// resuming) repeat what the readings and results already show.
		if e.Name == "beam_on" || e.Name == "beam_off" || e.Name == "beam_time" || e.Name == "beam_count" || e.Name == "measurement_done" {
			continue
		}
		v.Events = append(v.Events, eventRow{Event: e, What: capitalised(eventWords(e.Name)), Beam: true})
	}
	for _, s := range r.Steps {
		what := fmt.Sprintf("Step %s %s", s.ID, s.State)
		v.Events = append(v.Events, eventRow{Event: Event{Event: entry.Event{Step: s.Index, Name: string(s.State), Detail: s.Reason}, Seq: s.Seq, Wall: s.Wall}, What: what})
	}
	sortEvents(v.Events)
	return v
}

func sortEvents(rows []eventRow) {
	// insertion sort by journal sequence: the list is short and nearly sorted
	for i := 1; i < len(rows); i++ {
		for j := i; j > 0 && rows[j].Seq < rows[j-1].Seq; j-- {
			rows[j], rows[j-1] = rows[j-1], rows[j]
		}
	}
}

// WriteHTML writes the report as one self-contained HTML page: styles
// inline, charts as inline SVG, no external resources, laid out to print
// on A4.
func (r *Report) WriteHTML(w io.Writer, opt Options) error { return r.writeHTML(w, opt, chartsSVG) }

func (r *Report) writeHTML(w io.Writer, opt Options, use chartUse) error {
	tr := r.wordsFor(opt)
	if tr == nil {
		if err := htmlTemplate.Execute(w, r.view(opt, use)); err != nil {
			return fmt.Errorf("render HTML report of session %s: %w", r.Session.ID, err)
		}
		return nil
	}
	// A cell kept on one line word by word (nw) is translated whole
	// before it is cut into words: the page's text runs after it are
	// fragments no catalog could look up.
	t := newHTMLTemplate(func(s string) template.HTML { return noBreak(tr.text(s)) }, tr.colon())
	var b bytes.Buffer
	if err := t.Execute(&b, r.view(opt, use)); err != nil {
		return fmt.Errorf("render HTML report of session %s: %w", r.Session.ID, err)
	}
	page := bytes.Replace(b.Bytes(), []byte(`<html lang="en">`), []byte(`<html lang="`+tr.c.Code()+`">`), 1)
	if _, err := w.Write(tr.translateHTML(page)); err != nil {
		return fmt.Errorf("write HTML report of session %s: %w", r.Session.ID, err)
	}
	return nil
}

func verdictClass(v string) string {
	switch strings.ToLower(v) {
	case "pass", "fail", "info":
		return strings.ToLower(v)
	}
	return "other"
}

func verdictWords(v string) string {
	switch v {
	case "pass":
		return "Within the configured limits"
	case "fail":
		return "Outside a configured limit"
	case "review":
		return "Within the configured limits; items need review"
	case "incomplete":
		return "Incomplete"
	}
	return v
}

func certClass(status string) string {
	switch status {
	case "valid":
		return "st-valid"
	case "due soon":
		return "st-due"
	}
	return "st-bad"
}

// unitShown hides the unit "1" of dimensionless quantities.
func unitShown(u string) string { return unitWords(u) }

// noBreak escapes s for HTML and keeps each word that holds a hyphen or
// a digit (serials, certificate numbers, dates, times, step ids) on one
// line: browsers otherwise break "KR40-1187" or "2026-11-18" at the
// hyphen.
func noBreak(s string) template.HTML {
	var b strings.Builder
	for i, w := range strings.Split(s, " ") {
		if i > 0 {
			b.WriteByte(' ')
		}
		e := template.HTMLEscapeString(w)
		if strings.ContainsAny(w, "-0123456789") {
			b.WriteString(`<span class="nw">` + e + `</span>`)
		} else {
			b.WriteString(e)
		}
	}
	return template.HTML(b.String())
}

// capitalised is s with its first letter upper-case; an event with an
// empty or odd name must not break the report.
func capitalised(s string) string {
	if s == "" {
		return "An event without a name"
	}
	r, n := utf8.DecodeRuneInString(s)
	return string(unicode.ToUpper(r)) + s[n:]
}
