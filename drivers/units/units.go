// Package units converts the units that meters actually print into the
// canonical SI-based units kermalux works in, once, at the edge:
//
//	air kerma rate  µGy/s
//	air kerma       µGy
//	luminance       cd/m²
//	temperature     °C
//	pressure        kPa
//	length          mm
//
// An unknown unit is an error, never a guess.
//
// Exposure units (R, mR/s, R/min, ...) are converted to air kerma with
//
//	K = X · (W/e) / (1 − g)
//
// where 1 R = 2.58 × 10⁻⁴ C/kg exactly (NIST SP 811, Appendix B.9), W/e =
// 33.97 J/C for dry air (ICRU Report 90 keeps 33.97 J/C) and the radiative
// fraction g is taken as 0 at diagnostic energies, so that 1 R ↔ 8.764 mGy.
// The constant is named [GyPerRoentgen] so reports can state which one was used.
package units

import (
	"fmt"
	"math"
	"strings"
)

// Quantity names a kind of physical quantity kermalux handles.
type Quantity string

// The quantities kermalux measures or is told.
const (
	AirKermaRate Quantity = "air_kerma_rate"
	AirKerma     Quantity = "air_kerma"
	Luminance    Quantity = "luminance"
	Temperature  Quantity = "temperature"
	Pressure     Quantity = "pressure"
	Length       Quantity = "length"
	Voltage      Quantity = "tube_voltage" // kV
	Current      Quantity = "tube_current" // mA
	Ratio        Quantity = "ratio"        // dimensionless
	Time         Quantity = "time"         // s
)

// Conversion constants, each with its source.
const (
	// CoulombPerKgPerRoentgen is the definition of the roentgen
	// (NIST SP 811, Appendix B.9: 1 R = 2.58 × 10⁻⁴ C/kg exactly).
	CoulombPerKgPerRoentgen = 2.58e-4
	// WOverE is the mean energy expended in dry air per ion pair formed,
	// per unit charge, in J/C (ICRU Report 31 / 37 / 90: 33.97 J/C).
	WOverE = 33.97
	// GyPerRoentgen is the air kerma that corresponds to 1 R of exposure
	// with the radiative fraction g = 0 (diagnostic energies): 8.764 mGy.
	GyPerRoentgen = CoulombPerKgPerRoentgen * WOverE
	// CandelaPerM2PerFootlambert: 1 fL = (1/π) cd/ft² (NIST SP 811,
	// Appendix B.9: 3.426 259 cd/m²).
	CandelaPerM2PerFootlambert = 1 / math.Pi / (0.3048 * 0.3048)
	// KPaPerMmHg: 1 mmHg = 133.3224 Pa (NIST SP 811, Appendix B.9).
	KPaPerMmHg = 0.1333224
	// KPaPerInHg: 1 inHg (32 °F) = 3.386 38 kPa (NIST SP 811, Appendix B.9).
	KPaPerInHg = 3.38638
)

// Canonical returns the unit every value of q is converted into.
func Canonical(q Quantity) string {
	switch q {
	case AirKermaRate:
		return "µGy/s"
	case AirKerma:
		return "µGy"
	case Luminance:
		return "cd/m²"
	case Temperature:
		return "°C"
	case Pressure:
		return "kPa"
	case Length:
		return "mm"
	case Voltage:
		return "kV"
	case Current:
		return "mA"
	case Time:
		return "s"
	case Ratio:
		return "1"
	}
	return ""
}

// Valid reports whether q is one of the known quantities.
func (q Quantity) Valid() bool { return Canonical(q) != "" }

// linear is a unit that converts by a factor (and, for temperatures, an
// offset applied after the factor): canonical = value·factor + offset.
type linear struct {
	q      Quantity
	factor float64
	offset float64
}

// Per-second and per-minute helpers for rate units.
const (
	perMin  = 1.0 / 60
	perHour = 1.0 / 3600
)

var table = map[string]linear{}

func add(q Quantity, factor, offset float64, names ...string) {
	for _, n := range names {
		table[fold(n)] = linear{q, factor, offset}
	}
}

func init() {
	const uGyPerR = GyPerRoentgen * 1e6
	// Air kerma rate.
	add(AirKermaRate, 1, 0, "µGy/s", "uGy/s", "μGy/s", "microGy/s")
	add(AirKermaRate, 1e-3, 0, "nGy/s")
	add(AirKermaRate, 1e3, 0, "mGy/s")
	add(AirKermaRate, 1e6, 0, "Gy/s")
	add(AirKermaRate, perMin, 0, "µGy/min", "uGy/min", "μGy/min")
	add(AirKermaRate, 1e3*perMin, 0, "mGy/min")
	add(AirKermaRate, 1e6*perMin, 0, "Gy/min")
	add(AirKermaRate, perHour, 0, "µGy/h", "uGy/h", "μGy/h")
	add(AirKermaRate, 1e3*perHour, 0, "mGy/h")
	add(AirKermaRate, 1e-3*perMin, 0, "nGy/min")
	// Exposure rate, legacy.
	add(AirKermaRate, uGyPerR, 0, "R/s")
	add(AirKermaRate, uGyPerR*1e-3, 0, "mR/s")
	add(AirKermaRate, uGyPerR*1e-6, 0, "µR/s", "uR/s", "μR/s")
	add(AirKermaRate, uGyPerR*perMin, 0, "R/min")
	add(AirKermaRate, uGyPerR*1e-3*perMin, 0, "mR/min")
	add(AirKermaRate, uGyPerR*perHour, 0, "R/h", "R/hr")
	add(AirKermaRate, uGyPerR*1e-3*perHour, 0, "mR/h", "mR/hr")
	// Air kerma.
	add(AirKerma, 1, 0, "µGy", "uGy", "μGy")
	add(AirKerma, 1e-3, 0, "nGy")
	add(AirKerma, 1e3, 0, "mGy")
	add(AirKerma, 1e6, 0, "Gy")
	add(AirKerma, uGyPerR, 0, "R")
	add(AirKerma, uGyPerR*1e-3, 0, "mR")
	add(AirKerma, uGyPerR*1e-6, 0, "µR", "uR", "μR")
	// Luminance.
	add(Luminance, 1, 0, "cd/m²", "cd/m2", "cd/m^2", "cd m-2", "cd·m⁻²", "cdm-2", "nit", "nits", "nt")
	add(Luminance, 1e-3, 0, "mcd/m²", "mcd/m2")
	add(Luminance, 1e3, 0, "kcd/m²", "kcd/m2")
	add(Luminance, CandelaPerM2PerFootlambert, 0, "fL", "ftL", "ft-L", "footlambert", "foot-lambert")
	add(Luminance, 1e4, 0, "sb", "stilb", "cd/cm2", "cd/cm²")
	// Temperature: canonical °C.
	add(Temperature, 1, 0, "°C", "degC", "C", "celsius", "ºC")
	add(Temperature, 1, -273.15, "K", "kelvin")
	add(Temperature, 5.0/9, -32*5.0/9, "°F", "degF", "F", "ºF")
	// Pressure: canonical kPa.
	add(Pressure, 1, 0, "kPa")
	add(Pressure, 1e-3, 0, "Pa")
	add(Pressure, 0.1, 0, "hPa", "mbar")
	add(Pressure, 100, 0, "bar")
	add(Pressure, KPaPerMmHg, 0, "mmHg", "Torr", "torr")
	add(Pressure, KPaPerInHg, 0, "inHg")
	add(Pressure, 101.325, 0, "atm")
	// Length: canonical mm.
	add(Length, 1, 0, "mm")
	add(Length, 10, 0, "cm")
	add(Length, 1000, 0, "m")
	add(Length, 25.4, 0, "in", "inch")
	// Tube settings and others.
	add(Voltage, 1, 0, "kV", "kVp")
	add(Current, 1, 0, "mA")
	add(Time, 1, 0, "s", "sec")
	add(Time, 60, 0, "min")
	add(Ratio, 1, 0, "1", "", "ratio")
	add(Ratio, 0.01, 0, "%")
}

// fold makes unit spellings comparable: trims spaces and maps the micro
// sign variants to one form. Case matters (mR vs MR, mGy vs MGy) and is kept.
func fold(s string) string {
	s = strings.TrimSpace(s)
	s = strings.ReplaceAll(s, "μ", "µ") // Greek mu to micro sign
	return s
}

// UnknownUnitError is returned for a unit kermalux does not know for the
// quantity asked.
type UnknownUnitError struct {
	Unit     string
	Quantity Quantity // empty when any quantity was acceptable
}

func (e *UnknownUnitError) Error() string {
	if e.Quantity == "" {
		return fmt.Sprintf("unknown unit %q", e.Unit)
	}
	return fmt.Sprintf("unit %q is not a unit of %s (expected one convertible to %s)", e.Unit, e.Quantity, Canonical(e.Quantity))
}

// QuantityOf returns the quantity a unit measures.
func QuantityOf(unit string) (Quantity, error) {
	l, ok := table[fold(unit)]
	if !ok {
		return "", &UnknownUnitError{Unit: unit}
	}
	return l.q, nil
}

// ToCanonical converts value in unit into the canonical unit of q. It fails
// when unit is unknown or measures a different quantity.
func ToCanonical(q Quantity, value float64, unit string) (float64, error) {
	l, ok := table[fold(unit)]
	if !ok || l.q != q {
		return 0, &UnknownUnitError{Unit: unit, Quantity: q}
	}
	return value*l.factor + l.offset, nil
}

// FromCanonical converts a canonical value of q into unit (for showing
// results in a legacy unit, such as cd/m² per mR/s).
func FromCanonical(q Quantity, value float64, unit string) (float64, error) {
	l, ok := table[fold(unit)]
	if !ok || l.q != q {
		return 0, &UnknownUnitError{Unit: unit, Quantity: q}
	}
	return (value - l.offset) / l.factor, nil
}

// Factor returns the multiplicative factor from unit to the canonical unit
// of q; it fails for units with an offset (temperatures other than °C).
func Factor(q Quantity, unit string) (float64, error) {
	l, ok := table[fold(unit)]
	if !ok || l.q != q {
		return 0, &UnknownUnitError{Unit: unit, Quantity: q}
	}
	if l.offset != 0 {
		return 0, fmt.Errorf("unit %q of %s has an offset, not a factor", unit, q)
	}
	return l.factor, nil
}
