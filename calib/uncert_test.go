package calib

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

func TestCoverageFactorStudentT(t *testing.T) {
	// Two-sided 95 % (t_0.975) critical values, NIST/SEMATECH e-Handbook of
	// Statistical Methods, 1.3.6.7.2 (critical values of Student's t; read in
	// a reprint of that table which names it as its source).
	for _, tc := range []struct{ nu, want float64 }{
		{1, 12.706}, {2, 4.303}, {5, 2.571}, {10, 2.228}, {30, 2.042},
	} {
		if got := CoverageFactor(tc.nu, 0.95); math.Abs(got-tc.want) > 0.0006 {
			t.Errorf("t_0.975(%v) = %.4f, want %.3f (NIST/SEMATECH 1.3.6.7.2)", tc.nu, got, tc.want)
		}
	}
	// Coverage factors for p = 95.45 %, JCGM 100:2008 Table G.2 (checked
	// against a reproduction of the table in Fluke Calibration, "Basics of
	// measurement uncertainty for DMM calibration", 2011, p. 54).
	for _, tc := range []struct{ nu, want float64 }{
		{1, 13.97}, {2, 4.53}, {5, 2.65}, {10, 2.28}, {math.Inf(1), 2.00}, {0, 2.00},
	} {
		if got := CoverageFactor(tc.nu, Coverage); math.Abs(got-tc.want) > 0.006 {
			t.Errorf("k_95.45(%v) = %.4f, want %.2f (GUM Table G.2)", tc.nu, got, tc.want)
		}
	}
}

// TestCoverageFactorNonInteger (observation 10: two implementations gave
// k 2.743 and 2.869 at ν 4.5): ν_eff is used as it is, not truncated.
// Outside references: gonum's distuv.StudentsT quantile at the same ν, and
// JCGM 100:2008 Table G.2 (p = 95.45 %, ν = 4: 2.87, ν = 5: 2.65; ν = 9:
// 2.32, ν = 10: 2.28; same reproduction as above), whose rows bracket the
// value and whose interpolation linear in 1/ν (the usual way to read
// between rows of a t table) agrees within 0.01.
func TestCoverageFactorNonInteger(t *testing.T) {
	for _, tc := range []struct{ nu, lo, hi, klo, khi float64 }{
		{4.5, 4, 5, 2.87, 2.65},
		{5.9, 5, 6, 2.65, 2.52},
		{9.5, 9, 10, 2.32, 2.28},
	} {
		got := CoverageFactor(tc.nu, Coverage)
		want := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: tc.nu}.Quantile(0.5 + Coverage/2)
		if math.Abs(got-want) > 1e-9 {
			t.Errorf("k(%v) = %.5f, gonum distuv.StudentsT %.5f", tc.nu, got, want)
		}
		if !(got < tc.klo && got > tc.khi) {
			t.Errorf("k(%v) = %.4f is not between Table G.2's %.2f (ν=%v) and %.2f (ν=%v)", tc.nu, got, tc.klo, tc.lo, tc.khi, tc.hi)
		}
		f := (1/tc.lo - 1/tc.nu) / (1/tc.lo - 1/tc.hi)
		if interp := tc.klo + f*(tc.khi-tc.klo); math.Abs(got-interp) > 0.01 {
			t.Errorf("k(%v) = %.4f, Table G.2 interpolated in 1/ν gives %.3f", tc.nu, got, interp)
		}
	}
	// The value observation 10 saw from the engine's copy at ν = 4.5.
	if got := CoverageFactor(4.5, Coverage); math.Abs(got-2.743) > 0.0005 {
		t.Errorf("k(4.5) = %.4f, want 2.743", got)
	}
}

// TestExpandedRel: the combination the stopping rule uses. u_A = u_B with
// ν_A = 4 gives ν_eff = (2u²)²/(u⁴/4) = 16 (JCGM 100:2008 G.2b, by hand)
// and k = 2.17 (Table G.2, ν = 16; from memory of the table's row, and
// gonum's quantile at 16 gives 2.169).
func TestExpandedRel(t *testing.T) {
	U, uc, k := ExpandedRel(0.01, 4, 0.01)
	if math.Abs(uc-0.01*math.Sqrt2) > 1e-15 || math.Abs(k-2.17) > 0.005 || math.Abs(U-k*uc) > 1e-15 {
		t.Errorf("ExpandedRel = %v, %v, %v; want k 2.17 at ν_eff 16", U, uc, k)
	}
	if _, _, k := ExpandedRel(0, 4, 0.01); k != CoverageFactor(0, Coverage) {
		t.Errorf("no type A: k = %v, want the normal 2.00", k)
	}
}

func TestWelchSatterthwaite(t *testing.T) {
	// JCGM 100:2008 eq. (G.2b), worked by hand: contributions 1 (ν = 4) and
	// 1 (ν = 4): ν_eff = (1+1)² / (1/4 + 1/4) = 8.
	if got := WelchSatterthwaite([]float64{1, 1}, []float64{4, 4}); math.Abs(got-8) > 1e-12 {
		t.Errorf("ν_eff = %v, want 8", got)
	}
	// A type B contribution with infinite ν raises ν_eff: (1+1)²/(1/4) = 16.
	if got := WelchSatterthwaite([]float64{1, 1}, []float64{4, math.Inf(1)}); math.Abs(got-16) > 1e-12 {
		t.Errorf("ν_eff = %v, want 16", got)
	}
	if got := WelchSatterthwaite([]float64{1}, []float64{0}); !math.IsInf(got, 1) {
		t.Errorf("all infinite: ν_eff = %v", got)
	}
}

func TestRunningMatchesGonum(t *testing.T) {
	xs := []float64{150.2, 149.1, 151.7, 150.0, 148.8, 150.9, 151.3, 149.6}
	var r Running
	for _, x := range xs {
		r.Add(x)
	}
	mean, variance := stat.MeanVariance(xs, nil) // gonum: unbiased (n − 1) variance
	s := r.Summary()
	if s.N != len(xs) || math.Abs(s.Mean-mean) > 1e-12 || math.Abs(r.Variance()-variance) > 1e-9 {
		t.Errorf("Running = %d, %v, %v; gonum stat.MeanVariance = %v, %v", s.N, s.Mean, r.Variance(), mean, variance)
	}
	if math.Abs(s.SDMean()-math.Sqrt(variance/8)) > 1e-12 {
		t.Errorf("SDMean = %v", s.SDMean())
	}
}

// The GUM's rule for a ratio of uncorrelated inputs (JCGM 100:2008 5.1.6:
// relative variances add), on a case worked by hand:
//
//	L = 150 cd/m², 10 samples, s = 1.5  → u_A,rel = 1.5/√10/150 = 0.0031623
//	  photometer certificate U = 2 %, k = 2 → u_B,rel = 0.010
//	K = 1.0 µGy/s, 10 samples, s = 0.02 → u_A,rel = 0.02/√10/1.0 = 0.0063246
//	  dosimeter certificate U = 2.4 %, k = 2 → u_B,rel = 0.012
//	G = 150; u_rel² = 1e-5 + 1e-4 + 4e-5 + 1.44e-4 = 2.94e-4 → u_rel = 0.017146
//	u_c = 2.5720 cd·m⁻²/(µGy·s⁻¹)
//	ν_eff = (2.94e-4)² / ((1e-5)²/9 + (4e-5)²/9) = 457.6 (G.2b)
//	k(457) lies between Table G.2's 2.025 (ν = 100) and 2.00 (ν = ∞)
func TestConversionFactorWorkedRatio(t *testing.T) {
	lum := Measured{Name: "centre luminance", Unit: "cd/m²", Samples: Summary{N: 10, Mean: 150, SD: 1.5},
		TypeB: []Component{{Source: "calibration coefficient", Rel: 0.02 / 2, Calibration: true}}, Calibrated: true}
	ker := Measured{Name: "input air kerma rate", Unit: "µGy/s", Samples: Summary{N: 10, Mean: 1.0, SD: 0.02},
		TypeB: []Component{{Source: "calibration coefficient", Rel: 0.024 / 2, Calibration: true}}, Calibrated: true}
	r := ConversionFactor(lum, ker, 0)
	if math.Abs(r.Value-150) > 1e-9 || math.Abs(r.StdUnc-2.5720) > 5e-4 {
		t.Errorf("G = %v ± %v, want 150 ± 2.5720", r.Value, r.StdUnc)
	}
	if math.Abs(r.DoF-457.6) > 0.5 {
		t.Errorf("ν_eff = %v, want 457.6", r.DoF)
	}
	if r.K < 2.0 || r.K > 2.025 || math.Abs(r.ExpUnc-r.K*r.StdUnc) > 1e-12 {
		t.Errorf("k = %v, U = %v", r.K, r.ExpUnc)
	}
	if len(r.Budget) != 4 || !r.Calibrated {
		t.Errorf("budget %d rows, calibrated %v", len(r.Budget), r.Calibrated)
	}
	var sum2 float64
	for _, b := range r.Budget {
		sum2 += b.Contribution * b.Contribution
	}
	if math.Abs(math.Sqrt(sum2)*150-r.StdUnc) > 1e-9 {
		t.Errorf("budget rows do not add up to u_c")
	}
}

// Fewer samples with the same scatter give a larger expanded uncertainty
// (s/√n grows and the Student t factor grows).
func TestUncertaintyGrowsAsSamplesShrink(t *testing.T) {
	prev := 0.0
	for _, n := range []int{100, 30, 10, 5, 3, 2} {
		lum := Measured{Name: "L", Samples: Summary{N: n, Mean: 150, SD: 3}, Calibrated: true}
		ker := Measured{Name: "K", Samples: Summary{N: n, Mean: 1, SD: 0.02}, Calibrated: true,
			TypeB: []Component{{Rel: 0.012, Calibration: true}}}
		u := ConversionFactor(lum, ker, 0).ExpUnc
		if u <= prev {
			t.Errorf("n = %d: U = %v, not larger than %v with more samples", n, u, prev)
		}
		prev = u
	}
}
func TestCoverageFactorLargeDoF(t *testing.T) {
	for _, nu := range []float64{501, 800, 5000, 1e5} {
		for _, p := range []float64{0.95, Coverage, 0.99} {
			want := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: nu}.Quantile(0.5 + p/2)
			if got := CoverageFactor(nu, p); math.Abs(got-want) > 1e-7 {
				t.Errorf("k(%v, %v) = %v, gonum %v", nu, p, got, want)
			}
		}
	}
}

// TestCoverageFactorGUMExampleH1: JCGM 100:2008 H.1 (end-gauge
// calibration) expands u_c = 32 nm with ν_eff = 16 at p = 99 % using
// t_99(16) = 2.92, giving U_99 = 93 nm (values from memory of the
// example; t_99(16) = 2.921 in any two-sided t table).
func TestCoverageFactorGUMExampleH1(t *testing.T) {
	k := CoverageFactor(16, 0.99)
	if math.Abs(k-2.92) > 0.005 || math.Round(k*32) != 93 {
		t.Errorf("t_99(16) = %.4f (U = %.1f nm), want 2.92 and 93 nm", k, k*32)
	}
}
