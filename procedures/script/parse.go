package script

import (
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"sort"
	"strings"
	"time"

	"github.com/goccy/go-yaml/ast"
	"github.com/goccy/go-yaml/parser"
	"github.com/goccy/go-yaml/token"

	"kermalux/drivers/filepos"
	"kermalux/drivers/units"
)

// MaxFileBytes bounds a procedure file: the built-in ones are a few
// kilobytes, and a site's own hardly more, so a file larger than 1 MiB is
// not a procedure; it is refused before the YAML decoder sees it (a huge
// YAML string costs many times its size to decode).
const MaxFileBytes = 1 << 20

// Load reads and parses the script file at path (at most MaxFileBytes).
// Like Parse, it returns the procedure as far as it could be read together
// with the Problems of form it found.
func Load(path string) (*Procedure, error) {
	data, err := filepos.ReadFile(path, MaxFileBytes, "procedure file")
	if err != nil {
		return nil, fmt.Errorf("reading procedure: %w", err)
	}
	return Parse(path, data)
}

// Parse reads a script's text; name is used in positions (usually the file
// name). Problems of form (a YAML syntax error, an unknown kind or field, a
// bad unit, a missing required field) are returned as Problems, with the
// procedure as far as it could be read (nil only after a syntax error).
func Parse(name string, data []byte) (*Procedure, error) {
	sum := sha256.Sum256(data)
	f, err := parser.ParseBytes(data, 0)
	if err != nil {
		return nil, Problems{syntaxProblem(name, err)}
	}
	ps := &parse{file: name}
	proc := &Procedure{File: name, SHA256: hex.EncodeToString(sum[:]), Pos: Pos{File: name, Line: 1, Col: 1}, Fields: map[string]Pos{}}
	var body ast.Node
	for _, d := range f.Docs {
		if d == nil || d.Body == nil {
			continue
		}
		if body != nil {
			ps.errf(ps.pos(d.Body), "more than one YAML document: a script is one procedure")
			break
		}
		body = d.Body
	}
	if body == nil {
		ps.errf(proc.Pos, "empty file: expected a procedure (name, title, version, beam_budget, steps)")
		return proc, ps.probs
	}
	ps.procedure(body, proc)
	if len(ps.probs) > 0 {
		return proc, ps.probs
	}
	return proc, nil
}

// syntaxProblem turns a YAML parser error into a Problem at its token.
func syntaxProblem(file string, err error) Problem {
	var te interface {
		GetToken() *token.Token
		GetMessage() string
	}
	if errors.As(err, &te) && te.GetToken() != nil && te.GetToken().Position != nil {
		p := te.GetToken().Position
		return Problem{Pos: Pos{File: file, Line: p.Line, Col: p.Column}, Reason: "YAML syntax: " + te.GetMessage()}
	}
	return Problem{Pos: Pos{File: file}, Reason: "YAML syntax: " + err.Error()}
}

type parse struct {
	file  string
	probs Problems
}

func (ps *parse) errf(p Pos, format string, args ...any) {
	ps.probs = append(ps.probs, Problem{Pos: p, Reason: fmt.Sprintf(format, args...)})
}

func (ps *parse) pos(n ast.Node) Pos {
	if n == nil {
		return Pos{File: ps.file}
	}
	tk := n.GetToken()
	if m, ok := n.(*ast.MappingNode); ok && len(m.Values) > 0 {
		tk = m.Values[0].Key.GetToken()
	}
	if mv, ok := n.(*ast.MappingValueNode); ok {
		tk = mv.Key.GetToken()
	}
	if tk == nil || tk.Position == nil {
		return Pos{File: ps.file}
	}
	return Pos{File: ps.file, Line: tk.Position.Line, Col: tk.Position.Column}
}

// unwrap looks through tags and anchors to the value.
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

// field is one key: value of a mapping.
type field struct {
	key   string
	kpos  Pos
	value ast.Node
	vpos  Pos
}

// mapping reads a mapping node into its fields, reporting duplicate keys.
func (ps *parse) mapping(n ast.Node, what string) ([]field, bool) {
	n = unwrap(n)
	var mvs []*ast.MappingValueNode
	switch v := n.(type) {
	case *ast.MappingNode:
		mvs = v.Values
	case *ast.MappingValueNode:
		mvs = []*ast.MappingValueNode{v}
	default:
		ps.errf(ps.pos(n), "%s: expected a mapping of key: value, found %s", what, describe(n))
		return nil, false
	}
	seen := map[string]bool{}
	var out []field
	for _, mv := range mvs {
		k, _ := ps.scalar(mv.Key)
		kp := ps.pos(mv.Key)
		if seen[k] {
			ps.errf(kp, "%s: key %q given twice", what, k)
			continue
		}
		seen[k] = true
		v := mv.Value
		vp := kp
		if v != nil {
			vp = ps.pos(v)
		}
		out = append(out, field{key: k, kpos: kp, value: v, vpos: vp})
	}
	return out, true
}

func describe(n ast.Node) string {
	switch unwrap(n).(type) {
	case nil:
		return "nothing"
	case *ast.NullNode:
		return "an empty value"
	case *ast.MappingNode, *ast.MappingValueNode:
		return "a mapping"
	case *ast.SequenceNode:
		return "a list"
	case *ast.AliasNode:
		return "an alias (aliases are not supported in scripts)"
	default:
		return "a single value"
	}
}

// scalar returns a scalar node's text.
func (ps *parse) scalar(n ast.Node) (string, bool) {
	n = unwrap(n)
	switch v := n.(type) {
	case nil:
		return "", false
	case *ast.StringNode:
		return v.Value, true
	case *ast.LiteralNode:
		if v.Value != nil {
			return strings.TrimRight(v.Value.Value, "\n"), true
		}
		return "", true
	case *ast.NullNode:
		return "", false
	case *ast.MappingNode, *ast.MappingValueNode, *ast.SequenceNode, *ast.AliasNode:
		return "", false
	}
	if tk := n.GetToken(); tk != nil {
		return tk.Value, true
	}
	return "", false
}

// text reads a required scalar value.
func (ps *parse) text(f field, what string) string {
	s, ok := ps.scalar(f.value)
	if !ok {
		ps.errf(f.vpos, "%s: expected text, found %s", what, describe(f.value))
		return ""
	}
	return s
}

// list reads a sequence node.
func (ps *parse) list(f field, what string) ([]ast.Node, bool) {
	v := unwrap(f.value)
	s, ok := v.(*ast.SequenceNode)
	if !ok {
		ps.errf(f.vpos, "%s: expected a list, found %s", what, describe(f.value))
		return nil, false
	}
	return s.Values, true
}

// procedureFields are the keys a procedure may have.
var procedureFields = []string{"name", "title", "version", "description", "beam_budget", "meters", "defaults", "steps"}

func (ps *parse) procedure(n ast.Node, proc *Procedure) {
	fields, ok := ps.mapping(n, "procedure")
	if !ok {
		return
	}
	var haveSteps bool
	for _, f := range fields {
		proc.Fields[f.key] = f.kpos
		switch f.key {
		case "name":
			proc.Name = ps.text(f, "name")
			if proc.Name != "" && !validName(proc.Name) {
				ps.errf(f.vpos, "name %q: use lower-case letters, digits and hyphens", proc.Name)
			}
		case "title":
			proc.Title = ps.text(f, "title")
		case "version":
			proc.Version = ps.text(f, "version")
		case "description":
			ps.text(f, "description")
		case "beam_budget":
			if d, ok := ps.duration(f, "beam_budget"); ok {
				proc.BeamBudget = d
			}
		case "meters":
			items, ok := ps.list(f, "meters")
			for _, it := range items {
				if s, ok := ps.scalar(it); ok && s != "" {
					proc.Meters = append(proc.Meters, s)
				} else {
					ps.errf(ps.pos(it), "meters: expected a meter name, found %s", describe(it))
				}
			}
			_ = ok
		case "defaults":
			ps.defaults(f, &proc.Defaults)
		case "steps":
			haveSteps = true
			items, ok := ps.list(f, "steps")
			if ok {
				proc.Steps = ps.steps(items, false)
			}
			if ok && len(items) == 0 {
				ps.errf(f.vpos, "steps: the procedure has no steps")
			}
		default:
			ps.errf(f.kpos, "unknown procedure field %q (expected one of %s)", f.key, strings.Join(procedureFields, ", "))
		}
	}
	for _, req := range []string{"name", "title", "version", "beam_budget"} {
		if _, ok := proc.Fields[req]; !ok {
			ps.errf(proc.Pos, "procedure has no %s", req)
		}
	}
	if !haveSteps {
		ps.errf(proc.Pos, "procedure has no steps")
	}
}

func validName(s string) bool {
	for i, r := range s {
		switch {
		case r >= 'a' && r <= 'z', r >= '0' && r <= '9':
		case (r == '-' || r == '_') && i > 0:
		default:
			return false
		}
	}
	return s != ""
}

func (ps *parse) defaults(f field, d *Defaults) {
	fields, ok := ps.mapping(f.value, "defaults")
	if !ok {
		return
	}
	for _, g := range fields {
		if !ps.measureShared(g, &d.Precision, &d.MaxBeam, &d.MinBeam, &d.Expect) {
			ps.errf(g.kpos, "unknown defaults field %q (expected %s)", g.key, strings.Join(measureSharedKeys, ", "))
		}
	}
}

func (ps *parse) steps(items []ast.Node, nested bool) []Step {
	var out []Step
	for _, it := range items {
		if s, ok := ps.step(it, nested); ok {
			out = append(out, s)
		}
	}
	return out
}

func (ps *parse) step(n ast.Node, nested bool) (Step, bool) {
	fields, ok := ps.mapping(n, "step")
	if !ok {
		return Step{}, false
	}
	s := Step{Pos: ps.pos(n), Fields: map[string]Pos{}}
	byKey := map[string]field{}
	for _, f := range fields {
		byKey[f.key] = f
		s.Fields[f.key] = f.kpos
	}
	kf, ok := byKey["kind"]
	if !ok {
		ps.errf(s.Pos, "step has no kind (one of %s)", kindNames())
		return Step{}, false
	}
	s.Kind = StepKind(ps.text(kf, "kind"))
	k, known := kindOf(s.Kind)
	if !known {
		ps.errf(kf.vpos, "unknown step kind %q (expected one of %s)", s.Kind, kindNames())
		return Step{}, false
	}
	if idf, ok := byKey["id"]; ok {
		s.ID = ps.text(idf, "id")
		if s.ID != "" && !validID(s.ID) {
			ps.errf(idf.vpos, "step id %q: use letters, digits, hyphens and underscores", s.ID)
		}
	} else {
		ps.errf(s.Pos, "%s step has no id (every step needs one, so a resumed session can find it)", s.Kind)
	}
	if s.Kind == KindPerFieldMode && nested {
		ps.errf(kf.vpos, "per_field_mode inside per_field_mode is not supported")
	}
	for _, f := range fields {
		if f.key == "id" || f.key == "kind" {
			continue
		}
		if !contains(k.fields, f.key) {
			ps.errf(f.kpos, "unknown field %q for a %s step (expected %s)", f.key, s.Kind, strings.Join(k.fields, ", "))
			continue
		}
		ps.stepField(&s, f)
		if k.parse != nil {
			k.parse(ps, &s, f)
		}
	}
	for _, key := range k.need {
		if _, ok := byKey[key]; !ok {
			ps.errf(s.Pos, "%s step %q has no %s", s.Kind, s.ID, key)
		}
	}
	if k.finish != nil {
		k.finish(&s)
	}
	return s, true
}

func validID(s string) bool {
	for _, r := range s {
		switch {
		case r >= 'a' && r <= 'z', r >= 'A' && r <= 'Z', r >= '0' && r <= '9', r == '-', r == '_':
		default:
			return false
		}
	}
	return s != ""
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// stepField reads the keys every kind that has them shares: text, setup
// and items.
func (ps *parse) stepField(s *Step, f field) {
	switch f.key {
	case "text":
		s.Text = ps.text(f, "text")
		if strings.TrimSpace(s.Text) == "" {
			ps.errf(f.vpos, "text is empty")
		}
	case "setup":
		s.Setup = ps.setup(f)
	case "items":
		items, ok := ps.list(f, "items")
		if ok && len(items) == 0 {
			ps.errf(f.vpos, "items: the checklist is empty")
		}
		for _, it := range items {
			t, ok := ps.scalar(it)
			if !ok || strings.TrimSpace(t) == "" {
				ps.errf(ps.pos(it), "items: expected a line of text, found %s", describe(it))
				continue
			}
			s.Items = append(s.Items, Item{Text: t, Pos: ps.pos(it)})
		}
		if s.Items == nil {
			s.Items = []Item{}
		}
	}
}

// boolean reads one of two words (or true/false).
func (ps *parse) boolean(f field, what, yes, no string) bool {
	t := strings.ToLower(ps.text(f, what))
	switch t {
	case yes, "true", "yes":
		return true
	case no, "false", "no":
		return false
	case "":
		return false
	}
	ps.errf(f.vpos, "%s: expected %s or %s, found %q", what, yes, no, t)
	return false
}

func (ps *parse) expect(f field) []Expect {
	fields, ok := ps.mapping(f.value, "expect")
	if !ok {
		return nil
	}
	var out []Expect
	for _, g := range fields {
		q := units.Quantity(g.key)
		if !q.Valid() {
			ps.errf(g.kpos, "expect: unknown quantity %q", g.key)
			continue
		}
		lo, hi, unit, ok := ps.rangeOf(g, "expect")
		if !ok {
			continue
		}
		clo, err1 := units.ToCanonical(q, lo, unit)
		chi, err2 := units.ToCanonical(q, hi, unit)
		if err := errors.Join(err1, err2); err != nil {
			ps.errf(g.vpos, "expect %s: %v", q, err1)
			continue
		}
		out = append(out, Expect{Quantity: q, Min: clo, Max: chi, Pos: g.vpos})
	}
	return out
}

// setupFields lists the setup keys in the order FORMAT.md gives them.
var setupFields = []string{SetFieldMode, SetBeamQuality, SetTubeVoltage, SetTubeCurrent, SetAddedFilter, SetGrid,
	SetLeadDisk, SetPhantom, SetBrightnessControl, SetChamber, SetPhotometerRadius, SetPhotometerAngle}

func (ps *parse) setup(f field) Setup {
	fields, ok := ps.mapping(f.value, "setup")
	if !ok {
		return nil
	}
	var out Setup
	for _, g := range fields {
		t := strings.TrimSpace(ps.text(g, g.key))
		if t == "" {
			ps.errf(g.vpos, "setup %s: empty value", g.key)
			continue
		}
		v, ok := ps.setupValue(g, t)
		if ok {
			out = append(out, Setting{Key: g.key, Value: v, Pos: g.vpos})
		}
	}
	return out
}

// setupValue checks and normalises one setup value.
func (ps *parse) setupValue(g field, t string) (string, bool) {
	word := func(choices ...string) (string, bool) {
		lt := strings.ToLower(t)
		if lt == "true" || lt == "false" {
			ps.errf(g.vpos, "setup %s: write %s, not %s", g.key, strings.Join(choices, " or "), lt)
			return "", false
		}
		if contains(choices, lt) {
			return lt, true
		}
		ps.errf(g.vpos, "setup %s: expected %s, found %q", g.key, strings.Join(choices, " or "), t)
		return "", false
	}
	withUnit := func(q units.Quantity) (string, bool) {
		v, unit, err := splitNumber(t)
		if err == nil && unit == "" {
			err = fmt.Errorf("%q has no unit (write it with one, e.g. %q)", t, "70 "+units.Canonical(q))
		}
		if err == nil {
			_, err = units.ToCanonical(q, v, unit)
		}
		if err != nil {
			ps.errf(g.vpos, "setup %s: %v", g.key, err)
			return "", false
		}
		return formatNumber(v) + " " + unit, true
	}
	switch g.key {
	case SetFieldMode, SetChamber:
		return t, true
	case SetBeamQuality:
		if _, ok := beamQuality(t); !ok {
			ps.errf(g.vpos, "setup beam_quality: unknown radiation quality %q (expected an IEC 61267 name: %s)", t, qualityNames())
			return "", false
		}
		return t, true
	case SetTubeVoltage:
		return withUnit(units.Voltage)
	case SetTubeCurrent:
		return withUnit(units.Current)
	case SetAddedFilter:
		v, mat, err := filterOf(t)
		if err != nil {
			ps.errf(g.vpos, "setup added_filter: %v", err)
			return "", false
		}
		return formatNumber(v) + " mm " + mat, true
	case SetGrid:
		return word("in", "removed")
	case SetLeadDisk, SetPhantom:
		return word("in", "out")
	case SetBrightnessControl:
		return word("on", "off")
	case SetPhotometerRadius:
		v, err := radiusOf(t)
		if err != nil {
			ps.errf(g.vpos, "setup photometer_radius: %v", err)
			return "", false
		}
		return formatNumber(v) + " r", true
	case SetPhotometerAngle:
		v, err := angleOf(t)
		if err != nil {
			ps.errf(g.vpos, "setup photometer_angle: %v", err)
			return "", false
		}
		return formatNumber(v) + " deg", true
	}
	keys := append([]string(nil), setupFields...)
	sort.Strings(keys)
	ps.errf(g.kpos, "unknown setup field %q (expected one of %s)", g.key, strings.Join(keys, ", "))
	return "", false
}

// duration reads a time with its unit ("120 s", "2 min").
func (ps *parse) duration(f field, what string) (d time.Duration, ok bool) {
	t := ps.text(f, what)
	if t == "" {
		return 0, false
	}
	dd, err := durationOf(t)
	if err != nil {
		ps.errf(f.vpos, "%s: %v", what, err)
		return 0, false
	}
	return dd, true
}

// fraction reads a relative value ("2 %", "0.02").
func (ps *parse) fraction(f field, what string) (float64, bool) {
	t := ps.text(f, what)
	if t == "" {
		return 0, false
	}
	v, err := fractionOf(t)
	if err != nil {
		ps.errf(f.vpos, "%s: %v", what, err)
		return 0, false
	}
	return v, true
}

// number reads a number with an optional unit.
func (ps *parse) number(f field, what string) (float64, string, bool) {
	t := ps.text(f, what)
	v, unit, err := splitNumber(t)
	if err != nil {
		ps.errf(f.vpos, "%s: %v", what, err)
		return 0, "", false
	}
	return v, unit, true
}

// rangeOf reads "LOW to HIGH UNIT" (or "LOW UNIT to HIGH UNIT").
func (ps *parse) rangeOf(f field, what string) (lo, hi float64, unit string, ok bool) {
	t := ps.text(f, what)
	if t == "" {
		return 0, 0, "", false
	}
	lo, hi, unit, err := parseRange(t)
	if err != nil {
		ps.errf(f.vpos, "%s: %v", what, err)
		return 0, 0, "", false
	}
	return lo, hi, unit, true
}
