package report

import (
	"bytes"
	"html"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"
)

// visibleText is a rendered HTML page's text, without its style, script
// and the charts' svg, entities decoded.
func visibleText(page string) string {
	page = regexp.MustCompile(`(?s)<(style|script|svg)\b.*?</(style|script|svg)>`).ReplaceAllString(page, " ")
	page = regexp.MustCompile(`(?s)<[^>]*>`).ReplaceAllString(page, " ")
	return html.UnescapeString(page)
}

// numbers are the numbers a text holds, sorted, each with a decimal
// point whichever separator it was written with (the board writes no
// thousands separators).
func numbers(text string) []string {
	n := regexp.MustCompile(`\d+(?:[.,:]\d+)*`).FindAllString(text, -1)
	for i := range n {
		n[i] = strings.ReplaceAll(n[i], ",", ".")
	}
	slices.Sort(n)
	return n
}

// A session journalled in German renders a German report: the headings,
// labels, verdict words, cautions and signature box in German (the
// expected German written by hand: procedures/catalog/lang/de), the
// standard's symbols and every number as in the English report of the
// same session, numbers written with the decimal comma (a version
// "0.1.0" and a standard's section "6.2, G.4" as written), in the HTML and
// in the PDF. A rendering may ask for
// another language (Options.Language), here English again.
func TestReportInTheSessionLanguage(t *testing.T) {
	r, err := Build(sampleSession())
	if err != nil {
		t.Fatal(err)
	}
	var en bytes.Buffer
	if err := r.WriteHTML(&en, fixedOpts); err != nil {
		t.Fatal(err)
	}
	r.Session.Language = "de" // as the bench journals it (entry.Session.Language)
	var de bytes.Buffer
	if err := r.WriteHTML(&de, fixedOpts); err != nil {
		t.Fatal(err)
	}
	got := de.String()
	for _, want := range []string{`<html lang="de">`, "<title>Bildverstärkerprüfung HV-2291, ", "<h1>Bildverstärkerprüfung: HV-2291</h1>", "<h2>Ergebnisse</h2>",
		"<h2>Messunsicherheitsbudgets</h2>", "<h2>Sicherheitshinweise</h2>", "Röntgenstrahlung ist gefährlich.",
		"Strahlenschutzbeauftragten", "<h2>Prüfung und Unterschrift</h2>", "Außerhalb eines eingestellten Grenzwerts",
		"4 bestanden · 1 nicht bestanden · 3 zur Information", "<th class=\"num\">Wert ± U</th>", "<th>Bewertung</th>",
		"G_x = L / K̇: Leuchtdichte in der Mitte (cd/m²)", "Die Prüfung und die Röntgenanlage", "Modell und Seriennummer laut Zertifikat",
		"<li>Ein Messgerät ist ausgefallen: 1-mal</li>", "<li>Kontrastverhältnis (32cm): nicht eingehalten: ", "nicht beziffert: Die Unsicherheit des Rückstreufaktors ist nicht in diesem Budget", "Wiederholbarkeit der Leuchtdichte",
		"152,0 ± 5,3", "90,5 % von 168,0", "Konversionsfaktor je Feldformat", "Balken: erweiterte Messunsicherheit U.", ">oben<", ">rechts<", "<h3><span>Konversionsfaktor</span>, 32cm: 152,0 ± 5,3 cd·m⁻²/(µGy·s⁻¹) (k = 2,00)</h3>", "mit k = 2,00"} {
		if !strings.Contains(got, want) {
			t.Errorf("German report lacks %q", want)
		}
	}
	// A version and a standard's sections keep their points.
	shown := strings.Join(strings.Fields(visibleText(got)), " ")
	for _, want := range []string{"kermalux 0.1.0-dev", "JCGM 100:2008 (GUM) 6.2, G.4", "IEC 61262-2"} {
		if !strings.Contains(shown, want) {
			t.Errorf("German report lacks %q", want)
		}
	}
	// A text no catalog has stays whole in English: no loose format
	// ("%s or %s") may translate a word inside it.
	if !strings.Contains(got, "(test_type: acceptance, yearly or after repair)") {
		t.Errorf("an untranslated text was changed")
	}
	for _, english := range []string{"<h2>Uncertainty budgets</h2>", "<h2>Cautions</h2>", "Review and signature", "X-rays are dangerous", "for information"} {
		if strings.Contains(got, english) {
			t.Errorf("German report still holds %q", english)
		}
	}
	if a, b := numbers(visibleText(en.String())), numbers(visibleText(got)); !slices.Equal(a, b) {
		t.Errorf("the German report's numbers differ from the English: %d and %d numbers", len(a), len(b))
	}
	var fr bytes.Buffer
	opt := fixedOpts
	opt.Language = "fr"
	if err := r.WriteHTML(&fr, opt); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`<html lang="fr">`, "<h2>Mises en garde</h2>", "<h2>Résultats</h2>", "G_x = L / K̇ : luminance au centre", "conformes : 4 · non conformes : 1 · pour information : 3"} {
		if !strings.Contains(fr.String(), want) {
			t.Errorf("French report lacks %q", want)
		}
	}
	if a, b := numbers(visibleText(en.String())), numbers(visibleText(fr.String())); !slices.Equal(a, b) {
		t.Errorf("the French report's numbers differ from the English")
	}
	var again bytes.Buffer
	opt.Language = "en"
	if err := r.WriteHTML(&again, opt); err != nil {
		t.Fatal(err)
	}
	if again.String() != en.String() {
		t.Errorf("asking for English does not give the English report")
	}

	tool, err := exec.LookPath("pdftotext")
	if err != nil {
		t.Skip("pdftotext (poppler-utils) not installed: the PDF is not read back")
	}
	pdfText := func(o Options) string {
		var b bytes.Buffer
		if err := r.WritePDF(&b, o); err != nil {
			t.Fatal(err)
		}
		p := filepath.Join(t.TempDir(), "r.pdf")
		if err := os.WriteFile(p, b.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
		out, err := exec.Command(tool, p, "-").Output()
		if err != nil {
			t.Fatalf("pdftotext: %v", err)
		}
		return string(out)
	}
	pdf := pdfText(fixedOpts)
	for _, want := range []string{"Bildverstärkerprüfung: HV-2291", "Messunsicherheitsbudgets", "Sicherheitshinweise", "Außerhalb eines", "Seite 1 von"} {
		if !strings.Contains(pdf, want) {
			t.Errorf("German PDF lacks %q", want)
		}
	}
	if strings.Contains(pdf, "Uncertainty budgets") {
		t.Errorf("German PDF still holds English headings")
	}
	// The cautions (bulleted), the signature box, the subtitle, the facts
	// and the footer, which the PDF writes apart from the HTML.
	for _, want := range []string{"Röntgenstrahlung ist gefährlich.", "Abgenommen mit Auflagen", "Prüfablauf „acceptance“", "Seriennummer HV-2291", "acceptance · 31 Schritte", "Eingangs-Luftkermaleistung, 32cm: "} {
		if !strings.Contains(pdf, want) {
			t.Errorf("German PDF lacks %q", want)
		}
	}
	for _, english := range []string{"X-rays are dangerous", "Accepted with conditions", "procedure “", ", serial ", " steps", "Input air kerma rate"} {
		if strings.Contains(pdf, english) {
			t.Errorf("German PDF still says %q", english)
		}
	}
}

// The charts of a German report speak German too: the trend's legend
// (the least-squares line, its band, the sessions, each limit with its
// projected month) and every tick label with the decimal comma (DIN 1333;
// the expected German written by hand, procedures/catalog/lang/de). The
// English charts of the same report show the decimal point, so the check
// can fail.
func TestChartsInTheSessionLanguage(t *testing.T) {
	r, err := Build(sampleSession())
	if err != nil {
		t.Fatal(err)
	}
	r.AttachHistory(sampleHistory(7, 180, -4.5), 0.85) // and an action level at 85 % of baseline
	svgText := func(lang string) string {
		var b bytes.Buffer
		opt := fixedOpts
		opt.Language = lang
		if err := r.WriteHTML(&b, opt); err != nil {
			t.Fatal(err)
		}
		var texts []string
		for _, svg := range regexp.MustCompile(`(?s)<svg\b.*?</svg>`).FindAllString(b.String(), -1) {
			for _, m := range regexp.MustCompile(`(?s)<text[^>]*>(.*?)</text>`).FindAllStringSubmatch(svg, -1) {
				texts = append(texts, html.UnescapeString(m[1]))
			}
		}
		return strings.Join(texts, "\n")
	}
	decimal := regexp.MustCompile(`(?m)^[0-9]+[.,][0-9]+$`) // a tick label alone in its text element
	en, de := svgText("en"), svgText("de")
	if ticks := decimal.FindAllString(en, -1); len(ticks) == 0 || !strings.Contains(strings.Join(ticks, " "), ".") {
		t.Fatalf("the English charts show no tick label with a decimal point: %q", ticks)
	}
	for _, tick := range decimal.FindAllString(de, -1) {
		if strings.Contains(tick, ".") {
			t.Errorf("German chart tick label %q keeps the decimal point", tick)
		}
	}
	for _, want := range []string{"Ausgleichsgerade, ", "% des Basiswerts pro Jahr", "-%-Vertrauensband der Geraden", "Sitzung (Balken: U)", "Eingriffsschwelle 153: Nov. 2026 (Nov. 2026 bis Nov. 2026)", "Konversionsfaktor von HV-2291, Feld 32cm", "Jahr"} {
		if !strings.Contains(de, want) {
			t.Errorf("German charts lack %q", want)
		}
	}
	for _, english := range []string{"least-squares line", "band of the line", "session (bars: U)", "action level", " to ", "Conversion factor"} {
		if strings.Contains(de, english) {
			t.Errorf("German charts still hold %q", english)
		}
	}
}

// The budgets' headings put a colon after the result's name: French sets
// a space before it (no-break, so the colon never starts a line), English
// and German none (the French catalogs write " :" the same way).
func TestBudgetHeadingColon(t *testing.T) {
	r, err := Build(sampleSession())
	if err != nil {
		t.Fatal(err)
	}
	for lang, want := range map[string]string{"en": "</span>, 32cm: 152", "de": "</span>, 32cm: 152", "fr": "</span>, 32cm\u00a0: 152"} {
		var b bytes.Buffer
		opts := fixedOpts
		opts.Language = lang
		if err := r.writeHTML(&b, opts, noCharts); err != nil {
			t.Fatal(err)
		}
		if !strings.Contains(b.String(), want) {
			t.Errorf("%s: no budget heading %q", lang, want)
		}
	}
}
