package calib

import (
	"fmt"
	"math"
	"strings"
	"time"

	"gonum.org/v1/gonum/interp"

	"kermalux/drivers"
	"kermalux/drivers/units"
)

// Correction is one correction applied to a reading, in the order applied:
// value_after = value_before × Factor + Offset. It carries the same fields
// as the journal's correction record.
type Correction struct {
	Name   string  // "dark", "calibration_coefficient", "k_tp", "backscatter", "inverse_square"
	Factor float64 // multiplicative factor (1 if none)
	Offset float64 // additive term after the factor (0 if none)
	Note   string  // what it was computed from
}

// Names of corrections, as recorded in [Correction].
const (
	CorrDark          = "dark"
	CorrCoefficient   = "calibration_coefficient"
	CorrKTP           = "k_tp"
	CorrBackscatter   = "backscatter"
	CorrInverseSquare = "inverse_square"
	// CorrGeometry records the set-up (grid, chamber position) with factor
	// 1 when neither geometric correction was needed, so every dosimeter
	// reading says whether the grid was in place.
	CorrGeometry = "geometry"
)

// FlagCode says why a reading or result is not calibrated, or what else is
// worth noting about it.
type FlagCode string

// Flag codes.
const (
	FlagNoCertificate  FlagCode = "no_certificate"          // no certificate for the meter
	FlagExpired        FlagCode = "certificate_expired"     // certificate out of date on the day
	FlagWrongQuantity  FlagCode = "certificate_quantity"    // certificate is for another quantity
	FlagOutsideQuality FlagCode = "quality_outside_table"   // beam quality outside the certificate's table
	FlagNoQuality      FlagCode = "quality_unknown"         // beam quality not given but the table needs it
	FlagNoAirDensity   FlagCode = "air_density_missing"     // T or P missing or implausible for a vented chamber
	FlagGeometry       FlagCode = "geometry_invalid"        // distances missing or impossible
	FlagNoBackscatter  FlagCode = "backscatter_unknown"     // chamber on the face but no backscatter factor
	FlagDueSoon        FlagCode = "certificate_due_soon"    // informational: does not uncalibrate
	FlagFewSamples     FlagCode = "too_few_samples"         // fewer than two samples: no type A estimate
	FlagDiskSize       FlagCode = "disk_size"               // informational: lead disk not 10 % of the field
	FlagInput          FlagCode = "input_invalid"           // an input of a figure of merit is missing or not positive
	FlagOtherMeter     FlagCode = "certificate_other_meter" // the meter identified as another model or serial than the certificate names
	FlagNotIdentified  FlagCode = "meter_not_identified"    // the meter did not identify itself: its certificate cannot be confirmed
	FlagUnderRange     FlagCode = "under_range"             // the value lies below the meter's range floor: only an upper bound is known
	FlagDarkModel      FlagCode = "dark_model"              // informational: a position's dark was modelled from the centre's
)

// Flag is a code and a sentence to say and print.
type Flag struct {
	Code FlagCode
	Text string
}

// informational flags do not stop a reading being calibrated.
func (f Flag) informational() bool {
	return f.Code == FlagDueSoon || f.Code == FlagDiskSize || f.Code == FlagDarkModel
}

// certificateFlag reports flags about a meter's calibration, which a ratio
// read with that one meter does not depend on.
func (f Flag) certificateFlag() bool {
	switch f.Code {
	case FlagNoCertificate, FlagExpired, FlagWrongQuantity, FlagOutsideQuality, FlagNoQuality, FlagDueSoon, FlagOtherMeter, FlagNotIdentified:
		return true
	}
	return false
}

// FlagCodes returns the flags' codes, for the journal.
func FlagCodes(flags []Flag) []string {
	var out []string
	for _, f := range flags {
		out = append(out, string(f.Code))
	}
	return out
}

// FlagTexts returns the flags' sentences, for the journal.
func FlagTexts(flags []Flag) []string {
	if len(flags) == 0 {
		return nil
	}
	out := make([]string, len(flags))
	for i, f := range flags {
		out[i] = f.Text
	}
	return out
}

// Air is the room's air temperature (°C) and pressure (kPa) near the
// chamber. Zero or NaN means "not entered".
type Air struct {
	Temperature float64
	Pressure    float64
	// Standard uncertainties of the thermometer and barometer readings
	// (°C, kPa); 0 = not stated, no budget row.
	TemperatureUnc float64
	PressureUnc    float64
}

// Plausible ranges of room air for k_TP; a value outside is treated as not
// entered (common practice: rooms are kept between about 15 and 35 °C;
// 60 kPa is the pressure near 4000 m altitude, 110 kPa above any weather
// at sea level).
const (
	MinTemperature, MaxTemperature = 5.0, 45.0
	MinPressure, MaxPressure       = 60.0, 110.0
)

// Geometry is where the chamber sits relative to the intensifier input.
// Distances are from the focal spot, in mm.
type Geometry struct {
	SourceToChamber float64 // focal spot to the chamber's reference point; 0: chamber at the input plane
	SourceToInput   float64 // focal spot to the intensifier input plane; 0: same as the chamber
	OnFace          bool    // chamber against the input face: its reading includes backscatter
	Backscatter     float64 // backscatter factor B entered for this set-up; 0: use the certificate's
	GridRemoved     bool    // anti-scatter grid removed (recorded, IEC 61262-2 measures without it)
	// DistanceUnc is the standard uncertainty of each distance, mm; 0 = not
	// stated, no budget row.
	DistanceUnc float64
}

// Setup is everything a reading's corrections depend on besides its value.
type Setup struct {
	Cert        *Certificate // nil: no certificate for this meter
	Day         time.Time    // the session's wall-clock time, for certificate validity
	BeamQuality BeamQuality  // beam quality (dosimeter)
	Air         Air          // room air (vented chambers)
	Geometry    Geometry     // dosimeter position
	// Meter is what the meter reported when asked who it is
	// (drivers.Identifier), nil when it was not identified. A certificate
	// applies only to the meter whose model and serial it names
	// ([Certificate.AppliesTo]); otherwise none of it is applied and the
	// reading is not calibrated.
	Meter *drivers.Identity
	// Dark is the meter's beam-off level in its own scale (photometer);
	// nil when there is none.
	Dark *Dark
}

// Dark is a meter's beam-off level (stray light, afterglow, meter
// offset) in the meter's own scale: the mean of its readings as the meter
// gave them, canonical unit, before any correction. It is subtracted
// before the coefficient is applied, L = N·(M − M_dark), so the
// coefficient acts once on the beam's light; a dark that had already been
// multiplied by N would leave N·(M − N·M_dark).
type Dark struct {
	Value  float64 // mean beam-off reading, uncorrected
	StdUnc float64 // standard uncertainty of Value, same scale ([DarkUncertainty])
	DoF    float64 // degrees of freedom of StdUnc; 0 = infinite
	Note   string  // where it comes from ("beam-off reading at this position")
}

// DarkUncertainty is the standard uncertainty of a dark level read as the
// mean of s.N readings with experimental standard deviation s.SD on a
// display of resolution δ (0: not known): the type A part s/√n (JCGM
// 100:2008 4.2.3) and the display's rectangular part δ/√12 (F.2.2.1),
// combined in quadrature (5.1.2), with the Welch–Satterthwaite degrees of
// freedom (G.2b; 0 = infinite). The resolution part does not shrink with
// n: a display that shows 0.03 cannot tell 0.0300 from 0.0349, however
// often it is read, so a dark from a 0.01-resolution meter is never known
// better than ±0.0029 (one standard uncertainty).
func DarkUncertainty(s Summary, resolution float64) (u, dof float64) {
	var uA float64
	nuA := math.Inf(1)
	if s.N >= 2 {
		uA = s.SD / math.Sqrt(float64(s.N))
		nuA = float64(s.N - 1)
	}
	uR := 0.0
	if resolution > 0 {
		uR = ResolutionComponent(resolution).Abs
	}
	u = math.Hypot(uA, uR)
	return u, dofOut(WelchSatterthwaite([]float64{uA, uR}, []float64{nuA, math.Inf(1)}))
}

// Corrected is a reading after corrections.
type Corrected struct {
	Value       float64 // corrected, canonical unit
	Raw         float64 // the value as it arrived (canonical)
	Corrections []Correction
	Calibrated  bool   // every correction could be applied with an in-date certificate
	Flags       []Flag // why not calibrated (and notes)
	Certificate string // certificate number used, if any
	// TypeB are the type B uncertainty components of the corrected value:
	// the certificate's (coefficient, resolution scaled by the corrections'
	// factors) and those of the corrections (air density, distances).
	TypeB []Component
}

// RelStdUncB is the relative standard uncertainty of the type B
// components together (root sum of squares), for a stopping rule.
func (c Corrected) RelStdUncB() float64 {
	var s float64
	for _, b := range c.TypeB {
		r := b.Rel
		if b.Abs != 0 && c.Value != 0 {
			r += b.Abs / math.Abs(c.Value)
		}
		s += r * r
	}
	return math.Sqrt(s)
}

// OutsideTableError says a beam quality lies outside a certificate's table.
type OutsideTableError struct {
	Cert        string
	Axis        Axis
	Value       float64
	Lo, Hi      float64
	BeamQuality string
}

func (e *OutsideTableError) Error() string {
	if e.Axis == AlongQuality {
		return fmt.Sprintf("beam quality %q is not in certificate %s", e.BeamQuality, e.Cert)
	}
	return fmt.Sprintf("beam quality outside certificate %s: %s %g lies outside %g to %g", e.Cert, axisWords(e.Axis), e.Value, e.Lo, e.Hi)
}

func axisWords(a Axis) string {
	if a == AlongHVL {
		return "half-value layer (mm Al)"
	}
	return "tube voltage (kV)"
}

// relTol is how close to a table end a quality may be and still count as
// inside (rounding of the stated HVL or kV).
const relTol = 1e-9

// CoefficientAt returns the calibration coefficient at beam quality q,
// interpolated linearly along the table's axis (gonum interp.PiecewiseLinear).
// It refuses to extrapolate: a quality outside the table's range is an
// *OutsideTableError. A quality named after an IEC 61267 RQA quality has
// its HVL and tube voltage filled from [RQAQualities] when not stated.
func (c *Certificate) CoefficientAt(q BeamQuality) (float64, error) {
	if len(c.Points) == 0 {
		return c.Coefficient, nil
	}
	q = q.filled()
	if c.voltageFallback(q) {
		byKV := *c
		byKV.Along = AlongTubeVoltage
		return byKV.CoefficientAt(q)
	}
	if c.Along == AlongQuality {
		if strings.TrimSpace(q.Name) == "" {
			return 0, fmt.Errorf("certificate %s is tabulated by beam quality name, but no quality was given", c.Number)
		}
		for _, p := range c.Points {
			if strings.EqualFold(p.BeamQuality.Name, q.Name) {
				return p.Factor, nil
			}
		}
		return 0, &OutsideTableError{Cert: c.Number, Axis: AlongQuality, BeamQuality: q.Name}
	}
	x := c.axisValue(q)
	lo, hi := c.axisValue(c.Points[0].BeamQuality), c.axisValue(c.Points[len(c.Points)-1].BeamQuality)
	if x <= 0 || math.IsNaN(x) {
		return 0, fmt.Errorf("certificate %s is tabulated along %s, but the beam quality gives none", c.Number, axisWords(c.Along))
	}
	tol := relTol * hi
	if x < lo-tol || x > hi+tol {
		return 0, &OutsideTableError{Cert: c.Number, Axis: c.Along, Value: x, Lo: lo, Hi: hi, BeamQuality: q.Name}
	}
	if len(c.Points) == 1 {
		return c.Points[0].Factor, nil
	}
	xs := make([]float64, len(c.Points))
	ys := make([]float64, len(c.Points))
	for i, p := range c.Points {
		xs[i], ys[i] = c.axisValue(p.BeamQuality), p.Factor
	}
	var pl interp.PiecewiseLinear
	if err := pl.Fit(xs, ys); err != nil {
		return 0, fmt.Errorf("certificate %s: coefficient table: %w", c.Number, err)
	}
	return pl.Predict(math.Min(math.Max(x, lo), hi)), nil
}

// voltageFallback reports whether a table along half-value layer must be
// read along tube voltage instead: the beam's HVL was not measured (a beam
// hardened by a phantom, whose quality is no RQA quality) but its tube
// voltage is known, and every row of the certificate states its tube
// voltage. The coefficient then carries the chamber's energy dependence
// only approximately, which the correction's note says (common practice:
// the nearest calibrated quality by kV is used when the HVL is unknown).
func (c *Certificate) voltageFallback(q BeamQuality) bool {
	if c.Along != AlongHVL || q.HVL > 0 || q.TubeVoltage <= 0 || len(c.Points) == 0 {
		return false
	}
	for _, p := range c.Points {
		if p.BeamQuality.TubeVoltage <= 0 {
			return false
		}
	}
	return true
}

// KTP is the air-density correction for a vented ionisation chamber
// (IAEA TRS-398 eq. (9); TRS-457; AAPM TG-61):
//
//	k_TP = ((273.15 + T) / (273.15 + T0)) · (P0 / P)
//
// with T, T0 in °C and P, P0 in kPa; T0 and P0 are the certificate's
// reference conditions (T0 = 20 °C in TRS-398, 22 °C in TG-61).
func KTP(t, p, t0, p0 float64) float64 {
	return (273.15 + t) / (273.15 + t0) * (p0 / p)
}

// InverseSquare is the factor that carries an air kerma (rate) measured at
// distance dFrom from the focal spot to distance dTo (inverse-square law,
// point source, no attenuation between):
//
//	K(dTo) = K(dFrom) · (dFrom / dTo)²
func InverseSquare(dFrom, dTo float64) float64 {
	r := dFrom / dTo
	return r * r
}

// BackscatterFactor is the factor that removes backscatter from a reading
// taken with the chamber against the input face: K_free = K_measured / B.
func BackscatterFactor(b float64) float64 { return 1 / b }

func usableAir(t, lo, hi float64) bool { return t >= lo && t <= hi && !math.IsNaN(t) }

// Correct applies the corrections a reading of quantity q needs, in the
// order given in the package documentation, and records each. It never
// fails: what it cannot do is flagged and the reading is then not
// calibrated; the value carries whatever corrections could be applied.
func Correct(value float64, q units.Quantity, s Setup) Corrected {
	out := Corrected{Value: value, Raw: value, Calibrated: true}
	flag := func(code FlagCode, format string, args ...any) {
		f := Flag{Code: code, Text: fmt.Sprintf(format, args...)}
		out.Flags = append(out.Flags, f)
		if !f.informational() {
			out.Calibrated = false
		}
	}
	apply := func(a Correction) {
		out.Value = out.Value*a.Factor + a.Offset
		out.Corrections = append(out.Corrections, a)
	}
	c := s.Cert
	dark := q == units.Luminance && s.Dark != nil
	if dark {
		note := fmt.Sprintf("beam-off reading %.4g cd/m² (±%.2g) subtracted before the coefficient", s.Dark.Value, s.Dark.StdUnc)
		if s.Dark.Note != "" {
			note += "; " + s.Dark.Note
		}
		apply(Correction{Name: CorrDark, Factor: 1, Offset: -s.Dark.Value, Note: note})
	}
	refused := false
	if c != nil {
		var why error
		code := FlagOtherMeter
		if s.Meter == nil {
			why, code = fmt.Errorf("the meter was not identified, so certificate %s cannot be confirmed as its own", c.Number), FlagNotIdentified
		} else {
			why = c.AppliesTo(*s.Meter)
		}
		if why != nil {
			flag(code, "%v: reading not calibrated", why)
			c, refused = nil, true
		}
	}
	switch {
	case refused:
		// a certificate for another meter: already flagged
	case c == nil:
		flag(FlagNoCertificate, "no calibration certificate for this meter: reading not calibrated")
	case c.Quantity != q && !(c.ForDosimeter() && (q == units.AirKerma || q == units.AirKermaRate)):
		out.Certificate = c.Number
		flag(FlagWrongQuantity, "certificate %s is for %s, not %s: reading not calibrated", c.Number, words(string(c.Quantity)), words(string(q)))
	default:
		out.Certificate = c.Number
		if v := c.ValidOn(s.Day); !v.Valid {
			flag(FlagExpired, "%s: reading not calibrated", v.Text)
		} else if v.DueSoon {
			flag(FlagDueSoon, "%s", v.Text)
		}
		n, err := c.CoefficientAt(s.BeamQuality)
		switch {
		case err == nil:
			note := fmt.Sprintf("certificate %s", c.Number)
			switch {
			case len(c.Points) > 1 && c.Along == AlongQuality:
				note = fmt.Sprintf("certificate %s, row %s", c.Number, s.BeamQuality.Name)
			case len(c.Points) > 1 && c.voltageFallback(s.BeamQuality.filled()):
				note = fmt.Sprintf("certificate %s, interpolated at tube voltage %g kV (half-value layer not measured: energy dependence approximate)", c.Number, s.BeamQuality.filled().TubeVoltage)
			case len(c.Points) > 1:
				fq := s.BeamQuality.filled()
				note = fmt.Sprintf("certificate %s, interpolated at %s %g", c.Number, axisWords(c.Along), c.axisValue(fq))
			}
			apply(Correction{Name: CorrCoefficient, Factor: n, Note: note})
			out.TypeB = append(out.TypeB, Component{Source: "calibration coefficient, certificate " + c.Number, Rel: c.RelStdUnc(), Calibration: true})
		case isOutside(err):
			flag(FlagOutsideQuality, "%v: reading not calibrated", err)
		default:
			flag(FlagNoQuality, "%v: reading not calibrated", err)
		}
	}
	if q != units.AirKermaRate && q != units.AirKerma {
		out.addResolution(c)
		if dark {
			out.addDark(*s.Dark)
		}
		return out
	}
	if c != nil && c.ForDosimeter() && c.Vented {
		a := s.Air
		okT := usableAir(a.Temperature, MinTemperature, MaxTemperature)
		okP := usableAir(a.Pressure, MinPressure, MaxPressure)
		switch {
		case !okT && !okP:
			flag(FlagNoAirDensity, "room temperature and pressure missing for the vented chamber: no air-density correction, reading not calibrated")
		case !okT:
			flag(FlagNoAirDensity, "room temperature missing or implausible (%g °C) for the vented chamber: reading not calibrated", a.Temperature)
		case !okP:
			flag(FlagNoAirDensity, "air pressure missing or implausible (%g kPa) for the vented chamber: reading not calibrated", a.Pressure)
		default:
			k := KTP(a.Temperature, a.Pressure, c.RefTemperature, c.RefPressure)
			apply(Correction{Name: CorrKTP, Factor: k, Note: fmt.Sprintf("T %.1f °C, P %.2f kPa; reference %.1f °C, %.3f kPa", a.Temperature, a.Pressure, c.RefTemperature, c.RefPressure)})
			// Relative sensitivities of k_TP (GUM 5.1.3): 1/(273.15+T) per °C, −1/P per kPa.
			if a.TemperatureUnc > 0 {
				out.TypeB = append(out.TypeB, Component{Source: "room temperature (k_TP)", Rel: a.TemperatureUnc / (273.15 + a.Temperature)})
			}
			if a.PressureUnc > 0 {
				out.TypeB = append(out.TypeB, Component{Source: "air pressure (k_TP)", Rel: a.PressureUnc / a.Pressure})
			}
		}
	}
	g := s.Geometry
	if g.OnFace {
		b := g.Backscatter
		from := "entered"
		if b == 0 && c != nil {
			b, from = c.Backscatter, "from certificate "+c.Number
		}
		if b < 1 || b > 2 || math.IsNaN(b) {
			flag(FlagNoBackscatter, "chamber on the input face but no usable backscatter factor: reading not calibrated")
		} else {
			apply(Correction{Name: CorrBackscatter, Factor: BackscatterFactor(b), Note: fmt.Sprintf("B = %.3g %s; chamber on the input face, %s", b, from, gridWords(g.GridRemoved))})
		}
	}
	if g.SourceToChamber != 0 || g.SourceToInput != 0 {
		dc, di := g.SourceToChamber, g.SourceToInput
		switch {
		case dc == 0 || di == 0:
			// one distance given: chamber taken at the input plane, nothing to do
		case dc < 0 || di < 0 || math.IsNaN(dc) || math.IsNaN(di):
			flag(FlagGeometry, "distances from the focal spot must be positive (chamber %g mm, input %g mm): reading not calibrated", dc, di)
		case dc != di:
			apply(Correction{Name: CorrInverseSquare, Factor: InverseSquare(dc, di), Note: fmt.Sprintf("chamber at %g mm, input plane at %g mm from the focal spot; %s", dc, di, gridWords(g.GridRemoved))})
			// (d_c/d_i)²: relative sensitivity 2 to each distance (GUM 5.1.6).
			if u := g.DistanceUnc; u > 0 {
				out.TypeB = append(out.TypeB, Component{Source: "distances (inverse square)", Rel: 2 * math.Hypot(u/dc, u/di)})
			}
		}
	}
	if !g.OnFace && !hasCorrection(out.Corrections, CorrInverseSquare) {
		apply(Correction{Name: CorrGeometry, Factor: 1, Note: "chamber at the input plane, free in air; " + gridWords(g.GridRemoved)})
	}
	out.addResolution(c)
	return out
}

func hasCorrection(list []Correction, name string) bool {
	for _, a := range list {
		if a.Name == name {
			return true
		}
	}
	return false
}

// addResolution adds the display resolution of the certificate, carried
// through the corrections' factors into the corrected value's unit.
func (out *Corrected) addResolution(c *Certificate) {
	if c == nil || c.Resolution <= 0 {
		return
	}
	f := 1.0
	for _, a := range out.Corrections {
		f *= a.Factor
	}
	r := ResolutionComponent(c.Resolution * math.Abs(f))
	r.Source = "display resolution, " + c.Model
	out.TypeB = append(out.TypeB, r)
}

// PositionDark is the dark level kermalux takes at a position of the
// output window that has no beam-off reading of its own, from the centre's
// dark (all in the meter's own scale). Beam-off light there lies between
// two models: the centre dark unchanged (a meter offset, light that does
// not vignette) and the centre dark scaled by the position's share of the
// centre's beam light ρ = (M_pos − D)/(M_centre − D) (stray light and
// afterglow that vignette as the image does). With no reason to prefer
// either, the estimate is the middle of the two and its standard
// uncertainty that of a rectangular distribution over them (JCGM
// 100:2008 4.3.7):
//
//	D_pos = D·(1 + ρ)/2,   u = D·|1 − ρ| / (2√3)
//
// It returns the centre dark and no uncertainty when ρ cannot be formed.
func PositionDark(centreDark, rawPos, rawCentre float64) (d, u float64) {
	den := rawCentre - centreDark
	if !(den > 0) || math.IsNaN(rawPos) {
		return centreDark, 0
	}
	rho := (rawPos - centreDark) / den
	return centreDark * (1 + rho) / 2, math.Abs(centreDark*(1-rho)) / (2 * math.Sqrt(3))
}

// addDark adds the dark level's uncertainty, carried through the
// corrections' factors (the coefficient) into the corrected value's unit.
// It is the same for every reading that the dark was subtracted from, so
// it does not average away: it is a type B component of their mean.
func (out *Corrected) addDark(d Dark) {
	if !(d.StdUnc > 0) {
		return
	}
	f := 1.0
	for _, a := range out.Corrections {
		f *= a.Factor
	}
	out.TypeB = append(out.TypeB, Component{Source: "dark (beam-off) level subtracted", Abs: d.StdUnc * math.Abs(f), DoF: d.DoF})
}

func words(s string) string { return strings.ReplaceAll(s, "_", " ") }

func gridWords(removed bool) string {
	if removed {
		return "grid removed"
	}
	return "grid in place"
}

func isOutside(err error) bool {
	_, ok := err.(*OutsideTableError)
	return ok
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }
