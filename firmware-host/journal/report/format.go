package report

import (
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"

	"kermalux/procedures/engine"
	"kermalux/procedures/entry"
)

// ValueWithUnc writes v ± u with u rounded to two significant digits and v
// to the same decimal place (JCGM 100:2008 7.2.6), in fixed notation;
// without an uncertainty, v alone with four significant digits.
func ValueWithUnc(v, u float64) string {
	val, unc := engine.RoundToUncertainty(v, u)
	if unc == "" {
		return val
	}
	return val + " ± " + unc
}

// Number writes a measured v with four significant digits in fixed
// notation, trailing zeros kept (they are significant).
func Number(v float64) string { return engine.FourDigits(v) }

// Exact writes a configured number (a limit, a fraction) as it was given:
// the shortest decimal that reads back the same, never with an exponent.
func Exact(v float64) string { return strconv.FormatFloat(v, 'f', -1, 64) }

// Signed is Number with a sign.
func Signed(v float64) string {
	s := Number(v)
	if v > 0 {
		s = "+" + s
	}
	return strings.Replace(s, "-", "−", 1)
}

// DoF writes degrees of freedom: whole numbers as such, Welch–Satterthwaite
// fractions with one decimal.
func DoF(v float64) string {
	if v == math.Trunc(v) {
		return strconv.FormatFloat(v, 'f', 0, 64)
	}
	return strconv.FormatFloat(v, 'f', 1, 64)
}

// Kf writes a coverage factor with two decimals.
func Kf(k float64) string { return engine.CoverageFactor(k) }

// unitWords writes a unit for people: a dimensionless ratio gets no unit
// symbol ("1" reads as a number), the caller says "ratio" where a column
// needs a word.
func unitWords(u string) string {
	if u == "1" {
		return ""
	}
	return u
}

// unitForQuantity is what the unit column says: the unit, or for a
// dimensionless figure what kind of number it is.
func unitForQuantity(q, u string) string {
	if u != "1" && u != "" {
		return u
	}
	switch q {
	case "non_uniformity", "stability":
		return "fraction"
	case "contrast_ratio":
		return "ratio (open : disk)"
	case "kerma_rate_scaling", "kerma_mode_scaling":
		return "ratio to the largest field"
	case "edge_centre_ratio":
		return "ratio to the centre"
	}
	return "ratio"
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

// abbrevHex abbreviates a long hex string for display.
func abbrevHex(s string) string {
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
			p += " " + Signed(c.Offset)
		}
		parts = append(parts, p)
	}
	return strings.Join(parts, "; ")
}
