package report

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"kermalux/procedures/entry"
)

// ValueWithUnc writes v ± u with u rounded to two significant digits and v
// to the same decimal place (JCGM 100:2008 7.2.6: no more than two
// significant digits in an uncertainty).
func ValueWithUnc(v, u float64) string {
	if u <= 0 || math.IsNaN(u) || math.IsInf(u, 0) {
		return Number(v)
	}
	dec := decimalsFor(u)
	return strconv.FormatFloat(v, 'f', dec, 64) + " ± " + strconv.FormatFloat(u, 'f', dec, 64)
}

// decimalsFor is the number of decimals that shows u with two significant
// digits (never negative).
func decimalsFor(u float64) int {
	e := int(math.Floor(math.Log10(u)))
	d := 1 - e
	if d < 0 {
		d = 0
	}
	if d > 9 {
		d = 9
	}
	return d
}

// Number writes v with four significant digits, without exponent for
// everyday magnitudes.
func Number(v float64) string {
	if v == 0 {
		return "0"
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return fmt.Sprint(v)
	}
	a := math.Abs(v)
	if a >= 1e-4 && a < 1e7 {
		d := 3 - int(math.Floor(math.Log10(a)))
		if d < 0 {
			d = 0
		}
		s := strconv.FormatFloat(v, 'f', d, 64)
		if strings.Contains(s, ".") {
			s = strings.TrimRight(strings.TrimRight(s, "0"), ".")
		}
		return s
	}
	return strconv.FormatFloat(v, 'g', 4, 64)
}

// Factor writes a correction factor with five decimals (corrections are
// typically within a few percent of 1).
func Factor(f float64) string { return strconv.FormatFloat(f, 'f', 5, 64) }

// Percent writes a fraction as a percentage with one decimal.
func Percent(f float64) string { return strconv.FormatFloat(100*f, 'f', 1, 64) + " %" }

// BeamTime writes cumulative beam-on seconds as minutes and seconds.
func BeamTime(s float64) string {
	if s < 60 {
		return strconv.FormatFloat(s, 'f', 1, 64) + " s"
	}
	m := math.Floor(s / 60)
	return fmt.Sprintf("%.0f min %.1f s", m, s-60*m)
}

// Stamp writes a time with its zone offset; Clock writes only the time of
// day; Day only the date.
func Stamp(t time.Time) string {
	if t.IsZero() {
		return "—"
	}
	return t.Format("2006-01-02 15:04:05 -07:00")
}

// Clock writes the time of day.
func Clock(t time.Time) string {
	if t.IsZero() {
		return "—"
	}
	return t.Format("15:04:05")
}

// Day writes the date.
func Day(t time.Time) string {
	if t.IsZero() {
		return "—"
	}
	return t.Format("2006-01-02")
}

// short abbreviates a long hex string for display.
func short(s string) string {
	if len(s) <= 16 {
		return s
	}
	return s[:8] + "…" + s[len(s)-8:]
}

// correctionWords names a correction for people.
func correctionWords(name string) string {
	switch name {
	case "calibration_coefficient":
		return "Calibration coefficient"
	case "k_tp", "k_TP":
		return "Air density (k_TP)"
	case "dark":
		return "Dark subtraction"
	case "inverse_square":
		return "Inverse square to the input plane"
	case "backscatter":
		return "Backscatter"
	case "unit":
		return "Unit conversion"
	}
	return strings.ReplaceAll(name, "_", " ")
}

// correctionsText writes a reading's corrections on one line.
func correctionsText(cs []entry.Correction) string {
	var parts []string
	for _, c := range cs {
		p := c.Name
		if c.Factor != 1 {
			p += " ×" + Factor(c.Factor)
		}
		if c.Offset != 0 {
			p += fmt.Sprintf(" %+g", c.Offset)
		}
		parts = append(parts, p)
	}
	return strings.Join(parts, "; ")
}
