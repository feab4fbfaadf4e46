package engine

import (
	"math"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"
)

// The stopping rule's expansion is calib's (JCGM 100:2008 Table G.2 at
// p = 95.45 %: k = 13.97, 4.53, 2.65, 2.28 for ν = 1, 2, 5, 10, reproduced
// in Fluke Calibration, "Basics of measurement uncertainty for DMM
// calibration", 2011, p. 54); neff observations give ν = neff − 1.
func TestExpandedRelUsesCalibCoverage(t *testing.T) {
	for _, c := range []struct{ nu, k float64 }{{1, 13.97}, {2, 4.53}, {5, 2.65}, {10, 2.28}} {
		if _, _, got := expandedRel(0.01, c.nu+1); math.Abs(got-c.k) > 0.006 {
			t.Errorf("ν=%g: k = %.3f, GUM G.2 gives %.2f", c.nu, got, c.k)
		}
	}
	if _, _, got := expandedRel(0.01, math.Inf(1)); math.Abs(got-2) > 1e-4 {
		t.Errorf("ν=∞: k = %g", got)
	}
}

// Mean, standard deviation and trend against gonum's reference
// implementations.
func TestStatsAgainstGonum(t *testing.T) {
	xs := []float64{1.02, 0.98, 1.05, 0.97, 1.01, 0.99, 1.04, 0.96}
	m, s := meanSD(xs)
	gm, gs := stat.MeanStdDev(xs, nil)
	if math.Abs(m-gm) > 1e-12 || math.Abs(s-gs) > 1e-12 {
		t.Errorf("meanSD %g %g, gonum %g %g", m, s, gm, gs)
	}
	var series []timedValue
	var ts []float64
	for i, x := range xs {
		v := x + 0.05*float64(i)
		series = append(series, timedValue{time.Duration(i) * 100 * time.Millisecond, v})
		ts = append(ts, float64(i)*0.1)
	}
	rel, _, ok := trend(series)
	_, beta := stat.LinearRegression(ts, values(series), nil, false)
	mean, _ := meanSD(values(series))
	if !ok || math.Abs(rel-beta/mean) > 1e-9 {
		t.Errorf("trend %g, gonum slope/mean %g", rel, beta/mean)
	}
}

// A white series keeps its n; a strongly correlated one (AR(1), ρ = 0.8)
// counts as about n·(1−ρ)/(1+ρ) = n/9.
func TestEffectiveN(t *testing.T) {
	n := 400
	white := make([]float64, n)
	ar := make([]float64, n)
	seed := uint64(12345)
	next := func() float64 { // Box–Muller on a simple LCG, deterministic
		seed = seed*6364136223846793005 + 1442695040888963407
		u1 := float64(seed>>11)/(1<<53) + 1e-12
		seed = seed*6364136223846793005 + 1442695040888963407
		u2 := float64(seed>>11) / (1 << 53)
		return math.Sqrt(-2*math.Log(u1)) * math.Cos(2*math.Pi*u2)
	}
	prev := 0.0
	for i := range white {
		white[i] = next()
		prev = 0.8*prev + next()
		ar[i] = 10 + prev
	}
	if got := effectiveN(white); got < float64(n)*0.8 {
		t.Errorf("white: n_eff %g of %d", got, n)
	}
	if got := effectiveN(ar); got < float64(n)/9*0.6 || got > float64(n)/9*1.6 {
		t.Errorf("AR(1) 0.8: n_eff %g, want about %g", got, float64(n)/9)
	}
}

// Pairing: luminance at times between kerma readings gets the kerma
// interpolated linearly.
func TestPairsInterpolate(t *testing.T) {
	k := []timedValue{{0, 1}, {100 * time.Millisecond, 2}, {200 * time.Millisecond, 2}}
	l := []timedValue{{50 * time.Millisecond, 150}, {150 * time.Millisecond, 300}, {250 * time.Millisecond, 1}}
	g := pairs(l, k)
	if len(g) != 2 || math.Abs(g[0]-100) > 1e-9 || math.Abs(g[1]-150) > 1e-9 {
		t.Errorf("pairs %v", g)
	}
}
