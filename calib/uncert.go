package calib

import (
	"math"
	"sync"

	"gonum.org/v1/gonum/stat/distuv"
)

// Coverage is the default coverage probability, 95.45 %: with infinite
// degrees of freedom it gives k = 2 (JCGM 100:2008, Table G.2).
const Coverage = 0.9545

// Running accumulates samples one at a time (Welford's algorithm): O(1)
// per sample, no allocation. The zero value is empty and ready.
type Running struct {
	n    int
	mean float64
	m2   float64
}

// Add includes x.
func (r *Running) Add(x float64) {
	r.n++
	d := x - r.mean
	r.mean += d / float64(r.n)
	r.m2 += d * (x - r.mean)
}

// Variance is the experimental variance s² of the samples (GUM 4.2.2);
// 0 with fewer than two samples.
func (r *Running) Variance() float64 {
	if r.n < 2 {
		return 0
	}
	return r.m2 / float64(r.n-1)
}

// Summary returns what a figure of merit needs from the samples: their
// count, arithmetic mean (JCGM 100:2008 4.2.1) and experimental standard
// deviation.
func (r *Running) Summary() Summary {
	return Summary{N: r.n, Mean: r.mean, SD: math.Sqrt(r.Variance())}
}

// Summary is n samples' mean and experimental standard deviation.
type Summary struct {
	N    int
	Mean float64
	SD   float64 // experimental standard deviation s (GUM 4.2.2)
}

// SDMean is the experimental standard deviation of the mean, the type A
// standard uncertainty s/√n (JCGM 100:2008 4.2.3); +Inf with fewer than two
// samples.
func (s Summary) SDMean() float64 {
	if s.N < 2 {
		return math.Inf(1)
	}
	return s.SD / math.Sqrt(float64(s.N))
}

// Component is one type B contribution to an input's uncertainty. Give it
// either relative (Rel, a fraction of the input's value) or absolute (Abs,
// in the input's unit) standard uncertainty.
type Component struct {
	Source string
	Rel    float64
	Abs    float64
	DoF    float64 // degrees of freedom; 0 = infinite (a type B estimate taken as exact, GUM G.4.2)
	// Calibration marks the meter's calibration coefficient, which cancels
	// in a ratio of two readings of the same meter.
	Calibration bool
}

// ResolutionComponent is the rectangular type B component of a display
// resolution δ: u = δ/√12 (JCGM 100:2008 F.2.2.1).
func ResolutionComponent(delta float64) Component {
	return Component{Source: "display resolution", Abs: delta / math.Sqrt(12)}
}

// Measured is one input of a figure of merit: the samples of a corrected
// reading and the type B components that go with it.
type Measured struct {
	Name       string // "output luminance", "input air kerma rate"
	Unit       string
	Samples    Summary
	TypeB      []Component
	Calibrated bool
	Flags      []Flag
}

// Collect summarises a run of corrected readings of one quantity into an
// input of a figure of merit: the mean and scatter of their values, the
// type B components of the first (absolute components averaged over the
// run), calibrated only if every reading is, and every flag once.
func Collect(name, unit string, readings []Corrected) Measured {
	m := Measured{Name: name, Unit: unit, Calibrated: len(readings) > 0}
	var r Running
	for i, c := range readings {
		r.Add(c.Value)
		if !c.Calibrated {
			m.Calibrated = false
		}
		for _, f := range c.Flags {
			m.Flags = appendFlag(m.Flags, f)
		}
		if i == 0 {
			m.TypeB = append([]Component(nil), c.TypeB...)
			continue
		}
		for j := range m.TypeB {
			if j < len(c.TypeB) && c.TypeB[j].Source == m.TypeB[j].Source {
				m.TypeB[j].Abs += (c.TypeB[j].Abs - m.TypeB[j].Abs) / float64(i+1)
			}
		}
	}
	m.Samples = r.Summary()
	return m
}

// BudgetRow is one line of an uncertainty budget (JCGM 100:2008). For a
// product or ratio model the sensitivity is relative (the exponent of the
// input, ±1) and the contribution is relative to the result; for other
// models (non-uniformity) both are absolute, in the result's unit.
type BudgetRow struct {
	Source       string
	Type         string  // "A" or "B"
	Value        float64 // estimate of the input quantity
	Unit         string
	StdUnc       float64 // standard uncertainty of the input, in its unit
	RelStdUnc    float64 // relative standard uncertainty of the input
	Sensitivity  float64
	Contribution float64
	DoF          float64 // 0 = infinite
}

// Result is a figure of merit with its uncertainty.
type Result struct {
	Quantity   string // "conversion_factor", "non_uniformity", "contrast_ratio", "input_kerma_rate", "kerma_rate_scaling"
	Value      float64
	Unit       string
	StdUnc     float64 // combined standard uncertainty u_c (GUM 5.1.2)
	ExpUnc     float64 // expanded uncertainty U = k·u_c (GUM 6.2.1)
	K          float64 // coverage factor
	DoF        float64 // effective degrees of freedom (GUM G.4.1); 0 = infinite
	Coverage   float64 // coverage probability of ExpUnc
	Budget     []BudgetRow
	Calibrated bool
	Flags      []Flag
	Detail     any // figure-specific detail, e.g. *UniformityDetail
	// Floor is the lowest value the meter reads, in the result's unit
	// (below it the meter reports under range); 0 when not known.
	// BelowFloor: the meter read under range, so the value is only known
	// to lie below Floor. [Judge] refuses to pass a limit below the floor.
	Floor      float64
	BelowFloor bool
}

// CoverageFactor returns k = t_p(ν), the two-sided Student t quantile for
// coverage probability p and ν degrees of freedom (JCGM 100:2008 G.3, G.4;
// Table G.2), using gonum's distuv.StudentsT. ν ≤ 0, NaN or +Inf means
// infinite (normal distribution). ν is used as it is, not truncated: the
// Welch–Satterthwaite ν_eff (G.4.1) is rarely an integer, and the t
// distribution is defined for any positive ν, so t_p(4.5) lies between
// the table's rows for 4 and 5 (G.4.1 allows interpolation; truncation is
// its cautious shortcut). ν below 1 is taken as 1.
//
// This is kermalux's one coverage factor: the engine's stopping rule and
// every budget call it.
func CoverageFactor(dof, p float64) float64 {
	z := normalQuantile(p)
	if dof <= 0 || math.IsInf(dof, 1) || math.IsNaN(dof) {
		return z
	}
	nu := math.Max(dof, 1)
	if nu > tableMax {
		// Cornish–Fisher expansion of the t quantile in 1/ν (Abramowitz and
		// Stegun 26.7.5); beyond ν = 500 its error is below 1e-8.
		z2 := z * z
		g1 := (z2 + 1) * z / 4
		g2 := ((5*z2+16)*z2 + 3) * z / 96
		return z + g1/nu + g2/(nu*nu)
	}
	if p == Coverage && nu == math.Trunc(nu) {
		tableOnce.Do(fillTable)
		return kTable[int(nu)]
	}
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: nu}.Quantile(0.5 + p/2)
}

// ExpandedRel combines a type A relative standard uncertainty uA with
// nuA degrees of freedom and type B relative standard uncertainties uB
// (infinite degrees of freedom, GUM G.4.2): relative variances add for
// products and ratios (JCGM 100:2008 5.1.6), ν_eff follows from
// Welch–Satterthwaite (G.2b) and k from [CoverageFactor] at [Coverage].
// It returns U = k·u_c, u_c and k. uA = 0 or nuA ≤ 0 gives ν_eff = ∞.
func ExpandedRel(uA, nuA float64, uB ...float64) (U, uc, k float64) {
	contrib := append([]float64{uA}, uB...)
	dofs := make([]float64, len(contrib))
	dofs[0] = nuA
	if nuA <= 0 {
		dofs[0] = math.Inf(1)
	}
	var v float64
	for _, c := range contrib {
		v += c * c
	}
	uc = math.Sqrt(v)
	k = CoverageFactor(WelchSatterthwaite(contrib, dofs), Coverage)
	return k * uc, uc, k
}

func normalQuantile(p float64) float64 {
	if p == Coverage {
		return zCoverage
	}
	return distuv.UnitNormal.Quantile(0.5 + p/2)
}

var zCoverage = distuv.UnitNormal.Quantile(0.5 + Coverage/2)

const tableMax = 500

var (
	tableOnce sync.Once
	kTable    [tableMax + 1]float64
)

func fillTable() {
	for nu := 1; nu <= tableMax; nu++ {
		kTable[nu] = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(nu)}.Quantile(0.5 + Coverage/2)
	}
}

// WelchSatterthwaite returns the effective degrees of freedom of a
// combined uncertainty from its contributions c_i·u_i and their degrees of
// freedom ν_i (JCGM 100:2008 G.4.1, eq. G.2b):
//
//	ν_eff = u_c⁴ / Σ (c_i u_i)⁴ / ν_i
//
// ν_i = 0 or +Inf means infinite; the result is +Inf when every ν_i is.
// Relative contributions give the same ν_eff for a product model.
func WelchSatterthwaite(contrib, dof []float64) float64 {
	var uc2, den float64
	for i, c := range contrib {
		uc2 += c * c
		if d := dof[i]; d > 0 && !math.IsInf(d, 1) {
			den += c * c * c * c / d
		}
	}
	if den == 0 {
		return math.Inf(1)
	}
	return uc2 * uc2 / den
}

// dofOut maps +Inf to 0, the journal's "infinite".
func dofOut(d float64) float64 {
	if math.IsInf(d, 1) || d > 1e9 {
		return 0
	}
	return d
}

// product combines inputs raised to powers (Y = Π X_i^p_i) into a result:
// relative variances add, weighted by p_i² (JCGM 100:2008 5.1.6). When
// dropCal is true the certificate components are left out (a ratio read
// with one meter cancels the meter's calibration coefficient).
func product(quantity, unit string, value float64, inputs []Measured, powers []float64, dropCal bool, p float64) Result {
	res := Result{Quantity: quantity, Value: value, Unit: unit, Calibrated: true, Coverage: p}
	var contrib, dofs []float64
	for i, in := range inputs {
		pw := powers[i]
		m := in.Samples.Mean
		if !in.Calibrated && !dropCal {
			res.Calibrated = false
		}
		for _, f := range in.Flags {
			if dropCal && f.certificateFlag() {
				continue
			}
			if !f.informational() && dropCal {
				res.Calibrated = false
			}
			res.Flags = appendFlag(res.Flags, f)
		}
		if in.Samples.N < 2 {
			res.Calibrated = false
			res.Flags = appendFlag(res.Flags, Flag{FlagFewSamples, in.Name + ": fewer than two samples, repeatability unknown"})
		}
		if !(m > 0) {
			res.Calibrated = false
			res.Flags = appendFlag(res.Flags, Flag{FlagInput, in.Name + ": mean is not positive"})
		}
		ua := in.Samples.SDMean()
		if math.IsInf(ua, 1) {
			ua = 0
		}
		rel := ua / math.Abs(m)
		row := BudgetRow{Source: in.Name + ", repeatability", Type: "A", Value: m, Unit: in.Unit, StdUnc: ua, RelStdUnc: rel,
			Sensitivity: pw, Contribution: math.Abs(pw) * rel, DoF: float64(in.Samples.N - 1)}
		if in.Samples.N < 2 {
			row.DoF = 1
		}
		res.Budget = append(res.Budget, row)
		contrib = append(contrib, row.Contribution)
		dofs = append(dofs, row.DoF)
		for _, b := range in.TypeB {
			if dropCal && b.Calibration {
				continue
			}
			r := b.Rel + b.Abs/math.Abs(m)
			row := BudgetRow{Source: b.Source, Type: "B", Value: m, Unit: in.Unit, StdUnc: r * math.Abs(m), RelStdUnc: r,
				Sensitivity: pw, Contribution: math.Abs(pw) * r, DoF: b.DoF}
			res.Budget = append(res.Budget, row)
			contrib = append(contrib, row.Contribution)
			d := b.DoF
			if d == 0 {
				d = math.Inf(1)
			}
			dofs = append(dofs, d)
		}
	}
	res.combine(contrib, dofs, math.Abs(value), p)
	return res
}

// combine sets the combined standard uncertainty from the budget's
// contributions (root sum of squares, JCGM 100:2008 5.1.2; for a product
// model the contributions are relative and scale multiplies them back into
// the result's unit), the Welch–Satterthwaite degrees of freedom (G.4.1)
// and the expanded uncertainty with [CoverageFactor].
func (res *Result) combine(contrib, dofs []float64, scale, p float64) {
	var u2 float64
	for _, c := range contrib {
		u2 += c * c
	}
	res.StdUnc = math.Sqrt(u2) * scale
	nu := WelchSatterthwaite(contrib, dofs)
	res.K = CoverageFactor(nu, p)
	res.ExpUnc = res.K * res.StdUnc
	res.DoF = dofOut(nu)
}

func appendFlag(list []Flag, f Flag) []Flag {
	for _, g := range list {
		if g == f {
			return list
		}
	}
	return append(list, f)
}
