package engine

import (
	"math"
	"math/rand/v2"
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

// pulsedLag is the steady-state reading at time t of a meter with a
// first-order response of time constant tau that follows a pulse train of
// period T and width w (mean 1): during a pulse it rises towards T/w,
// between pulses it decays towards 0, and in the steady state the level
// at each pulse's start repeats (a geometric series; worked here from the
// meter's equation dy/dt = (x − y)/tau, not from the simulator).
func pulsedLag(t, T, w, tau float64) float64 {
	a := T / w
	in, out := math.Exp(-w/tau), math.Exp(-(T-w)/tau)
	y0 := a * (1 - in) * out / (1 - in*out) // level at a pulse's start
	ph := math.Mod(t, T)
	if ph < w {
		return a + (y0-a)*math.Exp(-ph/tau)
	}
	peak := a + (y0-a)*in
	return peak * math.Exp(-(ph-w)/tau)
}

// TestPhaseLocked: readings that repeat a pattern every few readings are
// found, whatever the pattern's period up to lockedMaxEvery; white noise,
// a slow meter's correlated noise, a drift and a ripple too small to
// matter are not. The false-alarm rate on white noise is checked over
// 3,000 series (the test's design rate is 1e-6: none expected).
func TestPhaseLocked(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 9))
	noisy := func(n int, f func(i int) float64, rel float64) []float64 {
		xs := make([]float64, n)
		for i := range xs {
			xs[i] = f(i) * (1 + rel*rng.NormFloat64())
		}
		return xs
	}
	// A 15 pulses/s beam (8 ms pulses) read by a 50 ms meter every 100 ms:
	// the readings see two phases of the pulse cycle (100 ms is 1.5
	// periods), and their mean is not the cycle's mean of 1.
	period, width, tau := 1/15.0, 0.008, 0.05
	locked := func(phase float64) func(int) float64 {
		return func(i int) float64 { return pulsedLag(phase+0.1*float64(i), period, width, tau) }
	}
	var sum float64
	for i := range 40 {
		sum += locked(0.0005)(i)
	}
	if m := sum / 40; math.Abs(m-1) < 0.1 {
		t.Fatalf("the locked readings' mean %.3f is near the true mean 1: the case does not show the bias", m)
	}
	tests := []struct {
		name  string
		xs    []float64
		every int // 0: none expected
	}{
		{"pulsed beam, fast meter, 100 ms readings", noisy(40, locked(0.0005), 0.003), 2},
		{"pulsed beam at another phase", noisy(30, locked(0.041), 0.01), 2},
		{"a pattern of three", noisy(30, func(i int) float64 { return []float64{1, 1.2, 0.9}[i%3] }, 0.02), 3},
		{"a pattern of four", noisy(40, func(i int) float64 { return 1 + 0.1*math.Sin(2*math.Pi*float64(i)/4+0.3) }, 0.01), 4},
		{"a pattern of five, stepping two phases a reading", noisy(40, func(i int) float64 { return 1 + 0.1*math.Cos(2*math.Pi*2*float64(i)/5) }, 0.01), 5},
		{"too few readings for a pattern of two", noisy(7, locked(0.0005), 0.003), 0},
		{"white noise", noisy(60, func(int) float64 { return 1 }, 0.05), 0},
		{"a drift of 5 % across the readings", noisy(40, func(i int) float64 { return 1 + 0.05*float64(i)/40 }, 0.002), 0},
		{"a ripple of 0.2 %, below what moves the mean", noisy(40, func(i int) float64 { return 1 + 0.002*float64(i%2) }, 0.0002), 0},
		{"constant readings", noisy(20, func(int) float64 { return 0.5 }, 0), 0},
		{"zero readings", noisy(20, func(int) float64 { return 0 }, 0), 0},
	}
	// A slow meter: readings of a first-order lag of white noise (AR(1)
	// with ρ = 0.9), strongly correlated but with no pattern.
	slow := make([]float64, 60)
	y := 0.0
	for i := range slow {
		y = 0.9*y + math.Sqrt(1-0.81)*rng.NormFloat64()
		slow[i] = 1 + 0.03*y
	}
	tests = append(tests, struct {
		name  string
		xs    []float64
		every int
	}{"a slow meter's correlated noise", slow, 0})
	for _, tt := range tests {
		r, ok := phaseLocked(tt.xs, 0.005)
		if got := map[bool]int{true: r.Every}[ok]; got != tt.every {
			t.Errorf("%s: found a pattern of %d (%+v), want %d", tt.name, got, r, tt.every)
		}
	}
	alarms := 0
	for range 3000 {
		n := 8 + rng.IntN(100)
		if _, ok := phaseLocked(noisy(n, func(int) float64 { return 1 }, 0.05), 0.005); ok {
			alarms++
		}
	}
	if alarms > 0 {
		t.Errorf("%d of 3000 white-noise series called locked", alarms)
	}
}
