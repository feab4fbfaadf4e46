package live

import (
	"bytes"
	"html/template"
)

// PageTexts lists the English texts of the live page and its script, for
// the catalog's completeness test: every one must have a translation in
// each built-in language.
func PageTexts() []string {
	var out []string
	for _, name := range []string{"page/index.html", "page/pair.html"} {
		src, _ := pageFS.ReadFile(name)
		tm := template.New(name).Funcs(template.FuncMap{"t": func(s string) string {
			out = append(out, s)
			return s
		}})
		if tm, err := tm.Parse(string(src)); err == nil {
			_ = tm.Execute(&bytes.Buffer{}, struct {
				Lang  string
				Texts template.JS
			}{})
		}
	}
	out = append(out, pageScriptTexts...)
	for _, en := range pageNames {
		out = append(out, en)
	}
	return out
}
