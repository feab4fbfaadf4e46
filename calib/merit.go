package calib

import (
	"fmt"
	"math"
	"sort"

	"kermalux/drivers/units"
)

// Quantities of results.
const (
	QConversionFactor = "conversion_factor"
	QNonUniformity    = "non_uniformity"
	QContrastRatio    = "contrast_ratio"
	QInputKermaRate   = "input_kerma_rate"
	QKermaScaling     = "kerma_rate_scaling"
)

// Units of results.
const (
	UnitConversion       = "cd·m⁻²/(µGy·s⁻¹)"
	UnitConversionLegacy = "cd·m⁻²/(mR·s⁻¹)"
	UnitRatio            = "1"
)

// LegacyConversionFactor converts a conversion factor in cd·m⁻²/(µGy·s⁻¹)
// into the older cd·m⁻²/(mR·s⁻¹), through the exposure-to-air-kerma
// constant of package units (1 mR ↔ 8.764 µGy, W/e = 33.97 J/C, g = 0):
//
//	G(per mR/s) = G(per µGy/s) × (µGy/s per mR/s)
func LegacyConversionFactor(g float64) float64 {
	f, err := units.Factor(units.AirKermaRate, "mR/s")
	if err != nil {
		panic("units: mR/s unknown: " + err.Error())
	}
	return g * f
}

// ConversionDetail is the detail of a conversion factor result.
type ConversionDetail struct {
	Luminance     float64 // mean centre luminance, cd/m²
	KermaRate     float64 // mean input air kerma rate, µGy/s
	Legacy        float64 // the same conversion factor in cd·m⁻²/(mR·s⁻¹)
	LegacyUnit    string
	GyPerRoentgen float64 // the exposure-to-kerma constant used for Legacy
}

// ConversionFactor computes the conversion factor of IEC 61262-2,
//
//	G_x = L / K̇
//
// the output luminance L at the centre (cd/m²) over the input air kerma
// rate K̇ at the input plane (µGy/s), free of backscatter, beam quality
// RQA5, grid removed. Both inputs are corrected means; the relative
// variances of the two meters add (JCGM 100:2008 5.1.6). p is the
// coverage probability (0: [Coverage]).
func ConversionFactor(lum, kerma Measured, p float64) Result {
	if p == 0 {
		p = Coverage
	}
	g := lum.Samples.Mean / kerma.Samples.Mean
	r := product(QConversionFactor, UnitConversion, g, []Measured{lum, kerma}, []float64{1, -1}, false, p)
	r.Detail = &ConversionDetail{Luminance: lum.Samples.Mean, KermaRate: kerma.Samples.Mean,
		Legacy: LegacyConversionFactor(g), LegacyUnit: UnitConversionLegacy, GyPerRoentgen: units.GyPerRoentgen}
	return r
}

// KermaRate is the input air kerma rate of one field mode as a result.
func KermaRate(kerma Measured, p float64) Result {
	if p == 0 {
		p = Coverage
	}
	return product(QInputKermaRate, units.Canonical(units.AirKermaRate), kerma.Samples.Mean, []Measured{kerma}, []float64{1}, false, p)
}

// ContrastDetail is the detail of a contrast ratio result.
type ContrastDetail struct {
	Open, Disk    float64 // mean centre luminance without and with the disk, cd/m²
	DiskDiameter  float64 // mm
	FieldDiameter float64 // mm, input field
	DiskFraction  float64 // DiskDiameter / FieldDiameter
}

// ContrastRatio computes the contrast ratio of IEC 61262-6,
//
//	CR = L_open / L_disk
//
// the centre luminance without and with a lead disk at the centre of the
// input field (IEC 61262-6 uses a disk of 10 % of the input field diameter:
// from memory, verify in the standard; one secondary description speaks of
// 10 % of the input screen's area instead). Both readings come from the same
// photometer, so its calibration coefficient cancels: only repeatability
// and the resolution remain (JCGM 100:2008 5.1.6). A disk far from 10 %
// of the field is noted, not refused.
func ContrastRatio(open, disk Measured, diskDiameter, fieldDiameter, p float64) Result {
	if p == 0 {
		p = Coverage
	}
	cr := open.Samples.Mean / disk.Samples.Mean
	r := product(QContrastRatio, UnitRatio, cr, []Measured{open, disk}, []float64{1, -1}, true, p)
	d := &ContrastDetail{Open: open.Samples.Mean, Disk: disk.Samples.Mean, DiskDiameter: diskDiameter, FieldDiameter: fieldDiameter}
	if fieldDiameter > 0 && diskDiameter > 0 {
		d.DiskFraction = diskDiameter / fieldDiameter
		if note, wrong := LeadDiskNote(diskDiameter, fieldDiameter); wrong {
			r.Flags = appendFlag(r.Flags, Flag{FlagDiskSize, note})
		}
	}
	r.Detail = d
	return r
}

// LeadDiskNote says whether a lead disk of diskDiameter (mm) is far from
// the 10 % of the input field diameter (mm) that the contrast ratio is
// defined with (more than 2 points of percent off), and if so how far, in
// the words of the result's note. The board says it when the diameter is
// entered, before the exposure with the disk.
func LeadDiskNote(diskDiameter, fieldDiameter float64) (string, bool) {
	if fieldDiameter <= 0 || diskDiameter <= 0 {
		return "", false
	}
	f := diskDiameter / fieldDiameter
	if math.Abs(f-0.10) <= 0.02 {
		return "", false
	}
	return fmt.Sprintf("lead disk %.0f mm is %.0f %% of the %.0f mm field, not 10 %%", diskDiameter, 100*f, fieldDiameter), true
}

// Spot is one luminance measurement position on the output window.
type Spot struct {
	Label     string  // "centre", "up 0.9"
	Radius    float64 // fraction of the output radius: 0 at the centre, 1 at the edge
	Angle     float64 // direction of the diameter, degrees (recorded)
	Luminance Measured
}

// RadialMean is the mean luminance at one radius.
type RadialMean struct {
	Radius      float64 // fraction of the output radius
	Mean        float64 // cd/m²
	N           int     // positions at this radius
	RelToCentre float64 // Mean / centre luminance
}

// UniformityDetail is the detail of a non-uniformity result.
type UniformityDetail struct {
	Formula      string
	Centre       float64 // cd/m²
	Max, Min     float64 // cd/m²
	MaxAt, MinAt string  // labels
	EdgeRadius   float64 // outermost radius measured
	EdgeToCentre float64 // mean luminance at EdgeRadius over the centre luminance
	Profile      []RadialMean
}

// NonUniformityFormula is the formula [Uniformity] uses.
const NonUniformityFormula = "(L_max − L_min) / (L_max + L_min)"

// Uniformity computes the luminance distribution of the output screen from
// readings at the centre and at fractions of the output radius along
// several diameters (the measurement of IEC 61262-3), as a radial profile
// (mean luminance per radius, relative to the centre) and the edge/centre
// ratio. Its headline non-uniformity is
//
//	NU = (L_max − L_min) / (L_max + L_min)
//
// over all positions (common practice for luminance uniformity; the same
// form as AAPM TG-18's display non-uniformity, from memory), which catches
// a bright or dark spot anywhere as well as the fall-off toward the edge.
// A perfectly flat screen gives 0. All readings come from one photometer,
// so its calibration coefficient cancels; the uncertainty is propagated
// from the repeatability (and resolution) of the two extreme readings:
//
//	∂NU/∂L_max = 2 L_min/(L_max+L_min)²,  ∂NU/∂L_min = −2 L_max/(L_max+L_min)²
//
// (JCGM 100:2008 5.1.2), absolute, in the unit of NU.
func Uniformity(spots []Spot, p float64) (Result, error) {
	if p == 0 {
		p = Coverage
	}
	if len(spots) < 2 {
		return Result{}, fmt.Errorf("uniformity needs the centre and at least one other position, got %d", len(spots))
	}
	centre := -1
	imax, imin := 0, 0
	for i, s := range spots {
		if s.Radius < 0 || s.Radius > 1 || math.IsNaN(s.Radius) {
			return Result{}, fmt.Errorf("uniformity position %q: radius %g is not a fraction of the output radius between 0 and 1", s.Label, s.Radius)
		}
		if !(s.Luminance.Samples.Mean > 0) {
			return Result{}, fmt.Errorf("uniformity position %q: luminance %g is not positive", s.Label, s.Luminance.Samples.Mean)
		}
		if s.Radius == 0 && centre < 0 {
			centre = i
		}
		if s.Luminance.Samples.Mean > spots[imax].Luminance.Samples.Mean {
			imax = i
		}
		if s.Luminance.Samples.Mean < spots[imin].Luminance.Samples.Mean {
			imin = i
		}
	}
	if centre < 0 {
		return Result{}, fmt.Errorf("uniformity needs a reading at the centre (radius 0)")
	}
	if imax == imin {
		imin = len(spots) - 1
		if imin == imax {
			imin = 0
		}
	}
	lc := spots[centre].Luminance.Samples.Mean
	// Radial profile.
	sums := map[float64]*RadialMean{}
	for _, s := range spots {
		rm := sums[s.Radius]
		if rm == nil {
			rm = &RadialMean{Radius: s.Radius}
			sums[s.Radius] = rm
		}
		rm.Mean += s.Luminance.Samples.Mean
		rm.N++
	}
	d := &UniformityDetail{Formula: NonUniformityFormula, Centre: lc}
	for _, rm := range sums {
		rm.Mean /= float64(rm.N)
		rm.RelToCentre = rm.Mean / lc
		d.Profile = append(d.Profile, *rm)
	}
	sort.Slice(d.Profile, func(i, j int) bool { return d.Profile[i].Radius < d.Profile[j].Radius })
	edge := d.Profile[len(d.Profile)-1]
	d.EdgeRadius, d.EdgeToCentre = edge.Radius, edge.RelToCentre
	mx, mn := spots[imax], spots[imin]
	lmax, lmin := mx.Luminance.Samples.Mean, mn.Luminance.Samples.Mean
	d.Max, d.Min, d.MaxAt, d.MinAt = lmax, lmin, mx.Label, mn.Label
	sum := lmax + lmin
	nu := (lmax - lmin) / sum

	res := Result{Quantity: QNonUniformity, Value: nu, Unit: UnitRatio, Calibrated: true, Coverage: p, Detail: d}
	var contrib, dofs []float64
	addInput := func(s Spot, c float64) {
		m := s.Luminance
		for _, f := range m.Flags {
			if f.certificateFlag() {
				continue
			}
			if !f.informational() {
				res.Calibrated = false
			}
			res.Flags = appendFlag(res.Flags, f)
		}
		ua := m.Samples.SDMean()
		dof := float64(m.Samples.N - 1)
		if m.Samples.N < 2 {
			ua, dof = 0, 1
			res.Calibrated = false
			res.Flags = appendFlag(res.Flags, Flag{FlagFewSamples, fmt.Sprintf("position %s: fewer than two samples, repeatability unknown", s.Label)})
		}
		mean := m.Samples.Mean
		row := BudgetRow{Source: fmt.Sprintf("luminance at %s, repeatability", s.Label), Type: "A", Value: mean, Unit: m.Unit,
			StdUnc: ua, RelStdUnc: ua / mean, Sensitivity: c, Contribution: math.Abs(c) * ua, DoF: dof}
		res.Budget = append(res.Budget, row)
		contrib, dofs = append(contrib, row.Contribution), append(dofs, dof)
		for _, b := range m.TypeB {
			if b.Calibration {
				continue
			}
			u := b.Abs + b.Rel*mean
			row := BudgetRow{Source: fmt.Sprintf("%s at %s", b.Source, s.Label), Type: "B", Value: mean, Unit: m.Unit,
				StdUnc: u, RelStdUnc: u / mean, Sensitivity: c, Contribution: math.Abs(c) * u, DoF: b.DoF}
			res.Budget = append(res.Budget, row)
			bd := b.DoF
			if bd == 0 {
				bd = math.Inf(1)
			}
			contrib, dofs = append(contrib, row.Contribution), append(dofs, bd)
		}
	}
	addInput(mx, 2*lmin/(sum*sum))
	addInput(mn, -2*lmax/(sum*sum))
	res.combine(contrib, dofs, 1, p)
	return res, nil
}

// Mode is one field mode's input air kerma rate measurement.
type Mode struct {
	Name          string  // "32 cm"
	FieldDiameter float64 // nominal input field diameter, mm
	Kerma         Measured
}

// ScalingDetail is the detail of a kerma rate scaling result.
type ScalingDetail struct {
	Mode, Reference string
	Expected        float64 // (d_reference / d_mode)²
	OfExpected      float64 // measured ratio / expected
}

// ModeScaling compares the input air kerma rate of each field mode with
// the largest field's. Under automatic brightness control the rate rises
// as the field shrinks, roughly as (d_full / d_mode)² (common practice):
// each result is the measured ratio K̇_mode / K̇_full, its detail the
// expectation and the ratio of the two. Both readings come from the same
// dosimeter at the same beam quality, so its calibration coefficient
// cancels. The largest field gets no result.
func ModeScaling(modes []Mode, p float64) ([]Result, error) {
	if p == 0 {
		p = Coverage
	}
	if len(modes) < 2 {
		return nil, fmt.Errorf("kerma rate scaling needs at least two field modes, got %d", len(modes))
	}
	ref := 0
	for i, m := range modes {
		if !(m.FieldDiameter > 0) {
			return nil, fmt.Errorf("field mode %q: field diameter %g mm is not positive", m.Name, m.FieldDiameter)
		}
		if !(m.Kerma.Samples.Mean > 0) {
			return nil, fmt.Errorf("field mode %q: air kerma rate %g is not positive", m.Name, m.Kerma.Samples.Mean)
		}
		if m.FieldDiameter > modes[ref].FieldDiameter {
			ref = i
		}
	}
	full := modes[ref]
	var out []Result
	for i, m := range modes {
		if i == ref {
			continue
		}
		ratio := m.Kerma.Samples.Mean / full.Kerma.Samples.Mean
		r := product(QKermaScaling, UnitRatio, ratio, []Measured{m.Kerma, full.Kerma}, []float64{1, -1}, true, p)
		q := full.FieldDiameter / m.FieldDiameter
		exp := q * q
		r.Detail = &ScalingDetail{Mode: m.Name, Reference: full.Name, Expected: exp, OfExpected: ratio / exp}
		out = append(out, r)
	}
	return out, nil
}

// Quantities of level results.
const (
	QDarkLevel = "dark_level"
)

// Level is a meter's mean reading as a result (a dark level, an offset),
// with an absolute uncertainty budget: the type A standard deviation of
// the mean, s/√n with n − 1 degrees of freedom (JCGM 100:2008 4.2.3), and
// each type B component of the corrected readings in the value's unit
// (the display resolution δ/√12 among them, F.2.2.1, which no number of
// readings removes), combined in quadrature (5.1.2) and expanded with
// Student's t at the Welch–Satterthwaite degrees of freedom (G.4.1). A
// level near or at zero is a value like any other here, unlike the
// inputs of a ratio.
func Level(quantity string, m Measured, p float64) Result {
	if p == 0 {
		p = Coverage
	}
	mean := m.Samples.Mean
	res := Result{Quantity: quantity, Value: mean, Unit: m.Unit, Calibrated: m.Calibrated, Coverage: p}
	for _, f := range m.Flags {
		res.Flags = appendFlag(res.Flags, f)
	}
	ua, dof := m.Samples.SDMean(), float64(m.Samples.N-1)
	if m.Samples.N < 2 {
		ua, dof = 0, 1
		res.Calibrated = false
		res.Flags = appendFlag(res.Flags, Flag{FlagFewSamples, m.Name + ": fewer than two samples, repeatability unknown"})
	}
	rel := func(u float64) float64 {
		if mean == 0 {
			return 0
		}
		return u / math.Abs(mean)
	}
	res.Budget = append(res.Budget, BudgetRow{Source: m.Name + ", repeatability", Type: "A", Value: mean, Unit: m.Unit,
		StdUnc: ua, RelStdUnc: rel(ua), Sensitivity: 1, Contribution: ua, DoF: dof})
	contrib, dofs := []float64{ua}, []float64{dof}
	for _, b := range m.TypeB {
		u := b.Abs + b.Rel*math.Abs(mean)
		res.Budget = append(res.Budget, BudgetRow{Source: b.Source, Type: "B", Value: mean, Unit: m.Unit,
			StdUnc: u, RelStdUnc: rel(u), Sensitivity: 1, Contribution: u, DoF: b.DoF})
		d := b.DoF
		if d == 0 {
			d = math.Inf(1)
		}
		contrib, dofs = append(contrib, u), append(dofs, d)
	}
	res.combine(contrib, dofs, 1, p)
	return res
}
