package bench

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"unicode"

	"github.com/goccy/go-yaml"
	"github.com/goccy/go-yaml/ast"
	"github.com/goccy/go-yaml/parser"

	"kermalux/drivers/filepos"
	"kermalux/procedures/catalog"
	"kermalux/procedures/engine"
)

// MaxFileSize bounds a bench file: a real one is a few kilobytes, and the
// YAML decoder needs many times a file's size in memory.
const MaxFileSize = 256 << 10

// MaxKermaCeiling is the highest kerma ceiling a bench file may set
// (µGy/s at the chamber): twice the default of 50 µGy/s. An intensifier
// input sees well under 10 µGy/s in fluoroscopy (common practice: about
// 0.1 to 1 µGy/s at RQA5); the ceiling exists to stop a session whose
// chamber sits in the unattenuated beam, and a value far above the
// default would switch that off.
const MaxKermaCeiling = 100.0

// plausible is the range a number of the bench file may take; zero is
// always allowed where the key is optional (the default applies).
type plausible struct {
	v        float64
	min, max float64
	zeroOK   bool
	unit     string
}

// checker collects the semantic problems of a bench file, each at the line
// of its key.
type checker struct {
	name string
	file *ast.File
	errs []error
}

func newChecker(name string, data []byte) *checker {
	c := &checker{name: name}
	if f, err := parser.ParseBytes(data, 0); err == nil {
		c.file = f
	}
	return c
}

// at returns the line and column of the key path (strings for map keys,
// ints for list indexes), falling back to the nearest enclosing key found.
func (c *checker) at(path ...any) (int, int) {
	if c.file == nil {
		return 0, 0
	}
	for n := len(path); n > 0; n-- {
		b := (&yaml.PathBuilder{}).Root()
		for _, p := range path[:n] {
			switch p := p.(type) {
			case string:
				b = b.Child(p)
			case int:
				b = b.Index(uint(p))
			}
		}
		node, err := b.Build().FilterFile(c.file)
		if err != nil || node == nil || node.GetToken() == nil {
			continue
		}
		pos := node.GetToken().Position
		return pos.Line, pos.Column
	}
	return 0, 0
}

func (c *checker) errf(path []any, format string, args ...any) {
	line, col := c.at(path...)
	c.errs = append(c.errs, &filepos.Error{File: c.name, Line: line, Column: col, Key: dotted(path), Msg: fmt.Sprintf(format, args...)})
}

func dotted(path []any) string {
	var b strings.Builder
	for _, p := range path {
		switch p := p.(type) {
		case string:
			if b.Len() > 0 {
				b.WriteByte('.')
			}
			b.WriteString(p)
		case int:
			fmt.Fprintf(&b, "[%d]", p)
		}
	}
	return b.String()
}

// number checks a number: finite (YAML's .nan and .inf are refused, never
// read as "unset") and within its plausible range.
func (c *checker) number(path []any, p plausible) {
	switch {
	case math.IsNaN(p.v) || math.IsInf(p.v, 0):
		c.errf(path, "%v is not a number kermalux can use: give a finite value", p.v)
	case p.v == 0 && p.zeroOK:
	case p.v < p.min || p.v > p.max:
		c.errf(path, "%g %s is outside the plausible range %g to %g %s", p.v, p.unit, p.min, p.max, p.unit)
	}
}

// text refuses control characters (and the bidirectional controls that
// make text read differently from what it holds) in names that end up in
// prompts, journals and reports; the message shows the text escaped.
func (c *checker) text(path []any, s string) {
	if len(s) > 512 {
		c.errf(path, "%d characters: at most 512", len(s))
		return
	}
	for _, r := range s {
		if unicode.IsControl(r) || unicode.Is(unicode.Bidi_Control, r) || r == unicode.ReplacementChar {
			c.errf(path, "%s holds the control character %U: remove it", strconv.QuoteToASCII(s), r)
			return
		}
	}
}

func (b *Bench) check(c *checker) error {
	p := func(parts ...any) []any { return parts }
	if len(b.Meters) == 0 {
		c.errf(p("meters"), "none listed")
	}
	for k, s := range map[string]string{"site": b.Site, "room": b.Room, "engineer": b.Engineer} {
		c.text(p(k), s)
	}
	if b.TestType != "" && !slices.Contains(TestTypes, b.TestType) {
		c.errf(p("test_type"), "%q: want one of %s", b.TestType, strings.Join(TestTypes, ", "))
	}
	x := b.XRay
	for k, s := range map[string]string{"model": x.Model, "serial": x.Serial, "generator": x.Generator, "generator_serial": x.GeneratorSerial, "tube": x.Tube, "tube_serial": x.TubeSerial} {
		c.text(p("xray_system", k), s)
	}
	b.checkLanguage(c)
	c.text(p("intensifier", "model"), b.Intensifier.Model)
	c.text(p("intensifier", "serial"), b.Intensifier.Serial)
	seen := map[string]bool{}
	names := map[string]bool{}
	for i, m := range b.Meters {
		at := p("meters", i)
		if m.Name == "" {
			c.errf(at, "name missing")
		}
		c.text(p("meters", i, "name"), m.Name)
		c.text(p("meters", i, "port"), m.Port)
		if names[m.Name] && m.Name != "" {
			c.errf(p("meters", i, "name"), "a second meter named %q", m.Name)
		}
		names[m.Name] = true
		if m.Role != "dosimeter" && m.Role != "photometer" {
			c.errf(p("meters", i, "role"), "%s: role %q: want dosimeter or photometer", m.Name, m.Role)
		} else if seen[m.Role] {
			c.errf(p("meters", i, "role"), "%s: a second %s", m.Name, m.Role)
		}
		seen[m.Role] = true
		if (m.Profile == "") == (m.SCPI == nil) {
			c.errf(at, "%s: give exactly one dialect, profile: FILE or scpi: {...}", m.Name)
		}
		if s := m.SCPI; s != nil && s.Baud != 0 && (s.Baud < 50 || s.Baud > 4000000) {
			c.errf(p("meters", i, "scpi", "baud"), "%d baud is not a serial line speed", s.Baud)
		}
	}
	for i, f := range b.Intensifier.FieldModes {
		if f.Name == "" {
			c.errf(p("intensifier", "field_modes", i), "name missing")
		}
		c.text(p("intensifier", "field_modes", i, "name"), f.Name)
		// Image intensifiers are made from about 10 to 57 cm input
		// diameter (common practice); 1 to 600 mm leaves room.
		c.number(p("intensifier", "field_modes", i, "diameter_mm"), plausible{v: f.DiameterMM, min: 1, max: 600, unit: "mm"})
	}
	for k, v := range b.Intensifier.Spec {
		c.number(p("intensifier", "spec", k), plausible{v: v, min: 0, max: 1e6})
	}
	for k, v := range b.Limits.Action {
		c.number(p("limits", "action", k), plausible{v: v, min: 0, max: 1e6})
	}
	ch := b.Chamber
	c.number(p("chamber", "source_to_chamber_mm"), plausible{v: ch.SourceToChamberMM, min: 100, max: 3000, zeroOK: true, unit: "mm"})
	c.number(p("chamber", "source_to_input_mm"), plausible{v: ch.SourceToInputMM, min: 100, max: 3000, zeroOK: true, unit: "mm"})
	// Backscatter factors of a chamber on a surface are 1.0 to about 1.5
	// (IAEA TRS-457 tables, from memory).
	c.number(p("chamber", "backscatter"), plausible{v: ch.Backscatter, min: 1, max: 1.6, zeroOK: true})
	d := b.Defaults
	c.number(p("defaults", "temperature_c"), plausible{v: d.TemperatureC, min: 5, max: 45, zeroOK: true, unit: "°C"})
	c.number(p("defaults", "pressure_kpa"), plausible{v: d.PressureKPa, min: 50, max: 115, zeroOK: true, unit: "kPa"})
	c.number(p("defaults", "tube_voltage_kv"), plausible{v: d.TubeVoltage, min: 20, max: 150, zeroOK: true, unit: "kV"})
	c.number(p("defaults", "tube_current_ma"), plausible{v: d.TubeCurrent, min: 0.01, max: 1500, zeroOK: true, unit: "mA"})
	c.number(p("defaults", "temperature_uncertainty_c"), plausible{v: d.TemperatureUncC, min: 0, max: 5, unit: "°C"})
	c.number(p("defaults", "pressure_uncertainty_kpa"), plausible{v: d.PressureUncKPa, min: 0, max: 5, unit: "kPa"})
	l := b.Limits
	c.number(p("limits", "baseline_fraction"), plausible{v: l.BaselineFraction, min: 0.01, max: 1, zeroOK: true})
	c.number(p("limits", "kerma_ceiling_ugy_s"), plausible{v: l.KermaCeiling, min: 0.01, max: MaxKermaCeiling, zeroOK: true, unit: "µGy/s"})
	c.number(p("limits", "precision"), plausible{v: l.Precision, min: 0.001, max: 0.5, zeroOK: true})
	b.checkRoomAir(c)
	return errors.Join(c.errs...)
}

// Warnings are what the board says aloud at the start of every session on
// this bench (and journals): local limits set less safe than the defaults.
func (b *Bench) Warnings() []string {
	var out []string
	def := engine.DefaultSettings().KermaCeiling
	if k := b.Limits.KermaCeiling; k > def {
		out = append(out, fmt.Sprintf("Caution: the kerma rate ceiling is set to %s micrograys per second, above the default of %s. Check the bench file with your physicist.",
			strconv.FormatFloat(k, 'g', 4, 64), strconv.FormatFloat(def, 'g', 4, 64)))
	}
	return out
}

// checkLanguage loads the catalog of the bench's language with the
// site's own catalog files: an unknown language, or a catalog file that
// cannot be read or is in another language, is refused.
func (b *Bench) checkLanguage(c *checker) {
	if b.Language == "" && len(b.Catalogs) == 0 {
		return
	}
	lang := b.Language
	if lang == "" {
		lang = catalog.English
	}
	if lang == catalog.English && len(b.Catalogs) > 0 {
		c.errf([]any{"catalogs"}, "catalogs translate into the bench's language, but language is English (set language: de, fr, ...)")
		return
	}
	if _, err := catalog.Builtin(lang); err != nil {
		c.errf([]any{"language"}, "%v", err)
		return
	}
	files := make([]string, len(b.Catalogs))
	for i, f := range b.Catalogs {
		files[i] = b.Rel(f)
	}
	m, err := catalog.Load(lang, files...)
	if err != nil {
		c.errf([]any{"catalogs"}, "%v", err)
		return
	}
	b.messages = m
	b.Panel.Messages = m // the panel's own texts and its voice
}

// SetLanguage switches the bench to another language (the demo's
// --language), as if its file said so; empty keeps the file's.
func (b *Bench) SetLanguage(lang string) error {
	if lang == "" {
		return nil
	}
	c := newChecker(b.Path, nil)
	old := b.Language
	b.Language = lang
	b.checkLanguage(c)
	if len(c.errs) > 0 {
		b.Language = old
		return errors.Join(c.errs...)
	}
	return nil
}
