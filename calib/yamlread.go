package calib

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"
	"unicode"
	"unicode/utf8"

	"github.com/goccy/go-yaml"
	"github.com/goccy/go-yaml/ast"
	"github.com/goccy/go-yaml/parser"

	"kermalux/drivers/filepos"
	"kermalux/drivers/units"
)

// FileError is a problem with a certificate file, at a line: the one
// position error every kermalux text format shares.
type FileError = filepos.Error

// reader walks a parsed YAML document and keeps the first error.
type reader struct {
	file string
	err  *FileError
}

func (r *reader) fail(line int, field, format string, args ...any) {
	if r.err == nil {
		r.err = &FileError{File: r.file, Line: line, Key: field, Msg: fmt.Sprintf(format, args...)}
	}
}

func lineOf(n ast.Node) int {
	if n == nil {
		return 0
	}
	if t := n.GetToken(); t != nil && t.Position != nil {
		return t.Position.Line
	}
	return 0
}

// parseYAML parses data into the body of its single document.
func parseYAML(file string, data []byte) (ast.Node, error) {
	f, err := parser.ParseBytes(data, 0)
	if err != nil {
		fe := &FileError{File: file, Msg: "not valid YAML"}
		var se *yaml.SyntaxError
		if errors.As(err, &se) {
			fe.Msg = "not valid YAML: " + se.Message
			if se.Token != nil && se.Token.Position != nil {
				fe.Line = se.Token.Position.Line
			}
		} else {
			fe.Msg = "not valid YAML: " + firstLine(err.Error())
		}
		return nil, fe
	}
	var body ast.Node
	docs := 0
	for _, d := range f.Docs {
		if d == nil || d.Body == nil {
			continue
		}
		docs++
		if body == nil {
			body = d.Body
		}
	}
	if docs == 0 {
		return nil, &FileError{File: file, Line: 1, Msg: "file is empty"}
	}
	if docs > 1 {
		return nil, &FileError{File: file, Msg: "more than one YAML document in the file"}
	}
	return body, nil
}

func firstLine(s string) string {
	if i := strings.IndexByte(s, '\n'); i >= 0 {
		return s[:i]
	}
	return s
}

// object is a YAML mapping with its keys checked against the allowed set.
type object struct {
	r      *reader
	path   string // dotted path of this mapping ("" at top)
	line   int    // where the mapping starts (for missing fields)
	values map[string]*ast.MappingValueNode
}

func join(path, key string) string {
	if path == "" {
		return key
	}
	return path + "." + key
}

// asObject reads n as a mapping whose keys must be among allowed.
func (r *reader) asObject(n ast.Node, path string, line int, allowed ...string) *object {
	o := &object{r: r, path: path, line: line, values: map[string]*ast.MappingValueNode{}}
	n = unwrap(n)
	var pairs []*ast.MappingValueNode
	switch m := n.(type) {
	case *ast.MappingNode:
		pairs = m.Values
	case *ast.MappingValueNode:
		pairs = []*ast.MappingValueNode{m}
	case nil, *ast.NullNode:
		return o
	default:
		r.fail(lineOf(n), path, "expected a mapping of keys and values")
		return o
	}
	for _, p := range pairs {
		key := strings.TrimSpace(keyText(p.Key))
		if !contains(allowed, key) {
			if _, _, bad := badRune(key, false); bad {
				key = strconv.QuoteToASCII(key)
			}
			r.fail(lineOf(p.Key), join(path, key), "unknown field (allowed here: %s)", strings.Join(allowed, ", "))
			continue
		}
		if _, dup := o.values[key]; dup {
			r.fail(lineOf(p.Key), join(path, key), "field given twice")
			continue
		}
		o.values[key] = p
	}
	return o
}

func keyText(k ast.MapKeyNode) string {
	if s, ok := ast.Node(k).(ast.ScalarNode); ok {
		return fmt.Sprint(s.GetValue())
	}
	return k.String()
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// unwrap strips tags and anchors.
func unwrap(n ast.Node) ast.Node {
	for {
		switch t := n.(type) {
		case *ast.TagNode:
			n = t.Value
		case *ast.AnchorNode:
			n = t.Value
		default:
			return n
		}
	}
}

func (o *object) has(key string) bool {
	p, ok := o.values[key]
	if !ok {
		return false
	}
	_, null := unwrap(p.Value).(*ast.NullNode)
	return !null && p.Value != nil
}

func (o *object) missing(key string) {
	o.r.fail(o.line, join(o.path, key), "missing (required)")
}

// node returns the value node of key and the line of its key.
func (o *object) node(key string) (ast.Node, int) {
	p := o.values[key]
	return unwrap(p.Value), lineOf(p.Key)
}

// scalar returns the text of a scalar value.
func (o *object) scalar(key string, required bool) (string, int, bool) {
	if !o.has(key) {
		if required {
			o.missing(key)
		}
		return "", o.line, false
	}
	n, line := o.node(key)
	if _, alias := n.(*ast.AliasNode); alias {
		o.r.fail(line, join(o.path, key), "aliases are not supported")
		return "", line, false
	}
	s, ok := n.(ast.ScalarNode)
	if !ok {
		o.r.fail(line, join(o.path, key), "expected a single value")
		return "", line, false
	}
	if l := lineOf(n); l > 0 {
		line = l
	}
	switch v := s.GetValue().(type) {
	case string:
		return strings.TrimSpace(v), line, true
	case float64:
		return strconv.FormatFloat(v, 'g', -1, 64), line, true
	default:
		return fmt.Sprint(v), line, true
	}
}

// text reads a text field. It refuses control characters and the
// invisible format characters (text-direction overrides such as U+202E,
// zero-width joiners, line separators): a serial that prints differently
// from what it holds must not match a meter's, nor mislead a reader of the
// report. Free-text notes may hold line breaks and tabs; every other field
// is one line. Each field is bounded in length ([MaxTextLen]).
func (o *object) text(key string, required bool) string {
	s, line, ok := o.scalar(key, required)
	if !ok {
		return s
	}
	if s == "" && required {
		o.r.fail(line, join(o.path, key), "empty")
	}
	limit, multiline := MaxTextLen, false
	if key == "notes" {
		limit, multiline = 10*MaxTextLen, true
	}
	if n := utf8.RuneCountInString(s); n > limit {
		o.r.fail(line, join(o.path, key), "%d characters, longer than the %d allowed", n, limit)
		return ""
	}
	if i, r, bad := badRune(s, multiline); bad {
		o.r.fail(line, join(o.path, key), "character %d is %s, a control or invisible formatting character, which is not allowed here: %s", i, runeName(r), strconv.QuoteToASCII(s))
		return ""
	}
	return s
}

// badRune finds the first rune of s that is not valid UTF-8, a control
// character (Unicode Cc; newline and tab allowed when multiline), an
// invisible format character (Cf: the bidirectional overrides and
// isolates, zero-width characters, the byte-order mark) or a line or
// paragraph separator (Zl, Zp). i counts runes from 1.
func badRune(s string, multiline bool) (i int, r rune, bad bool) {
	for _, r := range s {
		i++
		switch {
		case r == utf8.RuneError:
			return i, r, true
		case multiline && (r == '\n' || r == '\t'):
		case unicode.IsControl(r), unicode.In(r, unicode.Cf, unicode.Zl, unicode.Zp):
			return i, r, true
		}
	}
	return 0, 0, false
}

func runeName(r rune) string {
	if r == utf8.RuneError {
		return "not valid UTF-8"
	}
	return fmt.Sprintf("%U", r)
}

func (o *object) number(key string, required bool) (float64, bool) {
	s, line, ok := o.scalar(key, required)
	if !ok {
		return 0, false
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || !finite(v) {
		o.r.fail(line, join(o.path, key), "expected a number, got %q", s)
		return 0, false
	}
	return v, true
}

func (o *object) boolean(key string, required bool) (bool, bool) {
	s, line, ok := o.scalar(key, required)
	if !ok {
		return false, false
	}
	switch strings.ToLower(s) {
	case "true", "yes":
		return true, true
	case "false", "no":
		return false, true
	}
	o.r.fail(line, join(o.path, key), "expected true or false, got %q", s)
	return false, false
}

func (o *object) date(key string, required bool) (time.Time, bool) {
	s, line, ok := o.scalar(key, required)
	if !ok {
		return time.Time{}, false
	}
	t, err := time.Parse("2006-01-02", s)
	if err != nil {
		o.r.fail(line, join(o.path, key), "expected a date like 2026-03-14, got %q", s)
		return time.Time{}, false
	}
	return t, true
}

// quantity reads "20 °C", "101.325 kPa", "2.2 %": a number and a unit of q,
// converted to q's canonical unit. A bare number is taken in the canonical unit.
func (o *object) quantity(key string, q units.Quantity, required bool) (float64, bool) {
	s, line, ok := o.scalar(key, required)
	if !ok {
		return 0, false
	}
	num, unit := splitQuantity(s)
	v, err := strconv.ParseFloat(num, 64)
	if err != nil || !finite(v) {
		o.r.fail(line, join(o.path, key), "expected a number and a unit of %s (e.g. %q), got %q", q, "1 "+units.Canonical(q), s)
		return 0, false
	}
	if unit == "" {
		unit = units.Canonical(q)
	}
	c, err := units.ToCanonical(q, v, unit)
	if err != nil {
		o.r.fail(line, join(o.path, key), "%v", err)
		return 0, false
	}
	return c, true
}

func splitQuantity(s string) (num, unit string) {
	s = strings.TrimSpace(s)
	i := strings.IndexFunc(s, func(r rune) bool {
		return !(r >= '0' && r <= '9' || r == '.' || r == '-' || r == '+' || r == 'e' || r == 'E')
	})
	if i < 0 {
		return s, ""
	}
	return strings.TrimSpace(s[:i]), strings.TrimSpace(s[i:])
}

// list returns the entries of a sequence value.
func (o *object) list(key string, required bool) ([]ast.Node, int) {
	if !o.has(key) {
		if required {
			o.missing(key)
		}
		return nil, o.line
	}
	n, line := o.node(key)
	s, ok := n.(*ast.SequenceNode)
	if !ok {
		o.r.fail(line, join(o.path, key), "expected a list")
		return nil, line
	}
	return s.Values, line
}

// child returns the mapping under key.
func (o *object) child(key string, required bool, allowed ...string) *object {
	if !o.has(key) {
		if required {
			o.missing(key)
		}
		return nil
	}
	n, line := o.node(key)
	return o.r.asObject(n, join(o.path, key), line, allowed...)
}
