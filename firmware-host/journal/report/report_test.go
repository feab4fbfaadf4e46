package report

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"flag"
	"io"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"
	"time"

	"kermalux/procedures/entry"
)

var update = flag.Bool("update", false, "rewrite the golden files under testdata/report")

var fixedOpts = Options{Generated: time.Date(2026, 11, 20, 8, 0, 0, 0, time.UTC), Version: "test"}

func goldenPath(name string) string {
	return filepath.Join("..", "..", "..", "testdata", "report", name)
}

var svgElement = regexp.MustCompile(`(?s)<svg class="chart".*?</svg>`)

// normaliseHTML strips what is not the report's content: the charts'
// drawing instructions (checked separately as SVG documents).
func normaliseHTML(s string) string {
	return svgElement.ReplaceAllString(s, `<svg class="chart"><!-- chart drawn by gonum/plot --></svg>`)
}

func checkGolden(t *testing.T, name string, got []byte) {
	t.Helper()
	path := goldenPath(name)
	if *update {
		if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("golden file: %v (run go test -run %s -update)", err, t.Name())
	}
	if !bytes.Equal(got, want) {
		gl, wl := strings.Split(string(got), "\n"), strings.Split(string(want), "\n")
		for i := 0; i < len(gl) || i < len(wl); i++ {
			var g, w string
			if i < len(gl) {
				g = gl[i]
			}
			if i < len(wl) {
				w = wl[i]
			}
			if g != w {
				t.Fatalf("%s differs from the golden file at line %d:\n got: %s\nwant: %s\n(run with -update if the change is intended)", name, i+1, g, w)
			}
		}
	}
}

func sampleReport(t testing.TB) *Report {
	t.Helper()
	r, err := Build(sampleSession())
	if err != nil {
		t.Fatal(err)
	}
	return r
}

func renderHTML(t testing.TB, r *Report) string {
	t.Helper()
	var b bytes.Buffer
	if err := r.WriteHTML(&b, fixedOpts); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

func TestGoldenHTML(t *testing.T) {
	r := sampleReport(t)
	r.AttachHistory(sampleHistory(7, 180, -4.5), 0)
	checkGolden(t, "session.html.golden", []byte(normaliseHTML(renderHTML(t, r))))
}

func TestGoldenCSV(t *testing.T) {
	r := sampleReport(t)
	var res, rd bytes.Buffer
	if err := r.WriteResultsCSV(&res); err != nil {
		t.Fatal(err)
	}
	if err := r.WriteReadingsCSV(&rd); err != nil {
		t.Fatal(err)
	}
	checkGolden(t, "results.csv.golden", res.Bytes())
	checkGolden(t, "readings.csv.golden", rd.Bytes())
}

// rowOf returns the table row of html that contains marker.
func rowOf(html, marker string) string {
	i := strings.Index(html, marker)
	if i < 0 {
		return ""
	}
	start := strings.LastIndex(html[:i], "<tr")
	end := strings.Index(html[i:], "</tr>")
	if start < 0 || end < 0 {
		return ""
	}
	return html[start : i+end]
}

// hasRow reports whether a table row of html contains every part.
func hasRow(html string, parts ...string) bool {
	for _, row := range strings.Split(html, "<tr") {
		if i := strings.Index(row, "</tr>"); i >= 0 {
			row = row[:i]
		}
		all := true
		for _, p := range parts {
			if !strings.Contains(row, p) {
				all = false
				break
			}
		}
		if all {
			return true
		}
	}
	return false
}

// TestReportShowsTheRecord checks that what the journal recorded reaches
// the page: each correction, each certificate with its due date, each
// acknowledgement with its time, the beam-on time and the limit that
// decided each verdict.
func TestReportShowsTheRecord(t *testing.T) {
	envs := sampleSession()
	r := sampleReport(t)
	html := renderHTML(t, r)

	// The air-density correction of the sample, from the IAEA TRS-398
	// formula k_TP = ((273.15 + T)/(273.15 + T0))·(P0/P) with T = 23.5 °C,
	// P = 100.4 kPa, T0 = 20 °C, P0 = 101.325 kPa (arithmetic on the
	// formula): 1.02126.
	ktp := (273.15 + 23.5) / (273.15 + 20) * (101.325 / 100.4)
	if got := Factor(ktp); got != "1.02126" {
		t.Fatalf("k_TP arithmetic: %s", got)
	}
	var names []string
	for _, env := range envs {
		if env.Kind != entry.KindReading {
			continue
		}
		var rd entry.Reading
		if err := json.Unmarshal(env.Payload, &rd); err != nil {
			t.Fatal(err)
		}
		for _, c := range rd.Corrections {
			if !contains(names, c.Name) {
				names = append(names, c.Name)
			}
		}
	}
	if len(names) != 4 {
		t.Fatalf("sample has corrections %v, want 4 kinds", names)
	}
	for _, n := range names {
		row := rowOf(html, `<span class="small mono">`+n+`</span>`)
		if row == "" {
			t.Errorf("correction %s is not in the corrections table", n)
		}
	}
	if row := rowOf(html, `<span class="small mono">k_tp</span>`); !strings.Contains(row, "1.02126") {
		t.Errorf("k_TP row does not show the factor 1.02126: %s", row)
	}
	if row := rowOf(html, `<span class="small mono">dark</span>`); !strings.Contains(row, "-0.012") {
		t.Errorf("dark row does not show the offset: %s", row)
	}

	for _, c := range sampleCerts() {
		row := rowOf(html, `<td><span class="nw">`+c.ID+`</span></td><td>`+c.Meter+`</td>`)
		if row == "" || !strings.Contains(row, Day(c.Due)) || !strings.Contains(row, Day(c.Calibrated)) || !strings.Contains(row, `<span class="nw">`+Day(c.Due)+`</span>`) {
			t.Errorf("certificate %s with due date %s not shown: %q", c.ID, Day(c.Due), row)
		}
	}
	// The photometer certificate is due 13 days after the session day
	// (2026-11-18 to 2026-12-01): within the month's warning.
	if row := rowOf(html, `<td><span class="nw">NCL-P-24190</span></td><td>photometer</td>`); !strings.Contains(row, "due soon (12 days left)") && !strings.Contains(row, "due soon (13 days left)") {
		t.Errorf("photometer certificate not marked due soon: %s", row)
	}

	nAck := 0
	for _, env := range envs {
		if env.Kind != entry.KindAck {
			continue
		}
		var a entry.Ack
		if err := json.Unmarshal(env.Payload, &a); err != nil {
			t.Fatal(err)
		}
		nAck++
		stamp := Clock(a.At)
		if !hasRow(html, a.Text, stamp) {
			t.Errorf("acknowledgement %q at %s not shown with its time", a.Text, stamp)
		}
	}
	if nAck == 0 || len(r.SafetyAcks()) != 4 {
		t.Errorf("acks %d, safety acks %d, want 4 safety acks", nAck, len(r.SafetyAcks()))
	}

	// Beam-on: 7.4 + 3.1 + 8.4 + 9.4 + 9 × 4.2 + 5.0 + 5.6 = 76.7 s
	// (the sample's exposures, added by hand).
	if math.Abs(r.BeamOn-76.7) > 1e-9 {
		t.Errorf("beam-on %.3f s, want 76.7 s", r.BeamOn)
	}
	if !strings.Contains(html, "Cumulative beam-on time: <b>1 min 16.7 s</b>") {
		t.Errorf("beam-on time not shown as 1 min 16.7 s")
	}

	for _, res := range r.Results {
		row := rowOf(html, "<td>"+quantityWords(res.Quantity)+"</td><td>"+res.FieldMode+"</td>")
		if !strings.Contains(row, res.DecidedBy) || !strings.Contains(row, ">"+res.Verdict+"<") {
			t.Errorf("%s %s: verdict %s decided by %q not shown: %s", res.Quantity, res.FieldMode, res.Verdict, res.DecidedBy, row)
		}
	}
	if r.Verdict() != "fail" || !strings.Contains(html, "Contrast ratio (32cm): outside the specification: at least 15") {
		t.Errorf("summary does not say the contrast ratio fails: verdict %s", r.Verdict())
	}
	for _, want := range []string{"qualified medical physicist", "radiation safety officer", "X-rays are dangerous", "Signature", "A meter was lost: 1 time", "Step conversion-25cm retake"} {
		if !strings.Contains(html, want) {
			t.Errorf("report lacks %q", want)
		}
	}
	if strings.Contains(html, "SIMULATED") {
		t.Errorf("a session with no simulator marks says SIMULATED")
	}
	for _, ext := range []string{`src="http`, `href="http`, `<link `, `<script`} {
		if strings.Contains(html, ext) {
			t.Errorf("HTML is not self-contained: has %s", ext)
		}
	}
}

func TestSimulatedSessionSaysSo(t *testing.T) {
	envs := sampleSession()
	for i, env := range envs {
		if env.Kind == entry.KindReading {
			var rd entry.Reading
			json.Unmarshal(env.Payload, &rd)
			rd.Flags = append(rd.Flags, "simulated")
			envs[i].Payload, _ = json.Marshal(rd)
			break
		}
	}
	r, err := Build(envs)
	if err != nil {
		t.Fatal(err)
	}
	html := renderHTML(t, r)
	if !r.Simulated || !strings.Contains(html, "SIMULATED SESSION") || !strings.Contains(html, "its results are not measurements") {
		t.Errorf("simulated session not marked (Simulated=%v)", r.Simulated)
	}
	if r.Verdict() == "pass" {
		t.Errorf("simulated session passes without review")
	}
}

func TestBuildErrors(t *testing.T) {
	envs := sampleSession()
	bad := append([]entry.Envelope(nil), envs...)
	bad[5].Payload = json.RawMessage(`{"step": "seven"}`)
	_, err := Build(bad)
	if err == nil || !strings.Contains(err.Error(), "seq 6") || !strings.Contains(err.Error(), string(bad[5].Kind)) {
		t.Errorf("bad payload: error %v does not name the record", err)
	}
	if _, err := Build(envs[1:]); err == nil || !strings.Contains(err.Error(), "no opening session record") {
		t.Errorf("missing session record: %v", err)
	}
	if _, err := Build(nil); err == nil {
		t.Errorf("no records: no error")
	}
	// An interrupted session (no end record) renders and says so.
	r, err := Build(envs[:len(envs)-1])
	if err != nil {
		t.Fatal(err)
	}
	if r.Verdict() != "fail" || !strings.Contains(strings.Join(r.Review, "\n"), "interrupted") {
		t.Errorf("unfinished session: verdict %s review %v", r.Verdict(), r.Review)
	}
}

func TestExpiredCertificateNeedsReview(t *testing.T) {
	day := time.Date(2026, 11, 18, 9, 0, 0, 0, time.UTC)
	c := certificate(entry.CertRef{ID: "X-1", Due: day.Add(-48 * time.Hour), Valid: false}, day)
	if c.Status != "expired" || c.DaysToDue != -2 {
		t.Errorf("expired certificate: %+v", c)
	}
	c = certificate(entry.CertRef{ID: "X-2", Due: day.Add(40 * 24 * time.Hour), Valid: true}, day)
	if c.Status != "valid" || c.DaysToDue != 40 {
		t.Errorf("valid certificate: %+v", c)
	}
}

func TestLuminanceMap(t *testing.T) {
	r := sampleReport(t)
	if len(r.Maps) != 1 {
		t.Fatalf("maps: %d, want 1 (the contrast and dark readings are not a map)", len(r.Maps))
	}
	m := r.Maps[0]
	if m.FieldMode != "32cm" || len(m.Points) != 9 {
		t.Fatalf("map %s with %d points", m.FieldMode, len(m.Points))
	}
	// The sample was generated with left 0.9 r at 0.781 of the centre and
	// both positions read with the same two relative deviations.
	for _, p := range m.Points {
		if p.Label == "left 0.9r" && math.Abs(p.Fraction-0.781) > 1e-9 {
			t.Errorf("left 0.9r: fraction %.6f, want 0.781", p.Fraction)
		}
	}
	if len(m.Profile) != 3 || m.Profile[0].R != 0 || m.Profile[2].R != 0.9 {
		t.Fatalf("profile %+v", m.Profile)
	}
	// Mean of 0.842, 0.806, 0.829, 0.781 = 0.8145 (by hand).
	if math.Abs(m.Profile[2].Fraction-0.8145) > 1e-9 || m.Profile[2].Min != 0.781 && math.Abs(m.Profile[2].Min-0.781) > 1e-9 {
		t.Errorf("profile at 0.9 r: %+v", m.Profile[2])
	}
}

func TestParsePosition(t *testing.T) {
	tests := []struct {
		label string
		r, a  float64
		ok    bool
	}{
		{"centre", 0, 0, true},
		{"Center", 0, 0, true},
		{"up 0.9r", 0.9, 90, true},
		{"down 0.5 r", 0.5, 270, true},
		{"left 0.9r", 0.9, 180, true},
		{"right 0.5r", 0.5, 0, true},
		{"up-left 0.9r", 0.9, 135, true},
		{"0.9r 45deg", 0.9, 45, true},
		{"r=0.5 a=315", 0.5, 315, true},
		{"0.7r 30°", 0.7, 30, true},
		{"0.7 r -90 deg", 0.7, 270, true},
		{"0.9r", 0, 0, false}, // no direction
		{"somewhere", 0, 0, false},
		{"", 0, 0, false},
		{"up 3r", 0, 0, false},
	}
	for _, tt := range tests {
		r, a, ok := ParsePosition(tt.label)
		if ok != tt.ok || ok && (math.Abs(r-tt.r) > 1e-12 || math.Abs(a-tt.a) > 1e-12) {
			t.Errorf("ParsePosition(%q) = %g, %g, %v; want %g, %g, %v", tt.label, r, a, ok, tt.r, tt.a, tt.ok)
		}
	}
}

func TestValueWithUnc(t *testing.T) {
	tests := []struct {
		v, u float64
		want string
	}{
		// JCGM 100:2008 7.2.2 example: m_S = 100.021 47 g with
		// u_c = 0.35 mg is written (100.021 47 ± 0.000 35) g.
		{100.02147, 0.00035, "100.02147 ± 0.00035"},
		// Two significant digits in U, the value to the same place (7.2.6).
		{152.04, 5.276, "152.0 ± 5.3"},
		{13.6, 0.3327, "13.60 ± 0.33"},
		{1234.5, 56, "1234 ± 56"},
		{0.4521, 0, "0.4521"},
	}
	for _, tt := range tests {
		if got := ValueWithUnc(tt.v, tt.u); got != tt.want {
			t.Errorf("ValueWithUnc(%g, %g) = %q, want %q", tt.v, tt.u, got, tt.want)
		}
	}
}

func TestCharts(t *testing.T) {
	r := sampleReport(t)
	r.AttachHistory(sampleHistory(7, 180, -4.5), 0)
	charts, notes := r.Charts()
	if len(notes) > 0 {
		t.Fatalf("charts not drawn: %v", notes)
	}
	var names []string
	for _, c := range charts {
		names = append(names, c.Name)
		if !strings.HasPrefix(c.SVG, `<svg class="chart"`) || !strings.HasSuffix(strings.TrimSpace(c.SVG), "</svg>") {
			t.Errorf("%s: not an SVG element", c.Name)
		}
		if !bytes.HasPrefix(c.PNG, []byte("\x89PNG\r\n\x1a\n")) {
			t.Errorf("%s: not a PNG", c.Name)
		}
	}
	if got := strings.Join(names, ","); got != "conversion-factor,map-32cm,profile-32cm,trend-32cm" {
		t.Errorf("charts %s", got)
	}
}

// TestRejudgedResultSupersedes: the engine journals a result when it is
// computed and again when a judge step judges it; the report and the trend
// count the later record once.
func TestRejudgedResultSupersedes(t *testing.T) {
	envs := sampleSession()
	last := envs[len(envs)-1]
	var cr entry.Result
	for _, env := range envs {
		if env.Kind == entry.KindResult {
			var res entry.Result
			json.Unmarshal(env.Payload, &res)
			if res.Quantity == "contrast_ratio" {
				cr = res
			}
		}
	}
	cr.Verdict, cr.DecidedBy = "pass", "specification: at least 12"
	b, _ := json.Marshal(cr)
	rejudged := entry.Envelope{Seq: last.Seq, Session: last.Session, Kind: entry.KindResult, Wall: last.Wall, Payload: b}
	last.Seq++
	envs = append(envs[:len(envs)-1], rejudged, last)
	r, err := Build(envs)
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for _, res := range r.Results {
		if res.Quantity == "contrast_ratio" {
			n++
			if res.Verdict != "pass" || res.DecidedBy != "specification: at least 12" {
				t.Errorf("contrast ratio keeps the first judgement: %s, %s", res.Verdict, res.DecidedBy)
			}
		}
	}
	if n != 1 || len(r.Results) != 8 {
		t.Errorf("contrast ratio results %d, all results %d; want 1 and 8", n, len(r.Results))
	}
	hs := sampleHistory(3, 180, -4.5)
	dup := hs[1]
	dup.Result.Verdict = "fail"
	hs = append(hs[:2], append([]HistoryPoint{dup}, hs[2:]...)...)
	ts := Fit("HV-2291", "conversion_factor", hs, 0.5)
	if len(ts[0].Points) != 3 || ts[0].Points[1].Verdict != "fail" {
		t.Errorf("history with a re-judged result: %d points, verdict %s", len(ts[0].Points), ts[0].Points[1].Verdict)
	}
}

// TestSimulatedSessionRecordMarksEveryOutput: a session record that says
// simulated marks the report and both CSV files, row by row.
func TestSimulatedSessionRecordMarksEveryOutput(t *testing.T) {
	envs := sampleSession()
	var s entry.Session
	if err := json.Unmarshal(envs[0].Payload, &s); err != nil {
		t.Fatal(err)
	}
	s.Simulated = true
	envs[0].Payload, _ = json.Marshal(s)
	r, err := Build(envs)
	if err != nil {
		t.Fatal(err)
	}
	if !r.Simulated || !strings.Contains(renderHTML(t, r), "SIMULATED SESSION") {
		t.Fatalf("report not marked simulated")
	}
	for name, write := range map[string]func(io.Writer) error{"results": r.WriteResultsCSV, "readings": r.WriteReadingsCSV} {
		var b bytes.Buffer
		if err := write(&b); err != nil {
			t.Fatal(err)
		}
		rows, err := csv.NewReader(&b).ReadAll()
		if err != nil {
			t.Fatal(err)
		}
		col := slices.Index(rows[0], "simulated")
		if col < 0 {
			t.Fatalf("%s CSV has no simulated column: %v", name, rows[0])
		}
		for i, row := range rows[1:] {
			if row[col] != "true" {
				t.Errorf("%s CSV row %d: simulated %q", name, i+2, row[col])
			}
		}
	}
}

// A figure that could not be measured prints "not measurable" in the HTML
// results table and leaves the value, U and k empty in the results CSV;
// the conversion-factor chart leaves it out. Before, it printed as "0".
func TestNotMeasurableShownAsSuch(t *testing.T) {
	r, err := Build(sampleSession())
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for i := range r.Results {
		if r.Results[i].Quantity == "conversion_factor" && n == 0 {
			r.Results[i].Value, r.Results[i].StdUnc, r.Results[i].ExpUnc, r.Results[i].K = 0, 0, 0, 0
			r.Results[i].Verdict, r.Results[i].DecidedBy = "not_measurable", "the photometer is over range, three times"
			n++
		}
	}
	if n == 0 {
		t.Fatal("no conversion factor in the sample")
	}
	var html, csv bytes.Buffer
	if err := r.WriteHTML(&html, Options{}); err != nil {
		t.Fatal(err)
	}
	if err := r.WriteResultsCSV(&csv); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(html.String(), "not measurable") {
		t.Error("HTML does not say not measurable")
	}
	for _, line := range strings.Split(csv.String(), "\n") {
		if strings.Contains(line, "not_measurable") && strings.Contains(line, ",conversion_factor,0,") {
			t.Errorf("CSV prints a value for it: %s", line)
		}
	}
}

// A session's two dark levels (and two stabilities) are told apart by
// their meter in the results table and the budgets, as the board says
// them ("Photometer dark level"), in English and in the session's other
// languages (the catalogs' own words for them); a result of an earlier
// release, with no meter, keeps its plain name.
func TestOneMeterResultsNamed(t *testing.T) {
	envs := sampleSession()
	end := envs[len(envs)-1]
	envs = envs[:len(envs)-1]
	for i, m := range []string{"dosimeter", "photometer", ""} {
		unit := "µGy/s"
		if m != "dosimeter" {
			unit = "cd/m²"
		}
		b, err := json.Marshal(entry.Result{Step: 1 + i, Procedure: "acceptance", Quantity: "dark_level", Meter: m, Value: 0.002, Unit: unit, StdUnc: 0.0005, ExpUnc: 0.001, K: 2, Verdict: "info", Calibrated: true})
		if err != nil {
			t.Fatal(err)
		}
		envs = append(envs, entry.Envelope{Seq: int64(len(envs) + 1), Session: end.Session, Kind: entry.KindResult, Wall: end.Wall, Mono: end.Mono, BootID: end.BootID, Payload: b})
	}
	end.Seq = int64(len(envs) + 1)
	envs = append(envs, end)
	r, err := Build(envs)
	if err != nil {
		t.Fatal(err)
	}
	for _, tt := range []struct {
		lang string
		want []string
	}{
		{"en", []string{"<td>Dosimeter dark level</td>", "<td>Photometer dark level</td>", "<td>Dark level</td>"}},
		// procedures/catalog/lang/de/engine.yaml
		{"de", []string{"Dunkelwert des Dosimeters", "Dunkelwert des Photometers"}},
	} {
		var b bytes.Buffer
		opts := fixedOpts
		opts.Language = tt.lang
		if err := r.writeHTML(&b, opts, noCharts); err != nil {
			t.Fatal(err)
		}
		for _, w := range tt.want {
			if !strings.Contains(b.String(), w) {
				t.Errorf("%s: the page has no %q", tt.lang, w)
			}
		}
	}
}
