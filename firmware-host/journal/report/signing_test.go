package report

import (
	"encoding/json"
	"regexp"
	"strings"
	"testing"

	"codeberg.org/go-fonts/liberation/liberationsansbold"
	"codeberg.org/go-fonts/liberation/liberationsansregular"
	"codeberg.org/go-pdf/fpdf"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"kermalux/procedures/entry"
)

// signingSession is the sample session with what a bench file and the
// engine now journal for the signature: the test type, the X-ray system,
// the chamber geometry, a meter's own identification, the set-up a prompt
// asked for, a tube voltage nobody read off, and every limit of a result.
func signingSession(t *testing.T) []entry.Envelope {
	t.Helper()
	envs := sampleSession()
	var s entry.Session
	if err := json.Unmarshal(envs[0].Payload, &s); err != nil {
		t.Fatal(err)
	}
	s.TestType = "after repair"
	s.XRay = &entry.XRaySystem{Model: "Demo FL-700", Serial: "FL7-0042", Generator: "Demo HF-80", GeneratorSerial: "HF80-1311", Tube: "Demo RT-12", TubeSerial: "RT12-7730"}
	s.Geometry = &entry.Geometry{SourceToChamberMM: 950, SourceToInputMM: 1000, GridRemoved: true}
	envs[0].Payload, _ = json.Marshal(s)
	seq := envs[len(envs)-1].Seq
	add := func(kind entry.Kind, payload any) {
		seq++
		b, _ := json.Marshal(payload)
		envs = append(envs, entry.Envelope{Seq: seq, Session: s.ID, Kind: kind, Wall: envs[len(envs)-1].Wall, Payload: b})
	}
	add(entry.KindEvent, entry.Event{Name: "meter_identified", Meter: &entry.MeterIdentity{Role: "dosimeter", Maker: "VELTRANE", Model: "KR-40", Serial: "KR40-1187", Firmware: "2.3", CertificateApplies: true}})
	add(entry.KindPrompt, entry.Prompt{Step: 12, Level: "instruction", Action: "setup", Text: "Select the 25 cm field.", Asked: true,
		Setup: map[string]string{"field_mode": "25cm", "brightness_control": "off", "tube_voltage": "70 kV", "filter": "21 mm Al"}})
	add(entry.KindPrompt, entry.Prompt{Step: 3, Level: "instruction", Action: "check", Text: "Apron on.", Asked: true,
		Setup: map[string]string{"checklist": "pre-exposure", "item": "1"}})
	add(entry.KindValue, entry.Value{Step: 13, Name: "tube_voltage", Value: 70, Unit: "kV", Source: "bench default", Unconfirmed: true, FieldMode: "25cm"})
	for i, env := range envs {
		if env.Kind != entry.KindResult {
			continue
		}
		var r entry.Result
		_ = json.Unmarshal(env.Payload, &r)
		if r.Quantity == "conversion_factor" && r.FieldMode == "32cm" {
			r.Limits = []entry.LimitCheck{
				{Kind: "specification", Bound: "at_least", Value: 120, Margin: r.Value - 120, Passed: true},
				{Kind: "baseline", Bound: "at_least", Fraction: 0.8, Value: 0.8 * r.Baseline, Margin: r.Value - 0.8*r.Baseline, Passed: true},
				{Kind: "action level", Bound: "at_least", Value: 60, Margin: r.Value - 60, Passed: true},
			}
			envs[i].Payload, _ = json.Marshal(r)
		}
	}
	return envs
}

// TestReportSaysWhatAPhysicistSigns: the report names the test type, the
// X-ray system with generator and tube, the meters as they identified
// themselves, the beam quality with the half-value layer said plainly as
// not measured, the geometry, the brightness control per step, the
// non-uniformity formula, every limit as an absolute value with its
// margin, and the budget components it does not quantify.
func TestReportSaysWhatAPhysicistSigns(t *testing.T) {
	r, err := Build(signingSession(t))
	if err != nil {
		t.Fatal(err)
	}
	html := strings.NewReplacer(`<span class="nw">`, "", "</span>", "").Replace(renderHTML(t, r))
	for _, want := range []string{
		"Type of test", "after repair",
		"X-ray system", "Demo FL-700", "Generator", "Demo HF-80", "X-ray tube", "Demo RT-12",
		"As the meter identified itself", "VELTRANE KR-40, serial", "2.3",
		"Half-value layer", "NOT MEASURED",
		"70 kV (bench default, not read off) at step 13 (25cm)",
		"Focal spot to chamber", "950 mm", "Chamber against the input face",
		"Set-up per step", "off (manual kV and mA)", "filter 21 mm Al",
		"(L_max − L_min) / (L_max + L_min)",
		"Every limit, with its margin", "specification at least", "baseline rule (80.0 % of 168.0) at least", "action level at least",
		"dosimeter energy dependence", "photometer spectral match", "dark reading",
		"<td>ratio (open : disk)</td>", "<td>fraction</td>",
	} {
		if !strings.Contains(html, want) {
			t.Errorf("report lacks %q", want)
		}
	}
	if strings.Contains(html, "checklist pre-exposure") {
		t.Errorf("a checklist line is listed as a bench set-up")
	}
	// The 32 cm conversion factor (152.0 ± 5.3) lies 32.0 above the
	// specification's 120: the margin is rounded like the value.
	if row := rowOf(html, "specification at least"); !strings.Contains(row, ">120 ") || !strings.Contains(row, ">32.0<") {
		t.Errorf("specification row lacks the limit 120 and the margin 32.0: %s", row)
	}
}

// TestHeadlineLeavesAcceptanceToThePhysicist: the summary says "within the
// configured limits", never a bare PASS, and points to the signature box.
func TestHeadlineLeavesAcceptanceToThePhysicist(t *testing.T) {
	for _, v := range []string{"pass", "review"} {
		w := verdictWords(v)
		if !strings.Contains(w, "within the configured limits") && !strings.Contains(w, "Within the configured limits") {
			t.Errorf("verdict %s reads %q", v, w)
		}
	}
	html := renderHTML(t, sampleReport(t))
	if strings.Contains(html, `<div class="verdict pass">Pass`) || !strings.Contains(html, "Acceptance is the medical physicist’s decision") {
		t.Errorf("headline claims a pass or does not leave acceptance to the signature")
	}
}

// TestReviewListOnlyWhatNeedsAPerson: a flag several results share is one
// item naming them; "no baseline" and "no type A uncertainty" are
// information, not review; a skip by design is not review.
func TestReviewListOnlyWhatNeedsAPerson(t *testing.T) {
	envs := sampleSession()
	n := 0
	for i, env := range envs {
		if env.Kind != entry.KindResult {
			continue
		}
		var r entry.Result
		_ = json.Unmarshal(env.Payload, &r)
		r.Flags = append(r.Flags, "no baseline: baseline limit not checked", "no type A uncertainty: too few readings, or a mean of zero (a meter below its range)")
		if r.Quantity == "input_kerma_rate" {
			r.Flags = append(r.Flags, "tube voltage not read off: 70 kV bench default")
			n++
		}
		envs[i].Payload, _ = json.Marshal(r)
	}
	seq := envs[len(envs)-1].Seq + 1
	b, _ := json.Marshal(entry.Step{Index: 20, Of: 31, ID: "input/scaling@32cm", Kind: "compute", State: entry.StepSkipped, Reason: "the reference field mode itself: no scaling"})
	envs = append(envs, entry.Envelope{Seq: seq, Session: envs[0].Session, Kind: entry.KindStep, Payload: b})
	r, err := Build(envs)
	if err != nil {
		t.Fatal(err)
	}
	all := strings.Join(r.Review, "\n")
	for _, bad := range []string{"no baseline", "no type A", "input/scaling", "reference field mode"} {
		if strings.Contains(all, bad) {
			t.Errorf("review list has %q:\n%s", bad, all)
		}
	}
	if c := strings.Count(strings.ToLower(all), "tube voltage not read off"); c != 1 || n < 2 {
		t.Errorf("shared flag listed %d times for %d results:\n%s", c, n, all)
	}
	if !strings.Contains(all, "Input air kerma rate (32cm), Input air kerma rate (25cm)") {
		t.Errorf("shared flag does not name its results:\n%s", all)
	}
}

// TestNoBreakKeepsSerialsWhole: serials, certificate numbers and dates sit
// in no-wrap spans in the HTML, so browsers never break them at a hyphen.
func TestNoBreakKeepsSerialsWhole(t *testing.T) {
	html := renderHTML(t, sampleReport(t))
	for _, want := range []string{`<span class="nw">HV-2291</span>`, `<span class="nw">NCL-D-24117</span>`, `<span class="nw">KR40-1187</span>`, `<span class="nw">2027-03-10</span>`, `.nw { white-space: nowrap; }`} {
		if !strings.Contains(html, want) {
			t.Errorf("HTML lacks %s", want)
		}
	}
	if got := string(noBreak("due <soon> 2026-12-01")); got != `due &lt;soon&gt; <span class="nw">2026-12-01</span>` {
		t.Errorf("noBreak = %q", got)
	}
}

// TestPDFColumnsHoldTheirLongestWord: a column narrower than its longest
// word (a certificate number, a hash, a header such as "Verdict") is
// widened so the word stays on one line; the others give up the room.
func TestPDFColumnsHoldTheirLongestWord(t *testing.T) {
	f := fpdf.New("P", "mm", "A4", "")
	f.AddUTF8FontFromBytes("sans", "", liberationsansregular.TTF)
	f.AddUTF8FontFromBytes("sans", "B", liberationsansbold.TTF)
	f.AddPage()
	d := &pdfDoc{f: f, w: 182, left: 14, bottom: 280}
	cols := []pdfCol{{"Certificate", .05, false}, {"Verdict", .04, false}, {"Notes", .91, false}}
	rows := [][]string{{"NRML-26-0318", "PASS", "a long note that may wrap between its words as much as it likes"},
		{"0123456789abcdef0123", "FAIL", "U = 0.009027"}}
	got, size := d.fitColumns(cols, rows, 7.5, 1.1, true)
	sum := 0.0
	for i, c := range got {
		sum += c.width
		for _, row := range append(rows, []string{cols[0].head, cols[1].head, "Notes"}) {
			style := ""
			if row[0] == cols[0].head {
				style = "B"
			}
			d.font(style, size)
			for _, word := range strings.Split(row[i], " ") {
				if n := len(f.SplitText(word, c.width*d.w-2*1.1)); n > 1 {
					t.Errorf("column %q (%.1f mm) breaks %q into %d lines", c.head, c.width*d.w, word, n)
				}
			}
		}
	}
	if sum > 1.0001 {
		t.Errorf("columns take %.3f of the width", sum)
	}
	if size != 7.5 {
		t.Errorf("font shrunk to %.2f though the columns could fit", size)
	}
}

// TestNoExponentsAnywhere: small uncertainties and offsets are written in
// fixed notation in the CSV files and the HTML (the demo once printed
// "0.03 ± 5.4e-06").
func TestNoExponentsAnywhere(t *testing.T) {
	envs := sampleSession()
	for i, env := range envs {
		switch env.Kind {
		case entry.KindResult:
			var r entry.Result
			_ = json.Unmarshal(env.Payload, &r)
			r.StdUnc, r.ExpUnc = 2.7e-06, 5.4e-06
			envs[i].Payload, _ = json.Marshal(r)
		case entry.KindReading:
			var rd entry.Reading
			_ = json.Unmarshal(env.Payload, &rd)
			rd.Corrections = append(rd.Corrections, entry.Correction{Name: "dark", Factor: 1, Offset: -1.2e-05})
			envs[i].Payload, _ = json.Marshal(rd)
		}
	}
	r, err := Build(envs)
	if err != nil {
		t.Fatal(err)
	}
	var b strings.Builder
	if err := r.WriteResultsCSV(&b); err != nil {
		t.Fatal(err)
	}
	if err := r.WriteReadingsCSV(&b); err != nil {
		t.Fatal(err)
	}
	exp := regexp.MustCompile(`\d[eE][-+]\d\d`) // Go writes exponents as e-06, e+07
	if m := exp.FindString(b.String()); m != "" {
		t.Errorf("CSV has an exponent: %q", m)
	}
	if !strings.Contains(b.String(), "0.0000054") || !strings.Contains(b.String(), "dark*1-0.000012") {
		t.Errorf("CSV lacks the small values in fixed notation")
	}
	html := renderHTML(t, r)
	body := html[strings.Index(html, "<body>"):]
	body = regexp.MustCompile(`(?s)<svg.*?</svg>`).ReplaceAllString(body, "")
	if m := exp.FindString(body); m != "" {
		t.Errorf("HTML has an exponent: %q", m)
	}
}

// TestConversionChartShowsLimitsAndBaseline: the chart draws each field
// mode's limits and its baseline, names them in the legend, and labels
// at least five values on its axis.
func TestConversionChartShowsLimitsAndBaseline(t *testing.T) {
	r, err := Build(signingSession(t))
	if err != nil {
		t.Fatal(err)
	}
	spec, err := conversionSpec(r.Results, (*words)(nil).text)
	if err != nil {
		t.Fatal(err)
	}
	c, err := spec.render(true, false)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"specification limit", "baseline rule (80.0 % of baseline)", "action level limit", "baseline (the earlier session)"} {
		if !strings.Contains(c.SVG, want) {
			t.Errorf("conversion factor chart lacks %q", want)
		}
	}
	labelled := 0
	for _, tk := range spec.p.Y.Tick.Marker.Ticks(spec.p.Y.Min, spec.p.Y.Max) {
		if tk.Label != "" {
			labelled++
		}
	}
	if labelled < 5 {
		t.Errorf("%d labelled ticks on the value axis, want at least 5", labelled)
	}
}

// TestNiceTicks: round steps of 1, 2, 2.5 or 5 times a power of ten, in
// fixed notation with the decimals the step needs.
func TestNiceTicks(t *testing.T) {
	for _, c := range []struct {
		min, max float64
		want     string
	}{
		// 186/5 = 37.2: the step is 50 (the first of 10, 20, 25, 50 at least 37.2).
		{0, 186, "0 50 100 150"},
		// 1.2/5 = 0.24: the step is 0.25, written with two decimals.
		{0, 1.2, "0.00 0.25 0.50 0.75 1.00"},
		// 0.0093/5 = 0.00186: the step is 0.002.
		{0, 0.0093, "0.000 0.002 0.004 0.006 0.008"},
	} {
		var labels []string
		for _, tk := range (niceTicks{n: 5}).Ticks(c.min, c.max) {
			if tk.Label != "" {
				labels = append(labels, tk.Label)
			}
		}
		if got := strings.Join(labels, " "); got != c.want {
			t.Errorf("ticks %g..%g: %q, want %q", c.min, c.max, got, c.want)
		}
		for _, l := range labels {
			if strings.ContainsAny(l, "eE") {
				t.Errorf("tick label %q has an exponent", l)
			}
		}
	}
}

// TestMapLabelsInsideTheirDiscs: each percentage is drawn at its disc's
// centre, narrower than the disc, so it touches neither its disc's edge
// nor a neighbour.
func TestMapLabelsInsideTheirDiscs(t *testing.T) {
	r := sampleReport(t)
	if len(r.Maps) == 0 {
		t.Fatal("no map")
	}
	if _, err := mapSpec(r.Maps[0], (*words)(nil).text); err != nil {
		t.Fatal(err)
	}
	pts := plotter.XYs{{X: 0, Y: 0}, {X: 0.9, Y: 0}}
	labels, err := mapLabels(pts, []string{"100 %", "78 %"})
	if err != nil {
		t.Fatal(err)
	}
	disc := vg.Length(mapDiscRadius)
	for i := range pts {
		if labels.XYs[i] != pts[i] {
			t.Errorf("label %d at %v, its disc at %v", i, labels.XYs[i], pts[i])
		}
	}
	for i, l := range labels.Labels {
		w := labels.TextStyle[i].Width(l)
		if w >= 2*disc-vg.Points(2) {
			t.Errorf("label %q is %.1f pt wide, the disc %.1f pt", l, w.Points(), (2 * disc).Points())
		}
		if labels.TextStyle[i].XAlign != draw.XCenter || labels.TextStyle[i].YAlign != draw.YCenter {
			t.Errorf("label %q is not centred on its disc", l)
		}
	}
}
