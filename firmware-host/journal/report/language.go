package report

import (
	"bytes"
	"html"
	"strings"
	"unicode"

	"kermalux/procedures/catalog"
)

// The report in the engineer's language: the language the session
// journalled (entry.Session.Language; the bench's), or the one a rendering
// asks for (Options.Language). Every text the report shows that a catalog
// translates (headings, labels, table heads, verdict words, the cautions,
// the signature box; texts composed from a catalogued format, such as
// "3 pass · 0 fail · 1 for information") is shown in that language. The
// standard's symbols (G_x, K̇, L, U, k) and units, and every number, are
// shown as they are; the journal's own words (a meter's raw line, the
// deciding limit as journalled, flags) stay as recorded. A text a catalog
// does not have is shown in English: the report never loses a line for
// want of a translation (TestReportTextsTranslated lists the texts each
// built-in language must have).

// words translates the report's texts, remembering each answer (a report
// repeats its labels in every table).
type words struct {
	c    *catalog.Catalog
	memo map[string]string
}

// wordsFor returns the translator for a rendering: opt's language, else
// the session's; an unknown language or English is English.
func (r *Report) wordsFor(opt Options) *words {
	lang := opt.Language
	if lang == "" {
		lang = r.Session.Language
	}
	c, err := catalog.Builtin(lang)
	if err != nil || c.IsEnglish() {
		return nil
	}
	return &words{c: c, memo: map[string]string{}}
}

// Language is the code of the language a rendering with opt is in.
func (r *Report) Language(opt Options) string {
	if w := r.wordsFor(opt); w != nil {
		return w.c.Code()
	}
	return catalog.English
}

// text is s in the report's language (s itself in English, for a text
// without letters, and for one no catalog has). The white space around
// s is kept.
func (w *words) text(s string) string {
	if w == nil || !strings.ContainsFunc(s, unicode.IsLetter) {
		return s
	}
	if t, ok := w.memo[s]; ok {
		return t
	}
	core := strings.TrimSpace(s)
	t := s
	if tr, ok := w.c.Translate(core); ok {
		i := strings.Index(s, core)
		t = s[:i] + tr + s[i+len(core):]
	}
	w.memo[s] = t
	return t
}

// translateHTML translates the text of a rendered HTML report: each run
// of text between tags (outside style, script and the charts' svg, and not
// in an element of class "mono", which holds what a meter sent or a
// digest) is looked up whole, unescaped, and written back escaped; the
// title and placeholder attributes are left as they are.
func (w *words) translateHTML(page []byte) []byte {
	if w == nil {
		return page
	}
	var out bytes.Buffer
	out.Grow(len(page) + len(page)/8)
	skip := "" // the element whose content is left as it is
	mono := false
	i := 0
	for i < len(page) {
		lt := bytes.IndexByte(page[i:], '<')
		if lt < 0 {
			lt = len(page) - i
		}
		if txt := page[i : i+lt]; len(txt) > 0 {
			if skip != "" || mono {
				out.Write(txt)
			} else {
				out.WriteString(html.EscapeString(w.text(html.UnescapeString(string(txt)))))
			}
		}
		i += lt
		if i >= len(page) {
			break
		}
		gt := bytes.IndexByte(page[i:], '>')
		if gt < 0 {
			out.Write(page[i:])
			break
		}
		tag := page[i : i+gt+1]
		out.Write(tag)
		i += gt + 1
		name := tagName(tag)
		switch {
		case skip != "":
			if name == "/"+skip {
				skip = ""
			}
		case name == "style" || name == "script" || name == "svg":
			skip = name
		case name != "" && name[0] != '/':
			mono = bytes.Contains(tag, []byte(`class="mono"`))
		default:
			mono = false
		}
	}
	return out.Bytes()
}

// tagName is the lower-case name of a tag ("td", "/td"), "" for a comment
// or a doctype.
func tagName(tag []byte) string {
	s := strings.TrimPrefix(string(tag), "<")
	if strings.HasPrefix(s, "!") {
		return ""
	}
	n := 0
	if strings.HasPrefix(s, "/") {
		n = 1
	}
	for n < len(s) && (s[n] >= 'a' && s[n] <= 'z' || s[n] >= 'A' && s[n] <= 'Z' || s[n] >= '0' && s[n] <= '9') {
		n++
	}
	return strings.ToLower(s[:n])
}
