package demo

import (
	"bytes"
	"context"
	"html"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
	"time"

	"kermalux/firmware-host/journal/report"
)

// The report of a seeded session follows the language the session was
// run in, as journalled: the same session run in German renders its
// headings in German (written by hand: procedures/catalog/lang/de) and
// every result's value and expanded uncertainty as the English session's
// report prints them, with the decimal comma.
func TestSeededReportInSessionLanguage(t *testing.T) {
	if testing.Short() {
		t.Skip("two whole seeded sessions")
	}
	ctx := context.Background()
	render := func(lang string) (*report.Report, string) {
		out, err := Seeded(ctx, SeededOptions{Dir: t.TempDir(), Language: lang})
		if err != nil {
			t.Fatal(err)
		}
		envs, err := out.Journal.Envelopes(ctx, out.Summary.Session)
		if err != nil {
			t.Fatal(err)
		}
		r, err := report.Build(envs)
		if err != nil {
			t.Fatal(err)
		}
		var b bytes.Buffer
		if err := r.WriteHTML(&b, report.Options{Generated: time.Date(2026, 9, 1, 12, 0, 0, 0, time.UTC), Version: "test"}); err != nil {
			t.Fatal(err)
		}
		return r, b.String()
	}
	en, enHTML := render("")
	de, deHTML := render("de")
	if de.Session.Language != "de" || en.Session.Language != "" {
		t.Fatalf("journalled languages %q and %q", de.Session.Language, en.Session.Language)
	}
	for _, want := range []string{`<html lang="de">`, "<h2>Ergebnisse</h2>", "<h2>Messunsicherheitsbudgets</h2>", "<h2>Sicherheitshinweise</h2>", "Röntgenstrahlung ist gefährlich."} {
		if !strings.Contains(deHTML, want) {
			t.Errorf("the German session's report lacks %q", want)
		}
	}
	// What the English report says in English that once stayed English in
	// the German one: the result flags and the review list the engine's
	// texts make, the entered values' sources, the limits, the budgets'
	// components, the set-up, the events and the readings' groups.
	visible := func(page string) string {
		page = regexp.MustCompile(`(?s)<(style|script|svg)\b.*?</(style|script|svg)>`).ReplaceAllString(page, " ")
		page = regexp.MustCompile(`(?s)<[^>]*>`).ReplaceAllString(page, "")
		return strings.Join(strings.Fields(html.UnescapeString(page)), " ")
	}
	enText, deText := visible(enHTML), visible(deHTML)
	for _, english := range []string{"ositions without their own dark reading", "not read off", "at steps", "no baseline: baseline limit not checked",
		"specification at most", "action level at", "baseline rule", "repeatability", "display resolution", "with k =", "Focal spot",
		"added filter", "as set at step", "Attempt phase", "not ok", "readings in", "Simulated session:", "procedure “", ", serial "} {
		if !strings.Contains(enText, english) {
			t.Errorf("the English report lacks %q (the check below could not fail)", english)
		} else if strings.Contains(deText, english) {
			t.Errorf("the German report still says %q", english)
		}
	}
	if len(en.Results) == 0 || len(en.Results) != len(de.Results) {
		t.Fatalf("%d and %d results", len(en.Results), len(de.Results))
	}
	shown := 0
	for i, r := range en.Results {
		if r.Unmeasured() {
			continue
		}
		v := r.Shown()
		if de.Results[i].Shown() != v {
			t.Errorf("%s: %s in English, %s in German", r.Quantity, v, de.Results[i].Shown())
		}
		if !strings.Contains(enHTML, v) || !strings.Contains(deHTML, strings.ReplaceAll(v, ".", ",")) {
			t.Errorf("%s: %q not printed in English, or %q not in German", r.Quantity, v, strings.ReplaceAll(v, ".", ","))
		}
		shown++
	}
	if shown == 0 {
		t.Fatal("no measured result to compare")
	}

	// The PDF writes its tables apart from the HTML: the limits table
	// names each result with its field mode, which a whole-text lookup
	// could not translate ("Input air kerma rate (32cm)" stayed English).
	tool, err := exec.LookPath("pdftotext")
	if err != nil {
		t.Skip("pdftotext (poppler-utils) not installed: the PDF is not read back")
	}
	var pdf bytes.Buffer
	if err := de.WritePDF(&pdf, report.Options{Generated: time.Date(2026, 9, 1, 12, 0, 0, 0, time.UTC), Version: "test"}); err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "de.pdf")
	if err := os.WriteFile(p, pdf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(tool, "-layout", p, "-").Output()
	if err != nil {
		t.Fatalf("pdftotext: %v", err)
	}
	text := string(out)
	for _, want := range []string{"Eingangs-Luftkermaleistung (32cm)", "Eingriffsschwelle höchstens", "innerhalb"} {
		if !strings.Contains(text, want) {
			t.Errorf("the German PDF lacks %q", want)
		}
	}
	for _, english := range []string{"Input air kerma rate", "action level at", "inside"} {
		if strings.Contains(text, english) {
			t.Errorf("the German PDF still says %q", english)
		}
	}
}
