package engine

import (
	"fmt"
	"strconv"
	"strings"

	"kermalux/calib"
	"kermalux/procedures/entry"
)

// What the board says of a result. The texts are written for the eye with
// unit symbols ("0.455 µGy/s"); the speaking panels turn the symbols into
// words (speech.ForEar: "0.455 micrograys per second"). A figure is said
// in one scale throughout: a relative figure (non-uniformity, stability)
// in percent, its value and its limits alike.

// quantityNames are the spoken names of the figures.
var quantityNames = map[string]string{
	calib.QConversionFactor: "Conversion factor",
	calib.QNonUniformity:    "Luminance non-uniformity",
	calib.QContrastRatio:    "Contrast ratio",
	calib.QInputKermaRate:   "Input air kerma rate",
	calib.QKermaScaling:     "Kerma rate scaling",
	"dark_level":            "Dark level",
	"stability":             "Stability",
}

func spokenQuantity(q string) string {
	if n, ok := quantityNames[q]; ok {
		return n
	}
	s := strings.ReplaceAll(q, "_", " ")
	if s == "" {
		return s
	}
	return strings.ToUpper(s[:1]) + s[1:]
}

// inPercent: the figure is a relative one, said in percent.
func inPercent(q string) bool { return q == calib.QNonUniformity || q == "stability" }

// resultName is the result's spoken name with its meter (for a dark level
// or a stability) and its field mode: "Photometer dark level",
// "Conversion factor, 32cm field".
func resultName(r entry.Result, meter string) string {
	name := spokenQuantity(r.Quantity)
	if meter != "" {
		name = roleName(meter) + " " + strings.ToLower(name)
	}
	if r.FieldMode != "" {
		name += ", " + r.FieldMode + " field"
	}
	return name
}

// quantityWithUnit writes v, a value of r's figure, with its unit as the
// eye reads it: "0.455 µGy/s", "151 cd/m² per µGy/s", "8.3 %", "24.1 to 1".
// A limit set as a number is said as written ("25 %", "2 µGy/s"), a
// measured value to three significant figures.
func quantityWithUnit(r entry.Result, v float64, limit bool) string {
	num := fmtNum
	if limit {
		num = fmtLimit
	}
	switch {
	case inPercent(r.Quantity):
		return num(100*v) + " %"
	case r.Quantity == calib.QContrastRatio:
		return num(v) + " to 1"
	case r.Quantity == calib.QKermaScaling:
		return num(v) + " times the reference field's"
	case r.Unit == calib.UnitConversion:
		return num(v) + " cd/m² per µGy/s"
	case r.Unit == calib.UnitConversionLegacy:
		return num(v) + " cd/m² per mR/s"
	case r.Unit == "" || r.Unit == calib.UnitRatio:
		return num(v)
	}
	return num(v) + " " + r.Unit
}

// fmtLimit writes a limit without trailing zeros, to at most four
// significant figures (a fraction of the baseline times the baseline is a
// measured value and is said with fmtNum instead).
func fmtLimit(v float64) string {
	return strconv.FormatFloat(v, 'g', 4, 64)
}

// spokenResult: "Conversion factor, 32cm field: 152 cd/m² per µGy/s, last
// time 168, 90 % of baseline."
func spokenResult(r entry.Result, meter string) string {
	var b strings.Builder
	b.WriteString(resultName(r, meter) + ": " + quantityWithUnit(r, r.Value, false))
	if r.Baseline != 0 {
		fmt.Fprintf(&b, ", last time %s, %.0f %% of baseline", fmtNum(r.Baseline), 100*r.BaselineFrac)
	}
	if !r.Calibrated {
		b.WriteString(", not calibrated")
	}
	b.WriteString(".")
	return b.String()
}

// spokenVerdict: "Conversion factor, 32cm field: pass. Nearest limit: at
// least 80 % of the baseline, 134 cd/m² per µGy/s." or "Input air kerma
// rate, 17cm field: fail, above the action level maximum of 2 µGy/s."
func spokenVerdict(r entry.Result, meter string, v calib.Judgement) string {
	name := resultName(r, meter)
	switch v.Outcome {
	case calib.Pass:
		text := fmt.Sprintf("%s: pass. Nearest limit: %s.", name, limitWords(r, v, false))
		if v.Marginal {
			text += " Marginal: that limit lies within the uncertainty."
		}
		return text
	case calib.Fail:
		text := fmt.Sprintf("%s: fail, %s.", name, limitWords(r, v, true))
		if v.Marginal {
			text += " Marginal: that limit lies within the uncertainty."
		}
		return text
	}
	if v.Outcome == calib.NotMeasurable {
		return name + ": not measurable, " + v.DecidedBy + "."
	}
	if v.DecidedBy == "no limit set" {
		return name + ": no limit set, no verdict."
	}
	return name + ": no verdict, the result is not calibrated."
}

// limitWords says the limit that decided, with its value in the result's
// unit: "the specification minimum of 100 cd/m² per µGy/s", "at least
// 80 % of the baseline, 134 cd/m² per µGy/s"; failed, it says which side
// the value is on: "below the specification minimum of 100 ...".
func limitWords(r entry.Result, v calib.Judgement, failed bool) string {
	l := v.Decided
	at := quantityWithUnit(r, v.DecidedAt, l.Kind != calib.KindBaseline)
	if l.Kind == calib.KindBaseline {
		side := "at least"
		if l.Bound == calib.AtMost {
			side = "at most"
		}
		if failed {
			side = "below"
			if l.Bound == calib.AtMost {
				side = "above"
			}
		}
		return fmt.Sprintf("%s %.0f %% of the baseline, %s", side, 100*l.Value, at)
	}
	side := "minimum"
	if l.Bound == calib.AtMost {
		side = "maximum"
	}
	text := fmt.Sprintf("the %s %s of %s", l.Kind, side, at)
	if failed {
		if l.Bound == calib.AtMost {
			return "above " + text
		}
		return "below " + text
	}
	return text
}
