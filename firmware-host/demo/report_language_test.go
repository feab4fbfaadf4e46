package demo

import (
	"bytes"
	"context"
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
}
