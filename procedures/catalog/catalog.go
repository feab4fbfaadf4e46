// Package catalog holds the texts kermalux speaks and shows in the
// engineer's language: message catalogs keyed by the English source text,
// in the manner of gettext. English is the source: a text that changes in
// English has no translation until its catalogs are updated, and so shows
// up as missing rather than being said in an outdated wording.
//
// A catalog file (FORMAT.md) is YAML: the language it translates into, how
// that language writes a decimal number, and a list of pairs of the
// English text and its translation. Texts may hold fmt verbs ("%s", "%d")
// and the procedure placeholder {mode}; a translation must hold the same
// ones (Parse refuses one that does not, naming the line). The built-in
// catalogs (lang/<code>/*.yaml) are embedded; a site adds its own files for
// its own procedures (bench key catalogs).
package catalog

import (
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"path"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"unicode"

	"github.com/goccy/go-yaml/ast"
	"github.com/goccy/go-yaml/parser"
	"github.com/goccy/go-yaml/token"

	"kermalux/drivers/filepos"
)

// English is the source language's code.
const English = "en"

//go:embed lang
var builtinFS embed.FS

// ErrUnknownLanguage means no built-in catalog exists for a language.
var ErrUnknownLanguage = errors.New("no catalog for this language")

// Catalog is one language's texts. The zero value and a nil *Catalog are
// English: every lookup returns its source.
type Catalog struct {
	// Language is the code the catalog translates into ("de", "fr");
	// empty or English for the source.
	Language string
	// Decimal is how the language writes the decimal point ("," or ".").
	Decimal string
	// Voice is the espeak-ng voice that speaks the language ("de", "fr").
	Voice string
	texts map[string]text
	// formats are the texts with placeholders, as patterns that match an
	// English text composed from them (Compose), most specific first;
	// rebuilt by Parse and Merge.
	formats []format
}

// format is one catalogued fmt format as a pattern over composed text.
type format struct {
	src   string
	re    *regexp.Regexp
	verbs []byte // the verb of each capture group, in order
}

// text is one translation and where it was written.
type text struct {
	tr   string
	file string
	line int
}

// Key normalises a source text as catalogs key it: runs of white space
// (a YAML folded line, an indented block) are one space, none at the ends.
func Key(s string) string { return strings.Join(strings.Fields(s), " ") }

// IsEnglish reports whether c speaks the source language.
func (c *Catalog) IsEnglish() bool {
	return c == nil || c.Language == "" || c.Language == English
}

// Code is the catalog's language code, English for a nil catalog.
func (c *Catalog) Code() string {
	if c.IsEnglish() {
		return English
	}
	return c.Language
}

// Lookup returns the translation of src and whether there is one; in
// English every text is its own translation.
func (c *Catalog) Lookup(src string) (string, bool) {
	if c.IsEnglish() {
		return src, true
	}
	t, ok := c.texts[Key(src)]
	return t.tr, ok
}

// Text returns the translation of src, whole or composed (Compose), or
// src itself when the catalog has none (the engine never goes silent for
// want of a translation; the check of a procedure and the catalog tests
// are what refuse missing texts).
func (c *Catalog) Text(src string) string {
	if t, ok := c.Translate(src); ok {
		return t
	}
	return src
}

// Translate returns the translation of src, whole or composed, and
// whether there is one.
func (c *Catalog) Translate(src string) (string, bool) {
	if t, ok := c.Lookup(src); ok {
		return t, true
	}
	return c.Compose(src)
}

// Compose translates an English text that was composed from a catalogued
// format ("Retake: %s." filled with "the beam dropped"): the text is
// matched against the formats, most specific first, and the translation
// of the first that matches is filled with the values it held, each
// translated in turn (a text found whole or composed, a number written
// with the language's decimal separator, anything else, such as a field
// mode's name, as it was). It reports false when no format matches.
func (c *Catalog) Compose(src string) (string, bool) {
	if c.IsEnglish() {
		return src, true
	}
	return c.compose(Key(src), 0, false)
}

// TranslateWhole is Translate for texts that were not composed by the
// engine (a report's cells, a journalled reason): a composed translation
// is taken only when every value it holds that is prose (two words or
// more) was translated too, so that a loose format ("%s, %s field") never
// turns a text it merely looks like into half a translation. A name, a
// number or a number with its unit ("32cm", "70.0 kV") may stay as it is.
func (c *Catalog) TranslateWhole(src string) (string, bool) {
	if t, ok := c.Lookup(src); ok {
		return t, true
	}
	if c.IsEnglish() {
		return src, true
	}
	return c.compose(Key(src), 0, true)
}

// maxNesting bounds how deep Compose looks into a value for another format.
const maxNesting = 4

func (c *Catalog) compose(src string, depth int, whole bool) (string, bool) {
	if depth > maxNesting || src == "" {
		return src, false
	}
	for _, f := range c.formats {
		m := f.re.FindStringSubmatch(src)
		if m == nil {
			continue
		}
		args := make([]any, len(f.verbs))
		ok := true
		for i, v := range f.verbs {
			val := m[i+1]
			switch v {
			case 'm': // a field mode's name, as it is
			case 'd':
				n, err := strconv.Atoi(val)
				if err != nil {
					ok = false
				}
				args[i] = n
			default: // a text: translated, a number localised, else kept
				if t, found := c.Lookup(val); found {
					args[i] = t
				} else if t, found := c.compose(val, depth+1, whole); found {
					args[i] = t
				} else if isNumber(val) {
					args[i] = c.Number(val)
				} else if whole && prose(val) {
					ok = false
				} else {
					args[i] = val
				}
			}
		}
		if !ok {
			continue
		}
		tr := c.texts[f.src].tr
		if len(f.verbs) > 0 && f.verbs[0] == 'm' {
			for _, v := range m[1:] {
				tr = strings.Replace(tr, "{mode}", v, 1)
			}
			return tr, true
		}
		return fmt.Sprintf(tr, args...), true
	}
	return src, false
}

// modeFormat adds a procedure text with {mode} placeholders ("Select the
// {mode} field.") as a format whose values are the field modes; any %
// in it is literal.
func (c *Catalog) modeFormat(src string) {
	parts := strings.Split(src, "{mode}")
	var re strings.Builder
	re.WriteString("^")
	for i, p := range parts {
		if i > 0 {
			re.WriteString("(.+?)")
		}
		re.WriteString(regexp.QuoteMeta(p))
	}
	re.WriteString("$")
	c.formats = append(c.formats, format{src: src, re: regexp.MustCompile(re.String()), verbs: []byte(strings.Repeat("m", len(parts)-1))})
}

// prose: s has two or more words of three letters or more.
func prose(s string) bool {
	n := 0
	for _, w := range strings.Fields(s) {
		letters := 0
		for _, r := range w {
			if unicode.IsLetter(r) {
				letters++
			}
		}
		if letters >= 3 {
			n++
		}
	}
	return n >= 2
}

// isNumber: s is a number as strconv writes one ("12", "-0.455", "1e-05").
func isNumber(s string) bool {
	_, err := strconv.ParseFloat(s, 64)
	return err == nil
}

// buildFormats turns every catalogued text with placeholders into a
// pattern: %d matches an integer, %s and %v any text. Texts with other
// verbs (%.0f, %g) are left out: their values cannot be told back from
// the composed text exactly, so the engine fills those with t itself.
// Formats with little fixed text ("%s.") would match anything and are
// left out too.
func (c *Catalog) buildFormats() {
	c.formats = nil
	for src := range c.texts {
		if strings.Contains(src, "{mode}") {
			c.modeFormat(src)
			continue
		}
		if !strings.Contains(src, "%") {
			continue
		}
		var re strings.Builder
		var verbs []byte
		letters := 0
		usable := true
		re.WriteString("^")
		for i := 0; i < len(src); i++ {
			ch := src[i]
			if ch != '%' {
				if ch >= 'A' && ch <= 'z' {
					letters++
				}
				re.WriteString(regexp.QuoteMeta(src[i : i+1]))
				continue
			}
			if i+1 >= len(src) {
				usable = false
				break
			}
			i++
			switch src[i] {
			case '%':
				re.WriteString("%")
			case 'd':
				re.WriteString("(-?[0-9]+)")
				verbs = append(verbs, 'd')
			case 's', 'v':
				re.WriteString("(.+?)")
				verbs = append(verbs, 's')
			default:
				usable = false
			}
		}
		if !usable || letters < 2 || len(verbs) == 0 {
			continue
		}
		re.WriteString("$")
		c.formats = append(c.formats, format{src: src, re: regexp.MustCompile(re.String()), verbs: verbs})
	}
	// Most fixed text first: "Retake: %s." before "%s: %s.".
	fixed := func(f format) int { return len(f.src) - 2*len(f.verbs) }
	sort.Slice(c.formats, func(i, j int) bool {
		a, b := fixed(c.formats[i]), fixed(c.formats[j])
		if a != b {
			return a > b
		}
		return c.formats[i].src < c.formats[j].src
	})
}

// Number rewrites a number written with a decimal point ("0.455", as
// strconv writes it) with the language's decimal separator ("0,455").
func (c *Catalog) Number(s string) string {
	if c.IsEnglish() || c.Decimal == "" || c.Decimal == "." {
		return s
	}
	return strings.Replace(s, ".", c.Decimal, 1)
}

// Sources lists the English texts the catalog translates, sorted.
func (c *Catalog) Sources() []string {
	if c == nil {
		return nil
	}
	out := make([]string, 0, len(c.texts))
	for k := range c.texts {
		out = append(out, k)
	}
	sort.Strings(out)
	return out
}

// Where is the file and line a source text's translation was written at.
func (c *Catalog) Where(src string) (string, int) {
	if c == nil {
		return "", 0
	}
	t := c.texts[Key(src)]
	return t.file, t.line
}

// Merge adds o's texts to c. Both must be of one language; a text
// translated in both is refused, naming both places.
func (c *Catalog) Merge(o *Catalog) error {
	if o == nil {
		return nil
	}
	if c.Language != o.Language {
		return fmt.Errorf("catalog: cannot merge %q texts into %q ones", o.Language, c.Language)
	}
	if c.Decimal == "" {
		c.Decimal = o.Decimal
	}
	if c.Voice == "" {
		c.Voice = o.Voice
	}
	if c.texts == nil {
		c.texts = map[string]text{}
	}
	for _, k := range o.Sources() {
		t := o.texts[k]
		if old, dup := c.texts[k]; dup {
			return &filepos.Error{File: t.file, Line: t.line, Msg: fmt.Sprintf("text %q is translated already at %s:%d", k, old.file, old.line)}
		}
		c.texts[k] = t
	}
	c.buildFormats()
	return nil
}

// Languages lists the languages with built-in catalogs, English first.
func Languages() []string {
	out := []string{English}
	ents, _ := fs.ReadDir(builtinFS, "lang")
	for _, e := range ents {
		if e.IsDir() {
			out = append(out, e.Name())
		}
	}
	return out
}

// Builtin returns the built-in catalog of a language (every file under
// lang/<code>/ merged), and nil for English or "". The error wraps
// ErrUnknownLanguage for a language without one.
func Builtin(lang string) (*Catalog, error) {
	if lang == "" || lang == English {
		return nil, nil
	}
	dir := path.Join("lang", lang)
	ents, err := fs.ReadDir(builtinFS, dir)
	if err != nil || !validCode(lang) {
		return nil, fmt.Errorf("language %q: %w (built in: %s)", lang, ErrUnknownLanguage, strings.Join(Languages(), ", "))
	}
	c := &Catalog{Language: lang}
	for _, e := range ents {
		if e.IsDir() || !strings.HasSuffix(e.Name(), ".yaml") {
			continue
		}
		name := path.Join(dir, e.Name())
		data, err := builtinFS.ReadFile(name)
		if err != nil {
			return nil, fmt.Errorf("built-in catalog %s: %w", name, err)
		}
		one, err := Parse("catalog/"+name, data)
		if err != nil {
			return nil, err
		}
		if err := c.Merge(one); err != nil {
			return nil, err
		}
	}
	return c, nil
}

// MaxFileBytes bounds a site's catalog file: a built-in one is some 20 KiB,
// so one larger than 1 MiB is not a catalog; it is refused before the YAML
// decoder sees it.
const MaxFileBytes = 1 << 20

// Load returns the built-in catalog of lang with the site's catalog files
// merged in (each must be of lang). English with no files is nil.
func Load(lang string, files ...string) (*Catalog, error) {
	c, err := Builtin(lang)
	if err != nil {
		return nil, err
	}
	for _, f := range files {
		data, err := filepos.ReadFile(f, MaxFileBytes, "catalog file")
		if err != nil {
			return nil, fmt.Errorf("catalog: %w", err)
		}
		one, err := Parse(f, data)
		if err != nil {
			return nil, err
		}
		if one.Language != lang {
			return nil, &filepos.Error{File: f, Line: 1, Key: "language", Msg: fmt.Sprintf("catalog is in %q, the bench asks for %q", one.Language, lang)}
		}
		if c == nil {
			c = &Catalog{Language: lang}
		}
		if err := c.Merge(one); err != nil {
			return nil, err
		}
	}
	return c, nil
}

// validCode: a language code as catalogs name it, two or three lower-case
// letters ("de", "fr"), optionally a region ("pt-br").
func validCode(s string) bool {
	main, region, _ := strings.Cut(s, "-")
	lower := func(s string, min, max int) bool {
		if len(s) < min || len(s) > max {
			return false
		}
		for _, r := range s {
			if r < 'a' || r > 'z' {
				return false
			}
		}
		return true
	}
	return lower(main, 2, 3) && (!strings.Contains(s, "-") || lower(region, 2, 3))
}

// Parse reads one catalog file; name is used in errors (usually the file
// name). Every problem is a *filepos.Error naming its line.
func Parse(name string, data []byte) (*Catalog, error) {
	f, err := parser.ParseBytes(data, 0)
	if err != nil {
		return nil, syntaxError(name, err)
	}
	var body ast.Node
	for _, d := range f.Docs {
		if d != nil && d.Body != nil {
			if body != nil {
				return nil, at(name, d.Body, "", "more than one YAML document: a catalog is one")
			}
			body = d.Body
		}
	}
	if body == nil {
		return nil, &filepos.Error{File: name, Line: 1, Msg: "empty file: expected language, decimal and texts"}
	}
	fields, err := mapping(name, body, "")
	if err != nil {
		return nil, err
	}
	c := &Catalog{texts: map[string]text{}}
	var list ast.Node
	for _, fl := range fields {
		switch fl.key {
		case "language":
			c.Language, err = scalar(name, fl.value, "language")
			if err == nil && (!validCode(c.Language) || c.Language == English) {
				err = at(name, fl.value, "language", fmt.Sprintf("%q is not a language to translate into: expected a code such as de or fr (English is the source)", c.Language))
			}
		case "decimal":
			c.Decimal, err = scalar(name, fl.value, "decimal")
			if err == nil && c.Decimal != "," && c.Decimal != "." {
				err = at(name, fl.value, "decimal", fmt.Sprintf("decimal separator %q: expected \",\" or \".\"", c.Decimal))
			}
		case "voice":
			c.Voice, err = scalar(name, fl.value, "voice")
		case "texts":
			list = fl.value
		default:
			err = at(name, fl.keyNode, fl.key, "unknown key: expected language, decimal, voice or texts")
		}
		if err != nil {
			return nil, err
		}
	}
	if c.Language == "" {
		return nil, &filepos.Error{File: name, Line: 1, Key: "language", Msg: "missing: the language code the texts are in (de, fr, ...)"}
	}
	if c.Decimal == "" {
		return nil, &filepos.Error{File: name, Line: 1, Key: "decimal", Msg: "missing: the decimal separator, \",\" or \".\""}
	}
	if list == nil {
		return c, nil
	}
	seq, ok := unwrap(list).(*ast.SequenceNode)
	if !ok {
		if _, null := unwrap(list).(*ast.NullNode); null {
			return c, nil
		}
		return nil, at(name, list, "texts", "expected a list of pairs (- en: English text, "+c.Language+": translation)")
	}
	for i, n := range seq.Values {
		key := fmt.Sprintf("texts[%d]", i)
		pair, err := mapping(name, n, key)
		if err != nil {
			return nil, err
		}
		var src, tr string
		var haveSrc, haveTr bool
		for _, fl := range pair {
			switch fl.key {
			case English:
				src, err = scalar(name, fl.value, key+"."+English)
				haveSrc = true
			case c.Language:
				tr, err = scalar(name, fl.value, key+"."+c.Language)
				haveTr = true
			case "note":
				_, err = scalar(name, fl.value, key+".note")
			default:
				err = at(name, fl.keyNode, key+"."+fl.key, fmt.Sprintf("unknown key: expected %s (the English text), %s (its translation) and optionally note", English, c.Language))
			}
			if err != nil {
				return nil, err
			}
		}
		line := lineOf(n)
		switch {
		case !haveSrc:
			return nil, &filepos.Error{File: name, Line: line, Key: key, Msg: "missing " + English + ": the English text"}
		case !haveTr:
			return nil, &filepos.Error{File: name, Line: line, Key: key, Msg: fmt.Sprintf("missing %s: the translation of %q", c.Language, src)}
		}
		src, tr = Key(src), Key(tr)
		if src == "" || tr == "" {
			return nil, &filepos.Error{File: name, Line: line, Key: key, Msg: "empty text"}
		}
		if err := SamePlaceholders(src, tr); err != nil {
			return nil, &filepos.Error{File: name, Line: line, Key: key + "." + c.Language, Msg: err.Error()}
		}
		if old, dup := c.texts[src]; dup {
			return nil, &filepos.Error{File: name, Line: line, Key: key, Msg: fmt.Sprintf("text %q is translated already at line %d", src, old.line)}
		}
		c.texts[src] = text{tr: tr, file: name, line: line}
	}
	c.buildFormats()
	return c, nil
}

// Placeholders lists the fmt verbs of s ("%s", "%d", "%.0f", "%%" not
// counted) in argument order, an explicit index ("%[2]s") placing its verb,
// and the {mode} placeholders, so that a translation may reorder its
// arguments but must use each as its source does.
func Placeholders(s string) []string {
	var out []string
	arg := 0
	for i := 0; i < len(s); i++ {
		if s[i] != '%' {
			continue
		}
		j := i + 1
		if j < len(s) && s[j] == '%' {
			i = j
			continue
		}
		idx := -1
		if j < len(s) && s[j] == '[' {
			k := strings.IndexByte(s[j:], ']')
			if k > 0 {
				var n int
				if _, err := fmt.Sscanf(s[j+1:j+k], "%d", &n); err == nil {
					idx = n - 1
				}
				j += k + 1
			}
		}
		k := j
		for k < len(s) && strings.IndexByte("+-#0123456789.", s[k]) >= 0 {
			k++
		}
		if k >= len(s) || !isVerb(s[k]) {
			// "80 % of": a percent sign as written, not a verb (the
			// engine's formats write it "%%").
			continue
		}
		if idx < 0 {
			idx = arg
		}
		arg = idx + 1
		out = append(out, fmt.Sprintf("%d:%s%c", idx+1, s[j:k], s[k]))
		i = k
	}
	sort.Strings(out)
	for range strings.Count(s, "{mode}") {
		out = append(out, "{mode}")
	}
	return out
}

// isVerb: b is a fmt verb letter.
func isVerb(b byte) bool { return strings.IndexByte("vTtbcdoOqxXUeEfFgGsp", b) >= 0 }

// SamePlaceholders reports, as an error that says what differs, whether tr
// holds other placeholders than src.
func SamePlaceholders(src, tr string) error {
	a, b := Placeholders(src), Placeholders(tr)
	if slices.Equal(a, b) {
		return nil
	}
	return fmt.Errorf("the translation's placeholders %v differ from the English text's %v (each %%-verb and {mode} must appear as in %q)", b, a, src)
}

// field is one key: value of a mapping.
type field struct {
	key     string
	keyNode ast.Node
	value   ast.Node
}

func unwrap(n ast.Node) ast.Node {
	for {
		switch v := n.(type) {
		case *ast.TagNode:
			n = v.Value
		case *ast.AnchorNode:
			n = v.Value
		default:
			return n
		}
	}
}

func mapping(file string, n ast.Node, key string) ([]field, error) {
	var mvs []*ast.MappingValueNode
	switch v := unwrap(n).(type) {
	case *ast.MappingNode:
		mvs = v.Values
	case *ast.MappingValueNode:
		mvs = []*ast.MappingValueNode{v}
	default:
		return nil, at(file, n, key, "expected a mapping of key: value")
	}
	seen := map[string]bool{}
	var out []field
	for _, mv := range mvs {
		k, err := scalar(file, mv.Key, key)
		if err != nil {
			return nil, err
		}
		if seen[k] {
			return nil, at(file, mv.Key, k, "key given twice")
		}
		seen[k] = true
		out = append(out, field{key: k, keyNode: mv.Key, value: mv.Value})
	}
	return out, nil
}

// scalar returns a scalar node's text as written (a translation "Ja" or
// "0" stays text, never a boolean or a number).
func scalar(file string, n ast.Node, key string) (string, error) {
	switch v := unwrap(n).(type) {
	case nil, *ast.NullNode:
		return "", at(file, n, key, "expected a text, found nothing")
	case *ast.StringNode:
		return v.Value, nil
	case *ast.LiteralNode:
		if v.Value != nil {
			return v.Value.Value, nil
		}
		return "", nil
	case *ast.MappingNode, *ast.MappingValueNode, *ast.SequenceNode, *ast.AliasNode, *ast.AnchorNode:
		return "", at(file, n, key, "expected a text, found a mapping, list or alias (quote a text holding \": \")")
	default:
		if tk := v.GetToken(); tk != nil {
			return tk.Value, nil
		}
	}
	return "", at(file, n, key, "expected a text")
}

func lineOf(n ast.Node) int {
	if n == nil {
		return 0
	}
	tk := n.GetToken()
	if m, ok := unwrap(n).(*ast.MappingNode); ok && len(m.Values) > 0 {
		tk = m.Values[0].Key.GetToken()
	}
	if mv, ok := unwrap(n).(*ast.MappingValueNode); ok {
		tk = mv.Key.GetToken()
	}
	if tk == nil || tk.Position == nil {
		return 0
	}
	return tk.Position.Line
}

func at(file string, n ast.Node, key, msg string) error {
	e := &filepos.Error{File: file, Key: key, Msg: msg}
	if n != nil {
		if tk := n.GetToken(); tk != nil && tk.Position != nil {
			e.Line, e.Column = tk.Position.Line, tk.Position.Column
		}
	}
	return e
}

func syntaxError(file string, err error) error {
	var te interface {
		GetToken() *token.Token
		GetMessage() string
	}
	if errors.As(err, &te) && te.GetToken() != nil && te.GetToken().Position != nil {
		p := te.GetToken().Position
		return &filepos.Error{File: file, Line: p.Line, Column: p.Column, Msg: "YAML syntax: " + te.GetMessage(), Err: err}
	}
	return &filepos.Error{File: file, Msg: "YAML syntax", Err: err}
}
