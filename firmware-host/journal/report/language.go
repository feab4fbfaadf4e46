package report

import (
	"bytes"
	"html"
	"regexp"
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
// standard's symbols (G_x, K̇, L, U, k), the units and every number are
// the same, numbers written with the language's decimal separator; the
// journal's own words (a meter's raw line, the
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

// text is s in the report's language (s itself in English, and for a
// text no catalog has), its numbers written with the language's decimal
// separator unless it cites a standard (standardRef). The white space
// around s is kept.
func (w *words) text(s string) string { return w.translate(s, true) }

// colon is the colon after a name in w's language: French sets a space
// (here a no-break one) before it, English and German none.
func (w *words) colon() string {
	if w != nil && w.c.Code() == "fr" {
		return "\u00a0:"
	}
	return ":"
}

func (w *words) translate(s string, localNumbers bool) string {
	if w == nil || !strings.ContainsFunc(s, func(r rune) bool { return unicode.IsLetter(r) || r == '.' }) {
		return s
	}
	localNumbers = localNumbers && !standardRef.MatchString(s)
	key := s
	if !localNumbers {
		key = "\x00" + s
	}
	if t, ok := w.memo[key]; ok {
		return t
	}
	t := s
	if strings.ContainsFunc(s, unicode.IsLetter) {
		core := strings.TrimSpace(s)
		if tr, ok := w.whole(core); ok {
			i := strings.Index(s, core)
			t = s[:i] + tr + s[i+len(core):]
		}
	}
	if localNumbers {
		t = decimals(t, w.c.Decimal)
	}
	w.memo[key] = t
	return t
}

// whole translates s whole (catalog.TranslateWhole) or, when s is a list
// joined by "; " (a step's set-up, a correction's notes), item by item:
// the list is translated only when each item that is prose is, so a list
// is never half translated.
func (w *words) whole(s string) (string, bool) {
	if tr, ok := w.c.TranslateWhole(s); ok {
		return tr, true
	}
	items := strings.Split(s, "; ")
	if len(items) < 2 {
		return s, false
	}
	changed := false
	for i, it := range items {
		tr, ok := w.c.TranslateWhole(it)
		switch {
		case ok:
			items[i], changed = tr, changed || tr != it
		case prose(it):
			return s, false
		}
	}
	return strings.Join(items, "; "), changed
}

// prose: s has two or more words of three letters or more (as
// catalog.TranslateWhole tells a value that needs a translation from a
// name or a number).
func prose(s string) bool {
	n := 0
	for _, f := range strings.Fields(s) {
		if strings.Count(strings.Map(func(r rune) rune {
			if unicode.IsLetter(r) {
				return 'a'
			}
			return -1
		}, f), "a") >= 3 {
			n++
		}
	}
	return n >= 2
}

// standardRef finds a text that cites a standard or a handbook: its
// numbers are section and table numbers, written as the standard writes
// them ("JCGM 100:2008 (GUM) 6.2, G.4").
var standardRef = regexp.MustCompile(`\b(?:JCGM|GUM|IEC|ISO|IAEA|TRS|AAPM|TG|DIN|NIST|BIPM)\b`)

// decimalPoint is a number with a decimal point standing alone: not
// after a letter, a digit or another separator ("G.4", "1.2.3" are no
// decimal numbers).
var decimalPoint = regexp.MustCompile(`(^|[^\p{L}\p{N}_.,])([0-9]+)\.([0-9]+)\b`)

// decimals writes the decimal point of each number in s as sep (DIN 1333
// and the SI Brochure 5.4.4: the decimal marker is the comma or the point,
// as the language writes it). A run of more than one point (a version
// "0.1.0", a section "7.2.6") is left as it is.
func decimals(s, sep string) string {
	if sep == "" || sep == "." || !strings.Contains(s, ".") {
		return s
	}
	var b strings.Builder
	last := 0
	for _, m := range decimalPoint.FindAllStringSubmatchIndex(s, -1) {
		end := m[1]
		if rest := s[end:]; len(rest) > 1 && (rest[0] == '.' || rest[0] == ',') && rest[1] >= '0' && rest[1] <= '9' {
			continue
		}
		b.WriteString(s[last:m[5]]) // up to the whole part
		b.WriteString(sep)
		b.WriteString(s[m[6]:end])
		last = end
	}
	b.WriteString(s[last:])
	return b.String()
}

// translateHTML translates the text of a rendered HTML report: each run
// of text between tags (outside style, script and the charts' svg, and not
// in an element of class "mono", which holds what a meter sent or a
// digest) is looked up whole (its numbers keep their points from the
// first mention of a standard to the end of its cell or paragraph), unescaped, and written back escaped; the
// title and placeholder attributes are left as they are.
func (w *words) translateHTML(page []byte) []byte {
	if w == nil {
		return page
	}
	var out bytes.Buffer
	out.Grow(len(page) + len(page)/8)
	skip := "" // the element whose content is left as it is
	mono := false
	cite := false // the element cites a standard: its numbers are its sections
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
				t := html.UnescapeString(string(txt))
				cite = cite || standardRef.MatchString(t)
				out.WriteString(html.EscapeString(w.translate(t, !cite)))
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
			switch name {
			case "/td", "/th", "/p", "/li", "/div", "/figcaption", "/h2", "/h3":
				cite = false
			}
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
