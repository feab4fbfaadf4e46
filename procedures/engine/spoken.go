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
	return nameOf(q)
}

// nameOf makes a name of a key: "tube_voltage" is "Tube voltage".
func nameOf(q string) string {
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
func (e *Engine) resultName(r entry.Result, meter string) string {
	name := e.text(spokenQuantity(r.Quantity))
	if meter != "" {
		name = e.text(roleName(meter) + " " + strings.ToLower(spokenQuantity(r.Quantity)))
	}
	if r.FieldMode != "" {
		name = e.t("%s, %s field", name, r.FieldMode)
	}
	return name
}

// quantityWithUnit writes v, a value of r's figure, with its unit as the
// eye reads it: "0.455 µGy/s", "151 cd/m² per µGy/s", "8.3 %", "24.1 to 1".
// A limit set as a number is said as written ("25 %", "2 µGy/s"), a
// measured value to three significant figures.
func (e *Engine) quantityWithUnit(r entry.Result, v float64, limit bool) string {
	num := e.num
	if limit {
		num = func(v float64) string { return e.decimal(fmtLimit(v)) }
	}
	switch {
	case inPercent(r.Quantity):
		return num(100*v) + " %"
	case r.Quantity == calib.QContrastRatio:
		return e.t("%s to 1", num(v))
	case r.Quantity == calib.QKermaScaling:
		return e.t("%s times the reference field's", num(v))
	case r.Unit == calib.UnitConversion:
		return e.t("%s cd/m² per µGy/s", num(v))
	case r.Unit == calib.UnitConversionLegacy:
		return e.t("%s cd/m² per mR/s", num(v))
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
func (e *Engine) spokenResult(r entry.Result, meter string) string {
	text := e.t("%s: %s", e.resultName(r, meter), e.quantityWithUnit(r, r.Value, false))
	if r.Baseline != 0 {
		text += e.t(", last time %s, %s %% of baseline", e.num(r.Baseline), fmt.Sprintf("%.0f", 100*r.BaselineFrac))
	}
	if !r.Calibrated {
		text += e.t(", not calibrated")
	}
	return text + "."
}

// spokenVerdict: "Conversion factor, 32cm field: pass. Nearest limit: at
// least 80 % of the baseline, 134 cd/m² per µGy/s." or "Input air kerma
// rate, 17cm field: fail, above the action level maximum of 2 µGy/s."
func (e *Engine) spokenVerdict(r entry.Result, meter string, v calib.Judgement) string {
	name := e.resultName(r, meter)
	switch v.Outcome {
	case calib.Pass:
		text := e.t("%s: pass. Nearest limit: %s.", name, e.limitWords(r, v, false))
		if v.Marginal {
			text += " " + e.t("Marginal: that limit lies within the uncertainty.")
		}
		return text
	case calib.Fail:
		text := e.t("%s: fail, %s.", name, e.limitWords(r, v, true))
		if v.Marginal {
			text += " " + e.t("Marginal: that limit lies within the uncertainty.")
		}
		return text
	}
	if v.Outcome == calib.NotMeasurable {
		return e.t("%s: not measurable, %s.", name, e.text(v.DecidedBy))
	}
	if v.DecidedBy == "no limit set" {
		return e.t("%s: no limit set, no verdict.", name)
	}
	return e.t("%s: no verdict, the result is not calibrated.", name)
}

// limitWords says the limit that decided, with its value in the result's
// unit: "the specification minimum of 100 cd/m² per µGy/s", "at least
// 80 % of the baseline, 134 cd/m² per µGy/s"; failed, it says which side
// the value is on: "below the specification minimum of 100 ...".
func (e *Engine) limitWords(r entry.Result, v calib.Judgement, failed bool) string {
	l := v.Decided
	at := e.quantityWithUnit(r, v.DecidedAt, l.Kind != calib.KindBaseline)
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
		pct := fmt.Sprintf("%.0f", 100*l.Value)
		return e.t(side+" %s %% of the baseline, %s", pct, at)
	}
	side := "minimum"
	if l.Bound == calib.AtMost {
		side = "maximum"
	}
	// One format a kind, side and outcome, so that each language words
	// them as a whole ("the specification minimum of %s").
	format := fmt.Sprintf("the %s %s of %%s", l.Kind, side)
	if failed {
		format = "below " + format
		if l.Bound == calib.AtMost {
			format = "above " + fmt.Sprintf("the %s %s of %%s", l.Kind, side)
		}
	}
	return e.t(format, at)
}
