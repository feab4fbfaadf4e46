package bench

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"kermalux/drivers/filepos"
)

// The language key picks the catalog the engine, the checker and the
// report use; an unknown language or a site catalog in another language
// is refused at the key's line; English needs no catalog.
func TestBenchLanguage(t *testing.T) {
	dir := t.TempDir()
	site := filepath.Join(dir, "site.de.yaml")
	if err := os.WriteFile(site, []byte("language: de\ndecimal: \",\"\ntexts:\n  - en: \"Dim the room lights. Press when done.\"\n    de: \"Raumlicht dimmen. Danach drücken.\"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	fr := filepath.Join(dir, "site.fr.yaml")
	if err := os.WriteFile(fr, []byte("language: fr\ndecimal: \",\"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	b, err := Parse(filepath.Join(dir, "b.yaml"), []byte(goodBench))
	if err != nil {
		t.Fatal(err)
	}
	if !b.Messages().IsEnglish() || b.Env().Texts != nil || b.sessionLanguage() != "" || !b.Panel.Messages.IsEnglish() {
		t.Errorf("a bench without language is not English")
	}
	b, err = Parse(filepath.Join(dir, "b.yaml"), []byte(goodBench+"language: de\ncatalogs: [site.de.yaml]\n"))
	if err != nil {
		t.Fatal(err)
	}
	if b.Messages().Code() != "de" || b.sessionLanguage() != "de" {
		t.Fatalf("language %q", b.Messages().Code())
	}
	if got := b.Messages().Text("Dim the room lights. Press when done."); got != "Raumlicht dimmen. Danach drücken." {
		t.Errorf("site text: %q", got)
	}
	if got := b.Messages().Text("Release the beam."); got != "Strahlung beenden." {
		t.Errorf("built-in text: %q", got)
	}
	if tr := b.Env().Texts; tr == nil || tr.Code() != "de" {
		t.Errorf("the checker is not given the language: %v", tr)
	}
	if b.Panel.Messages.Code() != "de" {
		t.Errorf("the panel is not given the language: %q", b.Panel.Messages.Code())
	}
	for _, c := range []struct {
		name, extra string
		line        int
		want        string
	}{
		{"unknown", "language: xx\n", 10, "no catalog for this language"},
		{"other language's file", "language: de\ncatalogs: [site.fr.yaml]\n", 11, `catalog is in "fr"`},
		{"no such file", "language: de\ncatalogs: [none.yaml]\n", 11, "none.yaml"},
		{"catalogs for English", "catalogs: [site.de.yaml]\n", 10, "language is English"},
	} {
		_, err := Parse(filepath.Join(dir, "b.yaml"), []byte(goodBench+c.extra))
		var fe *filepos.Error
		if !errors.As(err, &fe) || fe.Line != c.line || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want line %d and %q", c.name, err, c.line, c.want)
		}
	}
}
