package main

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"kermalux/firmware-host/demo"
	"kermalux/procedures/catalog"
	"kermalux/procedures/entry"
)

// runCLI runs a command line through the binary's entry point.
func runCLI(t *testing.T, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errb bytes.Buffer
	resetFlags(root)
	code = execute(args, &out, &errb)
	return code, out.String(), errb.String()
}

// TestMissingArgumentSaysWhat: a command missing its argument names what
// is missing and exits 2, instead of cobra's bare "accepts 1 arg(s)".
func TestMissingArgumentSaysWhat(t *testing.T) {
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"trend", "--store", "x.db"}, "missing the intensifier's serial number"},
		{[]string{"import", "--store", "x.db"}, "missing argument"},
		{[]string{"certs"}, "missing"},
	} {
		code, _, stderr := runCLI(t, c.args...)
		if code != exitUsage || !strings.Contains(stderr, c.want) || strings.Contains(stderr, "received 0") {
			t.Errorf("kermalux %s: exit %d, stderr %q; want exit 2 saying %q", strings.Join(c.args, " "), code, stderr, c.want)
		}
	}
}

// TestVersionSaysBuild: --version names the build flavour and the commit
// (or says it is unknown, as in a test binary).
func TestVersionSaysBuild(t *testing.T) {
	code, stdout, _ := runCLI(t, "--version")
	if code != exitOK || !strings.Contains(stdout, buildFlavour) || !strings.Contains(stdout, "commit ") || !strings.Contains(stdout, "go1.") {
		t.Errorf("--version: exit %d, %q", code, stdout)
	}
}

// TestCompletionOffersNames: shell completion offers the built-in
// procedures and the result quantities (cobra's hidden __complete
// command is what the shell scripts call).
func TestCompletionOffersNames(t *testing.T) {
	for _, c := range []struct {
		args []string
		want []string
	}{
		{[]string{"__complete", "procedures", "--steps", ""}, []string{"acceptance", "conversion-factor"}},
		{[]string{"__complete", "run", ""}, []string{"acceptance", "meter-checks"}},
		{[]string{"__complete", "trend", "HV-1", "--quantity", "con"}, []string{"conversion_factor", "contrast_ratio"}},
	} {
		_, stdout, stderr := runCLI(t, c.args...)
		for _, w := range c.want {
			if !strings.Contains(stdout, w+"\n") {
				t.Errorf("completion of %q lacks %s:\n%s%s", strings.Join(c.args, " "), w, stdout, stderr)
			}
		}
	}
}

// TestDemoSummaryTable: a header with k; values rounded to the
// uncertainty's two significant digits (JCGM 100:2008 7.2.6), k with two
// decimals, no exponent.
func TestDemoSummaryTable(t *testing.T) {
	var b bytes.Buffer
	results := []entry.Result{
		{Quantity: "conversion_factor", FieldMode: "25cm", Value: 95.17, ExpUnc: 3.5, K: 2.002, Unit: "cd·m⁻²/(µGy·s⁻¹)", Verdict: "pass", Calibrated: true},
		{Quantity: "dark_level", Meter: "photometer", Value: 0.03004, ExpUnc: 5.4e-06, K: 2, Unit: "cd/m²", Verdict: "pass", Calibrated: true},
		{Quantity: "stability", Value: 0.00378, Unit: "1", Verdict: "info", Calibrated: true},
		{Quantity: "contrast_ratio", Value: 0, Unit: "1", Verdict: "not_measurable", DecidedBy: "the photometer is over range"},
	}
	writeSummaryTable(&b, results, nil)
	// The board's German shows the same table in German, numbers with the
	// decimal comma (the German written by hand: procedures/catalog/lang/de).
	de, err := catalog.Builtin("de")
	if err != nil {
		t.Fatal(err)
	}
	var g bytes.Buffer
	writeSummaryTable(&g, results, de)
	for _, want := range []string{"Größe", "Feld", "Wert", "Einheit", "Bewertung", "95,2", "± 3,5", "2,00", "0,0300400", "nicht ermittelt", "nicht gemessen", "Verhältnis", "bestanden", "nicht messbar"} {
		if !strings.Contains(g.String(), want) {
			t.Errorf("German summary lacks %q:\n%s", want, g.String())
		}
	}
	for _, english := range []string{"quantity", "value", "95.2", "not evaluated", "not measured", "pass", " ratio"} {
		if strings.Contains(g.String(), english) {
			t.Errorf("German summary says %q:\n%s", english, g.String())
		}
	}
	out := b.String()
	lines := strings.Split(strings.TrimSpace(out), "\n")
	// A figure that could not be measured shows no value (it printed 0).
	if len(lines) == 5 && (!strings.Contains(lines[4], "not measured") || strings.Contains(lines[4], " 0 ")) {
		t.Errorf("not-measurable row: %q", lines[4])
	}
	if len(lines) != 5 || !strings.Contains(lines[0], "quantity") || !strings.Contains(lines[0], " k ") || !strings.Contains(lines[0], "U") {
		t.Fatalf("no header with k:\n%s", out)
	}
	// The dark level has no field: its meter stands there.
	if !strings.Contains(lines[2], "dark_level") || !strings.Contains(lines[2], " photometer ") {
		t.Errorf("dark level row without its meter: %q", lines[2])
	}
	for _, want := range []string{"95.2", "± 3.5", "2.00", "0.0300400", "± 0.0000054", "not evaluated", "ratio"} {
		if !strings.Contains(out, want) {
			t.Errorf("summary lacks %q:\n%s", want, out)
		}
	}
	for _, bad := range []string{"95.17", "e-0", "2.002"} {
		if strings.Contains(out, bad) {
			t.Errorf("summary has %q:\n%s", bad, out)
		}
	}
}

// TestBusyHostLine: the demo names a busy host only when a figure came
// out not measurable and the host kept it waiting (demo.HostLag.Busy), and
// suggests a slower speed.
func TestBusyHostLine(t *testing.T) {
	missed := []entry.Result{{Quantity: "non_uniformity", Verdict: "not_measurable"}}
	fine := []entry.Result{{Quantity: "non_uniformity", Verdict: "pass"}}
	busy := demo.HostLag{Known: true, Wait: 20 * time.Second, Wall: 25 * time.Second, Speed: 20}
	idle := demo.HostLag{Known: true, Wait: time.Second, Wall: 25 * time.Second, Speed: 20}
	for _, c := range []struct {
		name    string
		l       demo.HostLag
		results []entry.Result
		want    string
	}{
		{"busy, a figure missed", busy, missed, "--speed 5"},
		{"busy, nothing missed", busy, fine, ""},
		{"idle, a figure missed", idle, missed, ""},
		{"not known", demo.HostLag{Speed: 20}, missed, ""},
	} {
		got := hostLine(c.l, c.results, nil)
		if (c.want == "") != (got == "") || !strings.Contains(got, c.want) {
			t.Errorf("%s: %q, want %q", c.name, got, c.want)
		}
	}
	// A German board warns in German (lang/de/terminal.yaml).
	de, err := catalog.Builtin("de")
	if err != nil {
		t.Fatal(err)
	}
	if got := hostLine(busy, missed, de); !strings.HasPrefix(got, "Ausgelasteter Rechner: ") || !strings.Contains(got, "--speed 5") {
		t.Errorf("German warning %q", got)
	}
}

// TestJournalCommandsAsDocumented: export needs no --json (JSON lines is
// its only format), sessions takes FILE or --journal and prints JSON with
// --json, key takes FILE as README writes it, and prints the journal's
// own key for a copy with no key beside it.
func TestJournalCommandsAsDocumented(t *testing.T) {
	dir := t.TempDir()
	p, key := boardJournal(t, dir)
	if code, out, errb := runCLI(t, "journal", "export", p); code != exitOK || !strings.Contains(out, `"kind":"session"`) {
		t.Errorf("export without --json: exit %d, %s %s", code, out, errb)
	}
	for _, args := range [][]string{{"journal", "sessions", p, "--json"}, {"journal", "sessions", "--journal", p, "--json"}} {
		code, out, errb := runCLI(t, args...)
		var list []map[string]any
		if code != exitOK || json.Unmarshal([]byte(out), &list) != nil || len(list) != 1 || list[0]["state"] != "complete" {
			t.Errorf("%v: exit %d, %s %s", args, code, out, errb)
		}
	}
	if code, _, _ := runCLI(t, "journal", "sessions", p, "--journal", p); code != exitUsage {
		t.Errorf("sessions FILE --journal FILE: exit %d, want 2", code)
	}
	if code, out, errb := runCLI(t, "journal", "key", p); code != exitOK || strings.TrimSpace(out) != key {
		t.Errorf("journal key FILE: exit %d, %q (want %s) %s", code, out, key, errb)
	}
	// A copy of the journal with no key beside it: the key it records.
	cp := filepath.Join(t.TempDir(), "copy.db")
	data, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(cp, data, 0o600); err != nil {
		t.Fatal(err)
	}
	if code, out, errb := runCLI(t, "journal", "key", cp); code != exitOK || strings.TrimSpace(out) != key {
		t.Errorf("journal key COPY: exit %d, %q (want %s) %s", code, out, key, errb)
	}
	if _, err := os.Stat(filepath.Join(filepath.Dir(cp), "board-key")); err == nil {
		t.Errorf("journal key COPY created a key beside the copy")
	}
}

// TestJSONOutputs: certs and procedures print JSON with --json.
func TestJSONOutputs(t *testing.T) {
	code, out, errb := runCLI(t, "certs", "--json", "--on", "2026-12-02", "../../testdata/certificates")
	var certs struct {
		Certificates []map[string]any `json:"certificates"`
	}
	if code != exitOK || json.Unmarshal([]byte(out), &certs) != nil || len(certs.Certificates) < 2 {
		t.Errorf("certs --json: exit %d, %s %s", code, out, errb)
	}
	code, out, errb = runCLI(t, "procedures", "--json")
	var procs []map[string]any
	if code != exitOK || json.Unmarshal([]byte(out), &procs) != nil || len(procs) < 5 {
		t.Errorf("procedures --json: exit %d, %s %s", code, out, errb)
	}
	code, out, errb = runCLI(t, "procedures", "--steps", "acceptance", "--modes", "32cm,25cm,17cm", "--json")
	var steps struct {
		Steps []map[string]any `json:"steps"`
	}
	if code != exitOK || json.Unmarshal([]byte(out), &steps) != nil || len(steps.Steps) < 20 {
		t.Errorf("procedures --steps --json: exit %d, %.300s %s", code, out, errb)
	}
}

// TestRunRefusesMissingOutBeforeTheFirstStep: a results folder that does
// not exist stops run before the journal, the panel or a meter is opened.
func TestRunRefusesMissingOutBeforeTheFirstStep(t *testing.T) {
	dir := t.TempDir()
	jp := filepath.Join(dir, "j.db")
	code, _, errb := runCLI(t, "run", "meter-checks", "--bench", "../../testdata/bench/demo-sim.yaml", "--panel", "terminal",
		"--journal", jp, "--out", filepath.Join(dir, "missing"))
	if code != exitUsage || !strings.Contains(errb, "--out") || !strings.Contains(errb, "missing") {
		t.Errorf("run --out missing: exit %d, %s", code, errb)
	}
	if _, err := os.Stat(jp); err == nil {
		t.Errorf("the journal was opened before --out was checked")
	}
}

// TestDemoJSON: demo --json prints only a JSON summary, marked simulated.
func TestDemoJSON(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a short demo (meter checks) in scaled real time")
	}
	out := t.TempDir()
	code, stdout, errb := runCLI(t, "demo", "--out", out, "--procedure", "meter-checks", "--format", "csv", "--json", "--hurried")
	var doc struct {
		Simulated bool             `json:"simulated"`
		Results   []map[string]any `json:"results"`
		Journal   string           `json:"journal"`
		Engineer  float64          `json:"engineer_s"`
		Target    float64          `json:"engineer_target_s"`
		Waited    float64          `json:"operator_wait_s"`
		Hurried   bool             `json:"hurried"`
		Session   float64          `json:"simulated_s"`
	}
	if code != exitOK || json.Unmarshal([]byte(stdout), &doc) != nil || !doc.Simulated || len(doc.Results) == 0 || doc.Journal == "" {
		t.Errorf("demo --json: exit %d\n%.500s\n%s", code, stdout, errb)
	}
	// The visit's figures: the engineer's time from the Ready prompt, so
	// more than the session's, with the operator's waits in it, against
	// the 15-minute target.
	if doc.Target != 900 || doc.Engineer < doc.Session || doc.Waited <= 0 || doc.Waited > doc.Engineer || !doc.Hurried {
		t.Errorf("demo --json visit: engineer %g s of target %g s, session %g s, operator %g s, hurried %v", doc.Engineer, doc.Target, doc.Session, doc.Waited, doc.Hurried)
	}
}

// TestCompletionOffersSerialsFromTheStore: with --store given, the trend
// argument and report --serial complete to the store's intensifiers.
func TestCompletionOffersSerialsFromTheStore(t *testing.T) {
	dir := t.TempDir()
	p, key := boardJournal(t, dir)
	sp := filepath.Join(dir, "office.db")
	bp := filepath.Join(dir, "b.bundle")
	for _, args := range [][]string{
		{"enroll", "--store", sp, "--key", key, "--name", "van-1"},
		{"bundle", "--journal", p, "--out", bp},
		{"import", "--store", sp, bp},
	} {
		if code, out, errb := runCLI(t, args...); code != exitOK {
			t.Fatalf("%v: exit %d\n%s%s", args, code, out, errb)
		}
	}
	for _, args := range [][]string{
		{"__complete", "trend", "--store", sp, "LX"},
		{"__complete", "report", "--store", sp, "--serial", "LX"},
	} {
		_, out, errb := runCLI(t, args...)
		if !strings.Contains(out, "LX23-0100\n") {
			t.Errorf("%v: no serial offered:\n%s%s", args, out, errb)
		}
	}
}

// TestVisitLine: the demo's summary gives the engineer's time against the
// 15-minute target, the operator's part of it, beam-on and exposures.
func TestVisitLine(t *testing.T) {
	for _, c := range []struct {
		engineer time.Duration
		want     string
	}{
		{14*time.Minute + 59*time.Second, "engineer time 14 min 59 s (within the 15 min 00 s target; 9 min 30 s of it the simulated operator's delays), beam-on 95 s, 19 exposures"},
		{26*time.Minute + 12400*time.Millisecond, "engineer time 26 min 12 s (over the 15 min 00 s target"},
	} {
		out := &demo.Outcome{Engineer: c.engineer, Waited: 9*time.Minute + 30*time.Second, Exposures: 19}
		out.Summary.BeamOn = 95 * time.Second
		if got := visitLine(out, nil); !strings.Contains(got, c.want) {
			t.Errorf("visit line\n%s\nlacks\n%s", got, c.want)
		}
	}
}
