package speech

import (
	"strings"
	"testing"
	"unicode"
	"unicode/utf8"

	"kermalux/procedures/catalog"
)

// FuzzForEar: in every language, the rewritten text is valid UTF-8 when
// the input is, has no control characters, no doubled or edge spaces, and
// rewriting is stable (rewriting twice changes nothing more).
func FuzzForEar(f *testing.F) {
	for _, s := range []string{"", "32cm", "0.87 µGy/s", "102 cd/m²", "90%", "a — b", "-s", "\x00\x01", "μGy", "mmm 5 mm5mm",
		"0,455 µGy/s", "1 s", "-0,3 °C", "1,0123", "1.2.3", "(1 mm)"} {
		f.Add(s)
	}
	ears := []*Ear{nil}
	for _, l := range catalog.Languages()[1:] {
		c, err := catalog.Builtin(l)
		if err != nil {
			f.Fatal(err)
		}
		ears = append(ears, NewEar(c))
	}
	f.Fuzz(func(t *testing.T, s string) {
		if !utf8.ValidString(s) {
			return
		}
		for _, e := range ears {
			forEar(t, e, s)
		}
	})
}

func forEar(t *testing.T, e *Ear, s string) {
	ForEar := e.ForEar
	{
		got := ForEar(s)
		if !utf8.ValidString(got) {
			t.Fatalf("ForEar(%q) = %q: invalid UTF-8", s, got)
		}
		if strings.ContainsFunc(got, unicode.IsControl) {
			t.Fatalf("ForEar(%q) = %q: control character left", s, got)
		}
		if strings.Contains(got, "  ") || strings.TrimSpace(got) != got {
			t.Fatalf("ForEar(%q) = %q: stray spaces", s, got)
		}
		if again := ForEar(got); again != got {
			t.Fatalf("%s: not stable: ForEar(%q) = %q, then %q", e.Language(), s, got, again)
		}
	}
}
