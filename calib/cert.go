package calib

import (
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"kermalux/drivers/units"
)

// Axis names what a certificate's coefficient table varies with.
type Axis string

// Axes of a coefficient table.
const (
	AlongHVL         Axis = "hvl"          // first half-value layer, mm Al
	AlongTubeVoltage Axis = "tube_voltage" // kV
	AlongQuality     Axis = "quality"      // quality name, exact match only
)

// Point is one row of a certificate's coefficient table.
type Point struct {
	BeamQuality BeamQuality // the beam quality the coefficient was measured at
	Factor      float64     // calibration coefficient: true value = Factor × reading
	Line        int         // line in the certificate file
}

// Certificate is a meter's calibration certificate as kermalux uses it.
// The file format is described in CERTIFICATE.md.
type Certificate struct {
	Number     string // certificate number
	Laboratory string
	Model      string // meter model, as printed on the certificate
	Serial     string // meter serial number
	Quantity   units.Quantity
	Calibrated time.Time // date of calibration
	Due        time.Time // date the next calibration is due

	// Chamber: dosimeters only.
	Vented         bool    // open to the air: needs k_TP
	RefTemperature float64 // T0, °C: the certificate's reference temperature
	RefPressure    float64 // P0, kPa

	// Either one coefficient (Coefficient > 0, Points empty) or a table.
	Coefficient float64
	Along       Axis
	Points      []Point // sorted along the axis

	Expanded       float64 // relative expanded uncertainty of the coefficient (0.022 for 2.2 %)
	CoverageFactor float64 // k of Expanded

	Backscatter float64 // optional backscatter factor B (> 1) for the chamber on the input face; 0 = not stated
	Resolution  float64 // optional display resolution, canonical unit of Quantity; 0 = not stated
	// RangeFloor is the lowest value the meter reads (below it, it reports
	// under range), canonical unit; 0 = not stated.
	RangeFloor float64
	Notes      string

	File   string // path it was read from
	SHA256 string // hex SHA-256 of the file's bytes
}

// ForDosimeter reports whether the certificate is for an air kerma (rate) meter.
func (c *Certificate) ForDosimeter() bool {
	return c.Quantity == units.AirKermaRate || c.Quantity == units.AirKerma
}

// RelStdUnc is the relative standard uncertainty of the coefficient,
// expanded/k (type B, JCGM 100:2008 4.3.3).
func (c *Certificate) RelStdUnc() float64 {
	if c.CoverageFactor <= 0 {
		return 0
	}
	return c.Expanded / c.CoverageFactor
}

// Plausible values in a certificate: what no meter or laboratory could
// have is refused with its file and line, so that a typing slip (or a
// file made to switch the correction off) never becomes a calibrated
// reading.
const (
	// MinFactor and MaxFactor bound a calibration coefficient: the meters
	// kermalux reads print air kerma rate and luminance in their units
	// already, so the coefficient is a correction near 1; one beyond a
	// factor of two means the meter is broken or the wrong number was
	// copied (common practice: such a meter goes back for repair, not
	// into service).
	MinFactor, MaxFactor = 0.5, 2.0
	// Reference conditions of a vented chamber: 20 °C (IAEA TRS-398) or
	// 22 °C (AAPM TG-61) and 101.325 kPa; the bounds leave room for
	// other stated conditions and nothing more.
	MinRefTemperature, MaxRefTemperature = 0.0, 40.0
	MinRefPressure, MaxRefPressure       = 80.0, 110.0
	// MaxResolution bounds a display resolution in the canonical unit
	// (µGy/s, µGy, cd/m²): a meter that resolves nothing finer than 100 of
	// these cannot measure an intensifier.
	MaxResolution = 100.0
	// MaxCertificateBytes bounds a certificate file: a transcribed
	// certificate is a few hundred bytes.
	MaxCertificateBytes = 64 << 10
	// MaxTextLen bounds each text field (number, laboratory, model,
	// serial), in characters; notes may be ten times longer.
	MaxTextLen = 200
)

func plausibleFactor(f float64) bool { return f >= MinFactor && f <= MaxFactor }

// LoadCertificate reads and checks a certificate file.
func LoadCertificate(path string) (*Certificate, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("reading certificate: %w", err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, MaxCertificateBytes+1))
	if err != nil {
		return nil, fmt.Errorf("reading certificate %s: %w", path, err)
	}
	if len(data) > MaxCertificateBytes {
		return nil, &FileError{File: path, Msg: fmt.Sprintf("larger than %d KiB: not a certificate file", MaxCertificateBytes>>10)}
	}
	return ParseCertificate(path, data)
}

// ParseCertificate parses certificate text; name is used in errors. Errors
// are *FileError and name the line and the field.
func ParseCertificate(name string, data []byte) (*Certificate, error) {
	body, err := parseYAML(name, data)
	if err != nil {
		return nil, err
	}
	r := &reader{file: name}
	top := r.asObject(body, "", 1, "certificate", "laboratory", "meter", "quantity",
		"calibrated", "due", "chamber", "coefficient", "coefficients", "uncertainty",
		"backscatter_factor", "resolution", "range_floor", "notes")
	if r.err != nil {
		return nil, r.err
	}
	sum := sha256.Sum256(data)
	c := &Certificate{File: name, SHA256: hex.EncodeToString(sum[:])}
	c.Number = top.text("certificate", true)
	c.Laboratory = top.text("laboratory", true)
	if m := top.child("meter", true, "model", "serial"); m != nil {
		c.Model = m.text("model", true)
		c.Serial = m.text("serial", true)
	}
	qs, qline, ok := top.scalar("quantity", true)
	if ok {
		c.Quantity = units.Quantity(qs)
		switch c.Quantity {
		case units.AirKermaRate, units.AirKerma, units.Luminance:
		default:
			r.fail(qline, "quantity", "expected %s, %s or %s, got %q", units.AirKermaRate, units.AirKerma, units.Luminance, qs)
		}
	}
	c.Calibrated, _ = top.date("calibrated", true)
	var dueLine int
	if _, l, ok := top.scalar("due", false); ok {
		dueLine = l
	}
	c.Due, _ = top.date("due", true)
	if r.err == nil && !c.Due.After(c.Calibrated) {
		r.fail(dueLine, "due", "due date %s is not after the calibration date %s", c.Due.Format(time.DateOnly), c.Calibrated.Format(time.DateOnly))
	}

	if c.ForDosimeter() {
		ch := top.child("chamber", true, "vented", "reference_temperature", "reference_pressure")
		if ch != nil {
			c.Vented, _ = ch.boolean("vented", true)
			if c.Vented {
				t, ok := ch.quantity("reference_temperature", units.Temperature, true)
				if ok && (t < MinRefTemperature || t > MaxRefTemperature) {
					_, l, _ := ch.scalar("reference_temperature", false)
					r.fail(l, "chamber.reference_temperature", "must lie between %g and %g °C (codes of practice use 20 or 22 °C), got %g", MinRefTemperature, MaxRefTemperature, t)
				}
				c.RefTemperature = t
				p, ok := ch.quantity("reference_pressure", units.Pressure, true)
				if ok && (p < MinRefPressure || p > MaxRefPressure) {
					_, l, _ := ch.scalar("reference_pressure", false)
					r.fail(l, "chamber.reference_pressure", "must lie between %g and %g kPa (codes of practice use 101.325 kPa), got %g", MinRefPressure, MaxRefPressure, p)
				}
				c.RefPressure = p
			}
		}
	} else if top.has("chamber") {
		_, l := top.node("chamber")
		r.fail(l, "chamber", "only dosimeter certificates describe a chamber")
	}

	hasOne, hasTable := top.has("coefficient"), top.has("coefficients")
	switch {
	case hasOne && hasTable:
		_, l := top.node("coefficients")
		r.fail(l, "coefficients", "give either coefficient or coefficients, not both")
	case hasOne:
		v, ok := top.number("coefficient", true)
		if ok && !plausibleFactor(v) {
			_, l := top.node("coefficient")
			r.fail(l, "coefficient", "must lie between %g and %g (a meter that reads true within a factor of two), got %g", MinFactor, MaxFactor, v)
		}
		c.Coefficient = v
	case hasTable:
		readTable(r, top.child("coefficients", true, "along", "points"), c)
	default:
		r.fail(1, "coefficient", "missing (required: coefficient or coefficients)")
	}

	if u := top.child("uncertainty", true, "expanded", "coverage_factor"); u != nil {
		v, ok := u.quantity("expanded", units.Ratio, true)
		if ok && (v <= 0 || v >= 1) {
			_, l, _ := u.scalar("expanded", false)
			r.fail(l, "uncertainty.expanded", "must be a relative uncertainty between 0 and 100 %%, got %g", v)
		}
		c.Expanded = v
		k, ok := u.number("coverage_factor", true)
		if ok && (k < 1 || k > 20) {
			_, l, _ := u.scalar("coverage_factor", false)
			r.fail(l, "uncertainty.coverage_factor", "must be between 1 and 20, got %g", k)
		}
		c.CoverageFactor = k
	}
	if top.has("backscatter_factor") {
		b, ok := top.number("backscatter_factor", false)
		if ok && (b < 1 || b > 2) {
			_, l := top.node("backscatter_factor")
			r.fail(l, "backscatter_factor", "must be between 1 and 2, got %g", b)
		}
		c.Backscatter = b
	}
	c.Resolution = smallQuantity(r, top, "resolution", c.Quantity)
	c.RangeFloor = smallQuantity(r, top, "range_floor", c.Quantity)
	c.Notes = top.text("notes", false)
	if r.err != nil {
		return nil, r.err
	}
	return c, nil
}

// smallQuantity reads an optional positive value of q no larger than
// MaxResolution (a display resolution, a range floor); 0 when absent.
func smallQuantity(r *reader, top *object, key string, q units.Quantity) float64 {
	if !top.has(key) || !q.Valid() {
		return 0
	}
	v, ok := top.quantity(key, q, false)
	if ok && (v <= 0 || v > MaxResolution) {
		_, l := top.node(key)
		r.fail(l, key, "must be positive and at most %g %s, got %g", MaxResolution, units.Canonical(q), v)
	}
	return v
}

func readTable(r *reader, t *object, c *Certificate) {
	if t == nil {
		return
	}
	as, aline, ok := t.scalar("along", true)
	if ok {
		c.Along = Axis(as)
		switch c.Along {
		case AlongHVL, AlongTubeVoltage, AlongQuality:
		default:
			r.fail(aline, "coefficients.along", "expected %s, %s or %s, got %q", AlongHVL, AlongTubeVoltage, AlongQuality, as)
			return
		}
	}
	items, line := t.list("points", true)
	if r.err != nil {
		return
	}
	if len(items) == 0 {
		r.fail(line, "coefficients.points", "the table is empty")
		return
	}
	for i, it := range items {
		path := fmt.Sprintf("coefficients.points[%d]", i)
		p := r.asObject(it, path, lineOf(it), "quality", "tube_voltage_kv", "hvl_mm_al", "added_al_mm", "factor")
		pt := Point{Line: lineOf(it)}
		pt.BeamQuality.Name = p.text("quality", c.Along == AlongQuality)
		pt.BeamQuality.TubeVoltage, _ = p.number("tube_voltage_kv", false)
		pt.BeamQuality.HVL, _ = p.number("hvl_mm_al", false)
		pt.BeamQuality.AddedAl, _ = p.number("added_al_mm", false)
		f, ok := p.number("factor", true)
		if ok && !plausibleFactor(f) {
			r.fail(pt.Line, path+".factor", "must lie between %g and %g (a meter that reads true within a factor of two), got %g", MinFactor, MaxFactor, f)
		}
		pt.Factor = f
		if r.err != nil {
			return
		}
		switch c.Along {
		case AlongHVL:
			if pt.BeamQuality.HVL <= 0 {
				r.fail(pt.Line, path+".hvl_mm_al", "missing or not positive (the table is along hvl)")
			}
		case AlongTubeVoltage:
			if pt.BeamQuality.TubeVoltage <= 0 {
				r.fail(pt.Line, path+".tube_voltage_kv", "missing or not positive (the table is along tube_voltage)")
			}
		}
		c.Points = append(c.Points, pt)
	}
	if r.err != nil {
		return
	}
	sort.SliceStable(c.Points, func(i, j int) bool {
		return c.axisValue(c.Points[i].BeamQuality) < c.axisValue(c.Points[j].BeamQuality)
	})
	for i := 1; i < len(c.Points); i++ {
		a, b := c.Points[i-1], c.Points[i]
		if c.Along == AlongQuality {
			for _, e := range c.Points[:i] {
				if strings.EqualFold(e.BeamQuality.Name, b.BeamQuality.Name) {
					r.fail(b.Line, "coefficients.points", "quality %q appears twice (also line %d)", b.BeamQuality.Name, e.Line)
					return
				}
			}
			continue
		}
		if c.axisValue(a.BeamQuality) == c.axisValue(b.BeamQuality) {
			r.fail(b.Line, "coefficients.points", "two points at the same %s (also line %d)", c.Along, a.Line)
			return
		}
	}
}

// axisValue is q's coordinate along the table's axis.
func (c *Certificate) axisValue(q BeamQuality) float64 {
	switch c.Along {
	case AlongHVL:
		return q.HVL
	case AlongTubeVoltage:
		return q.TubeVoltage
	}
	return 0
}

// Ref identifies the certificate for a session record.
func (c *Certificate) Ref() string {
	return fmt.Sprintf("%s (%s %s, %s)", c.Number, c.Model, c.Serial, c.Laboratory)
}

// Validity is a certificate's standing on a day.
type Validity struct {
	Valid    bool   // in date on the day
	DueSoon  bool   // in date, but due within DueSoonDays
	DaysLeft int    // whole days from the day to the due date (negative when overdue)
	Text     string // a sentence to say and print
}

// DueSoonDays is how far ahead a coming due date is warned about.
const DueSoonDays = 30

// ValidOn tells whether the certificate is in date on day (the session's
// wall-clock time) and whether it falls due within [DueSoonDays]. A
// certificate is valid up to and including its due date, and not before
// its calibration date.
func (c *Certificate) ValidOn(day time.Time) Validity {
	d := dateOnly(day)
	due := dateOnly(c.Due)
	left := int(math.Round(due.Sub(d).Hours() / 24))
	v := Validity{DaysLeft: left}
	switch {
	case d.Before(dateOnly(c.Calibrated)):
		v.Text = fmt.Sprintf("certificate %s is dated %s, after today", c.Number, c.Calibrated.Format(time.DateOnly))
	case left < 0:
		v.Text = fmt.Sprintf("certificate %s for the %s expired on %s", c.Number, c.Model, c.Due.Format(time.DateOnly))
	default:
		v.Valid = true
		v.DueSoon = left <= DueSoonDays
		if v.DueSoon {
			v.Text = fmt.Sprintf("certificate %s for the %s is due on %s, in %d days", c.Number, c.Model, c.Due.Format(time.DateOnly), left)
		} else {
			v.Text = fmt.Sprintf("certificate %s for the %s is valid until %s", c.Number, c.Model, c.Due.Format("2 January 2006"))
		}
	}
	return v
}

func dateOnly(t time.Time) time.Time {
	y, m, d := t.Date()
	return time.Date(y, m, d, 0, 0, 0, 0, time.UTC)
}

// LoadDir reads every certificate file (*.yaml, *.yml) in dir, in name
// order. A file that does not parse is reported in the joined error and
// skipped; the others are still returned.
func LoadDir(dir string) ([]*Certificate, error) {
	entries, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("reading certificate directory: %w", err)
	}
	var out []*Certificate
	var errs []error
	for _, e := range entries {
		n := e.Name()
		if e.IsDir() || !(strings.HasSuffix(n, ".yaml") || strings.HasSuffix(n, ".yml")) {
			continue
		}
		c, err := LoadCertificate(filepath.Join(dir, n))
		if err != nil {
			errs = append(errs, err)
			continue
		}
		out = append(out, c)
	}
	return out, errors.Join(errs...)
}

// Pick returns the certificate of the meter with that serial number to use
// on day: the most recently calibrated one that is valid then; when none
// is valid, the most recent one (so its expiry can be reported); nil when
// there is none for the serial. Serials compare without case and spaces.
func Pick(certs []*Certificate, serial string, day time.Time) *Certificate {
	var best, latest *Certificate
	for _, c := range certs {
		if !sameSerial(c.Serial, serial) {
			continue
		}
		if latest == nil || c.Calibrated.After(latest.Calibrated) {
			latest = c
		}
		if c.ValidOn(day).Valid && (best == nil || c.Calibrated.After(best.Calibrated)) {
			best = c
		}
	}
	if best != nil {
		return best
	}
	return latest
}

func sameSerial(a, b string) bool {
	norm := func(s string) string { return strings.ToUpper(strings.Join(strings.Fields(s), "")) }
	return norm(a) != "" && norm(a) == norm(b)
}
