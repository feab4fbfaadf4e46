package engine

import (
	"math"
	"time"

	"gonum.org/v1/gonum/stat/distuv"

	"kermalux/calib"
)

// timedValue is a value at a host time.
type timedValue struct {
	t time.Duration
	v float64
}

// meanSD returns the arithmetic mean and the experimental standard
// deviation s (JCGM 100:2008, 4.2.1 and 4.2.2).
func meanSD(xs []float64) (mean, sd float64) {
	n := float64(len(xs))
	if n == 0 {
		return 0, 0
	}
	for _, x := range xs {
		mean += x
	}
	mean /= n
	if n < 2 {
		return mean, 0
	}
	var ss float64
	for _, x := range xs {
		d := x - mean
		ss += d * d
	}
	return mean, math.Sqrt(ss / (n - 1))
}

// effectiveN is the number of independent observations equivalent to n
// readings of a series with lag-1 autocorrelation ρ (an AR(1) model:
// n_eff = n·(1−ρ)/(1+ρ); Bayley & Hammersley, J. R. Stat. Soc. Suppl. 8
// (1946), from memory). Meters with a response time longer than their
// reading period give correlated readings whose plain standard deviation
// of the mean would be too small. ρ is used only where it is significant
// (above 2/√n, the usual large-sample bound for a white series).
func effectiveN(xs []float64) float64 {
	n := len(xs)
	if n < 8 {
		return float64(n)
	}
	m, _ := meanSD(xs)
	var num, den float64
	for i, x := range xs {
		d := x - m
		den += d * d
		if i > 0 {
			num += d * (xs[i-1] - m)
		}
	}
	if den == 0 {
		return float64(n)
	}
	rho := num / den
	if rho <= 2/math.Sqrt(float64(n)) {
		return float64(n)
	}
	rho = math.Min(rho, 0.95)
	return math.Max(2, float64(n)*(1-rho)/(1+rho))
}

// relTypeA is the relative standard uncertainty of the mean of xs (type A,
// JCGM 100:2008 4.2.3: s/√n, here with n the effective number) and the
// number of effective observations.
func relTypeA(xs []float64) (rel, neff float64) {
	m, s := meanSD(xs)
	if m == 0 || len(xs) < 2 {
		return math.Inf(1), float64(len(xs))
	}
	neff = effectiveN(xs)
	return s / math.Sqrt(neff) / math.Abs(m), neff
}

// expandedRel combines a type A relative uncertainty from neff effective
// observations with type B relative uncertainties and expands it, through
// calib's one coverage factor (calib.ExpandedRel: relative variances add,
// JCGM 100:2008 5.1.6; Student t at the Welch–Satterthwaite ν_eff, G.4.1).
func expandedRel(uA, neff float64, uB ...float64) (U, uc, k float64) {
	return calib.ExpandedRel(uA, neff-1, uB...)
}

// trend fits v = a + b·t by least squares over xs and returns the slope
// relative to the mean, per second, and its standard error.
func trend(xs []timedValue) (rel, se float64, ok bool) {
	n := float64(len(xs))
	if n < 3 {
		return 0, 0, false
	}
	var st, sv float64
	for _, x := range xs {
		st += x.t.Seconds()
		sv += x.v
	}
	mt, mv := st/n, sv/n
	var sxx, sxy float64
	for _, x := range xs {
		dt := x.t.Seconds() - mt
		sxx += dt * dt
		sxy += dt * (x.v - mv)
	}
	if sxx == 0 {
		return 0, 0, false
	}
	b := sxy / sxx
	var ssr, svv float64
	for _, x := range xs {
		r := x.v - (mv + b*(x.t.Seconds()-mt))
		ssr += r * r
		svv += (x.v - mv) * (x.v - mv)
	}
	seb := math.Sqrt(ssr / (n - 2) / sxx)
	// Relative to the mean; a signal near zero (a dark reading, a meter
	// under range) is scaled by its spread instead, where a relative
	// slope would be meaningless, and a constant one has no trend at all.
	scale := math.Max(math.Abs(mv), math.Sqrt(svv/(n-1)))
	if scale == 0 {
		return 0, 0, true
	}
	return b / scale, seb / scale, true
}

// window returns the trailing part of xs that spans d.
func window(xs []timedValue, d time.Duration) []timedValue {
	if len(xs) == 0 {
		return nil
	}
	end := xs[len(xs)-1].t
	i := len(xs) - 1
	for i > 0 && end-xs[i-1].t <= d {
		i--
	}
	return xs[i:]
}

// steady reports whether the trailing window of xs shows no trend: a full
// window (at least minN readings spanning 90 % of d; the count follows
// from the sampling rate) whose relative least-squares slope is below
// limit per second, allowing for the slope's own noise (two standard
// errors). At the turning point of an overshoot (a brightness control that
// overshoots and comes back) the slope over the whole window is near zero
// while the signal is still moving: a window whose halves both slope
// significantly, in opposite directions, is not steady.
func steady(xs []timedValue, d time.Duration, limit float64, minN int) bool {
	w := window(xs, d)
	if len(w) < minN || w[len(w)-1].t-w[0].t < d*9/10 {
		return false
	}
	rel, se, ok := trend(w)
	if !ok || math.Abs(rel) >= limit+2*se {
		return false
	}
	if h := len(w) / 2; h >= minN {
		r1, s1, ok1 := trend(w[:h])
		r2, s2, ok2 := trend(w[h:])
		if ok1 && ok2 && r1*r2 < 0 && math.Abs(r1) >= limit+2*s1 && math.Abs(r2) >= limit+2*s2 {
			return false
		}
	}
	return true
}

// pairs aligns luminance readings with the kerma rate interpolated
// linearly at each luminance reading's host time, and returns the ratios
// L/K. Luminance readings outside the span of the kerma readings are left
// out.
func pairs(lum, kerma []timedValue) []float64 {
	return values(ratioSeries(lum, kerma))
}

func values(xs []timedValue) []float64 {
	out := make([]float64, len(xs))
	for i, x := range xs {
		out[i] = x.v
	}
	return out
}

// lockedRipple is what phaseLocked found: the readings repeat every Every
// readings, their phase groups' means spread by Dev (the largest
// relative distance of a group's mean from the mean of all).
type lockedRipple struct {
	Every int
	Dev   float64
}

// lockedMaxEvery is the longest repetition phaseLocked looks for: a
// meter read every 100 ms under 30, 25, 15, 12.5, 10 or 7.5 pulses a
// second sees its readings repeat every 1, 2, 3, 4 or 5 readings (3
// pulse periods in 2 readings at 15 pulses a second, 4 in 3 at 7.5 and
// so on).
const lockedMaxEvery = 5

// lockedAlpha is the false-alarm probability of phaseLocked's test on
// readings with white noise, for all the repetitions it tries together.
const lockedAlpha = 1e-6

// phaseLocked tests whether readings xs, taken at a fixed reading period,
// follow a pattern that repeats every q readings (q = 2..lockedMaxEvery):
// the signature of a pulsed beam read by a meter fast enough to follow
// the pulses, at a reading period commensurate with the pulse period, so
// that the readings see the same few phases of the pulse cycle again and
// again. Their mean is then the mean of those phases, not of the cycle,
// however many readings are averaged, and the readings' spread does not
// show the bias. For each q the readings are grouped by their index modulo
// q and the groups' means compared by one-way analysis of variance (F
// test, e.g. Montgomery, Design and Analysis of Experiments, ch. 3, from
// memory): white noise gives F distributed as F(q-1, n-q); a slow meter's
// correlated readings make neighbouring readings alike and the groups'
// means closer still. A pattern counts when its F test is significant at
// lockedAlpha (Bonferroni over the q tried) and the groups' means stray
// more than minDev (relative) from the mean of all: a ripple too small to
// move the mean beyond that does no harm.
func phaseLocked(xs []float64, minDev float64) (lockedRipple, bool) {
	n := len(xs)
	mean, _ := meanSD(xs)
	if mean == 0 || math.IsNaN(mean) {
		return lockedRipple{}, false
	}
	for q := 2; q <= lockedMaxEvery; q++ {
		if n < 4*q {
			break
		}
		sums, counts := make([]float64, q), make([]float64, q)
		for i, x := range xs {
			sums[i%q] += x
			counts[i%q]++
		}
		var between, within, dev float64
		for g := range q {
			gm := sums[g] / counts[g]
			between += counts[g] * (gm - mean) * (gm - mean)
			dev = math.Max(dev, math.Abs(gm-mean)/math.Abs(mean))
		}
		for i, x := range xs {
			d := x - sums[i%q]/counts[i%q]
			within += d * d
		}
		d1, d2 := float64(q-1), float64(n-q)
		if dev <= minDev {
			continue
		}
		if within == 0 {
			return lockedRipple{Every: q, Dev: dev}, true
		}
		f := (between / d1) / (within / d2)
		p := distuv.F{D1: d1, D2: d2}.Survival(f)
		if p < lockedAlpha/float64(lockedMaxEvery-1) {
			return lockedRipple{Every: q, Dev: dev}, true
		}
	}
	return lockedRipple{}, false
}
