package script

import (
	"fmt"
	"math"
	"sort"
	"strconv"
	"strings"
	"time"

	"kermalux/calib"
	"kermalux/drivers/units"
)

// beamQuality looks a radiation quality's name up in calib's table of
// IEC 61267 RQA qualities (calib.RQAQualities): the checker accepts
// exactly the qualities the corrections know, so a procedure can never
// name a quality whose half-value layer the certificate table cannot be
// read at.
func beamQuality(name string) (calib.BeamQuality, bool) { return calib.RQA(name) }

func qualityNames() string {
	var s []string
	for _, q := range calib.RQAQualities {
		s = append(s, q.Name)
	}
	return strings.Join(s, ", ")
}

// role is one input a figure of merit takes.
type role struct {
	name     string
	quantity units.Quantity // "" for any
	optional bool
	beam     int // 1 beam on, -1 beam off (dark), 0 either
}

// figureRoles lists each figure's inputs.
var figureRoles = map[Figure][]role{
	FigConversionFactor: {
		{"luminance", units.Luminance, false, 1},
		{"air_kerma_rate", units.AirKermaRate, false, 1},
		{"dark_luminance", units.Luminance, true, -1},
		{"dark_air_kerma_rate", units.AirKermaRate, true, -1},
	},
	FigNonUniformity:    {{"luminance", units.Luminance, false, 1}, {"dark", units.Luminance, true, -1}},
	FigContrastRatio:    {{"open", units.Luminance, false, 1}, {"disk", units.Luminance, false, 1}, {"dark", units.Luminance, true, -1}},
	FigInputKermaRate:   {{"air_kerma_rate", units.AirKermaRate, false, 1}},
	FigKermaRateScaling: {{"air_kerma_rate", units.AirKermaRate, false, 1}, {"reference", units.AirKermaRate, false, 1}},
	// A dark level or a stability takes one input: "reading" for a step
	// that reads one meter, or the quantity that names the meter among
	// several read together.
	FigStability: {{"reading", "", true, 0}, {"air_kerma_rate", units.AirKermaRate, true, 0}, {"luminance", units.Luminance, true, 0}},
	FigDarkLevel: {{"reading", "", true, -1}, {"air_kerma_rate", units.AirKermaRate, true, -1}, {"luminance", units.Luminance, true, -1}},
}

// legacyFigures are figure names earlier procedures used, read as the
// name of today: one name per quantity, the figure named as its result is.
var legacyFigures = map[Figure]Figure{"kerma_mode_scaling": FigKermaRateScaling}

// figureQuantity is the quantity a figure's value is (for the units of its
// limits); "" for the conversion factor, whose unit is a luminance per air
// kerma rate.
var figureQuantity = map[Figure]units.Quantity{
	FigConversionFactor: "",
	FigNonUniformity:    units.Ratio,
	FigContrastRatio:    units.Ratio,
	FigInputKermaRate:   units.AirKermaRate,
	FigKermaRateScaling: units.Ratio,
	FigStability:        units.Ratio, // relative change of the trend over the duration
	FigDarkLevel:        "",          // the unit of the reading
}

// ConversionFactorUnit is the canonical unit of a conversion factor.
const ConversionFactorUnit = "cd/m² per µGy/s"

func figureNames() string {
	var s []string
	for k := range figureRoles {
		s = append(s, string(k))
	}
	sort.Strings(s)
	return strings.Join(s, ", ")
}

// splitNumber splits "70 kV" into 70 and "kV"; the unit may be empty.
func splitNumber(t string) (float64, string, error) {
	t = strings.TrimSpace(t)
	end := 0
	for end < len(t) {
		c := t[end]
		if (c >= '0' && c <= '9') || c == '.' || ((c == '-' || c == '+') && (end == 0 || t[end-1] == 'e' || t[end-1] == 'E')) {
			end++
			continue
		}
		if (c == 'e' || c == 'E') && end > 0 && end+1 < len(t) && (t[end+1] == '-' || t[end+1] == '+' || (t[end+1] >= '0' && t[end+1] <= '9')) {
			end++
			continue
		}
		break
	}
	if end == 0 {
		return 0, "", fmt.Errorf("%q is not a number with a unit", t)
	}
	v, err := strconv.ParseFloat(t[:end], 64)
	if err != nil || math.IsInf(v, 0) || math.IsNaN(v) {
		return 0, "", fmt.Errorf("%q does not start with a number", t)
	}
	return v, strings.TrimSpace(t[end:]), nil
}

// formatNumber writes v briefly ("70", "0.9", "21").
func formatNumber(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// durationOf reads "120 s", "2 min".
func durationOf(t string) (time.Duration, error) {
	v, unit, err := splitNumber(t)
	if err != nil {
		return 0, err
	}
	if unit == "" {
		return 0, fmt.Errorf("%q has no unit (write a time such as %q)", t, "20 s")
	}
	s, err := units.ToCanonical(units.Time, v, unit)
	if err != nil {
		return 0, err
	}
	if s < 0 || s > 24*3600 {
		return 0, fmt.Errorf("%q is not a plausible time", t)
	}
	return time.Duration(math.Round(s * float64(time.Second))), nil
}

// fractionOf reads "2 %" or "0.02" as 0.02; it must lie in (0, 1].
func fractionOf(t string) (float64, error) {
	v, unit, err := splitNumber(t)
	if err != nil {
		return 0, err
	}
	f, err := units.ToCanonical(units.Ratio, v, unit)
	if err != nil {
		return 0, fmt.Errorf("%q is not a relative value (write it in %%, e.g. %q): %w", t, "2 %", err)
	}
	if f <= 0 || f > 1 {
		return 0, fmt.Errorf("%q is out of range (expected more than 0 %% and at most 100 %%)", t)
	}
	return f, nil
}

// radiusOf reads "0.9 r" (a fraction of the output radius).
func radiusOf(t string) (float64, error) {
	v, unit, err := splitNumber(t)
	if err != nil {
		return 0, err
	}
	if unit != "r" {
		return 0, fmt.Errorf("%q is not a fraction of the radius (write it as %q)", t, "0.9 r")
	}
	if v < 0 || v > 1 {
		return 0, fmt.Errorf("%q is outside the output window (0 r to 1 r)", t)
	}
	return v, nil
}

// angleOf reads "90 deg" or "90°".
func angleOf(t string) (float64, error) {
	v, unit, err := splitNumber(t)
	if err != nil {
		return 0, err
	}
	if unit != "deg" && unit != "°" {
		return 0, fmt.Errorf("%q is not an angle (write it as %q)", t, "90 deg")
	}
	if v < 0 || v >= 360 {
		return 0, fmt.Errorf("%q is out of range (0 deg to below 360 deg)", t)
	}
	return v, nil
}

// filterOf reads an added filter "21 mm Al": thickness in mm and material.
func filterOf(t string) (float64, string, error) {
	v, rest, err := splitNumber(t)
	if err != nil {
		return 0, "", err
	}
	f := strings.Fields(rest)
	if len(f) >= 1 {
		if _, err := units.ToCanonical(units.Length, v, f[0]); err != nil {
			return 0, "", fmt.Errorf("%q is not a filter thickness: %w", t, err)
		}
	}
	if len(f) != 2 {
		return 0, "", fmt.Errorf("%q: expected a thickness and a material, such as %q", t, "21 mm Al")
	}
	mm, err := units.ToCanonical(units.Length, v, f[0])
	if err != nil {
		return 0, "", fmt.Errorf("%q is not a filter thickness: %w", t, err)
	}
	switch f[1] {
	case "Al", "Cu", "Pb", "PMMA":
	default:
		return 0, "", fmt.Errorf("%q: unknown filter material %q (expected Al, Cu, Pb or PMMA)", t, f[1])
	}
	if mm < 0 || mm > 200 {
		return 0, "", fmt.Errorf("%q is not a plausible filter thickness", t)
	}
	return mm, f[1], nil
}

// directions are the spoken directions of photometer positions and their
// angles, anticlockwise from right as seen facing the output window.
var directions = map[string]float64{
	"right": 0, "up-right": 45, "up": 90, "up-left": 135,
	"left": 180, "down-left": 225, "down": 270, "down-right": 315,
}

// positionOf reads "centre" or "DIRECTION R r" ("up 0.9 r").
func positionOf(t string) (Position, error) {
	t = strings.TrimSpace(t)
	if t == "centre" || t == "center" {
		return Position{Label: "centre"}, nil
	}
	dir, rest, _ := strings.Cut(t, " ")
	a, ok := directions[dir]
	if !ok {
		return Position{}, fmt.Errorf("%q: expected centre or a direction (right, up-right, up, up-left, left, down-left, down, down-right) and a radius, such as %q", t, "up 0.9 r")
	}
	r, err := radiusOf(rest)
	if err != nil {
		return Position{}, err
	}
	if r == 0 {
		return Position{}, fmt.Errorf("%q: a position at 0 r is the centre; write centre", t)
	}
	return Position{Label: dir + " " + formatNumber(r) + " r", Radius: r, Angle: a}, nil
}

// parseRange reads "LOW to HIGH UNIT" or "LOW UNIT to HIGH UNIT".
func parseRange(t string) (lo, hi float64, unit string, err error) {
	a, b, ok := strings.Cut(t, " to ")
	if !ok {
		return 0, 0, "", fmt.Errorf("%q: expected a range such as %q", t, "10 to 40 °C")
	}
	lo, ua, err := splitNumber(a)
	if err != nil {
		return 0, 0, "", err
	}
	hi, ub, err := splitNumber(b)
	if err != nil {
		return 0, 0, "", err
	}
	if ua != "" && ub != "" && ua != ub {
		return 0, 0, "", fmt.Errorf("%q: both ends must be in the same unit", t)
	}
	if ub == "" {
		ub = ua
	}
	if lo > hi {
		return 0, 0, "", fmt.Errorf("%q: the low end is above the high end", t)
	}
	return lo, hi, ub, nil
}

// conversionFactorUnit converts "A per B" (a luminance unit per an air
// kerma rate unit) into the factor to cd/m² per µGy/s.
func conversionFactorUnit(u string) (float64, error) {
	if u == "" {
		return 1, nil
	}
	a, b, ok := strings.Cut(u, " per ")
	if !ok {
		return 0, fmt.Errorf("unit %q is not a unit of conversion factor (expected a luminance per air kerma rate, such as %q)", u, ConversionFactorUnit)
	}
	la, err := units.ToCanonical(units.Luminance, 1, strings.TrimSpace(a))
	if err != nil {
		return 0, err
	}
	kb, err := units.ToCanonical(units.AirKermaRate, 1, strings.TrimSpace(b))
	if err != nil {
		return 0, err
	}
	return la / kb, nil
}

// limitValue converts a numeric limit into the canonical unit of fig's
// value; baseline limits are fractions.
func limitValue(fig Figure, quantity units.Quantity, l JudgeLimit) (float64, string, error) {
	if l.Kind == BaselineMin || l.Kind == BaselineMax {
		v, err := units.ToCanonical(units.Ratio, l.Value, l.Unit)
		if err != nil {
			return 0, "", fmt.Errorf("%s is a fraction of the baseline (write it in %%, e.g. %q): %w", l.Kind, "90 %", err)
		}
		return v, "1", nil
	}
	switch {
	case fig == FigConversionFactor:
		f, err := conversionFactorUnit(l.Unit)
		if err != nil {
			return 0, "", err
		}
		return l.Value * f, ConversionFactorUnit, nil
	case quantity == "":
		return l.Value, l.Unit, nil
	}
	v, err := units.ToCanonical(quantity, l.Value, l.Unit)
	if err != nil {
		return 0, "", err
	}
	return v, units.Canonical(quantity), nil
}
