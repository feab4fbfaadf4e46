package engine

import (
	"context"
	"fmt"
	"math"
	"slices"
	"sort"
	"time"

	"kermalux/procedures/entry"
)

// A beam attempt goes through these phases, each journalled as an
// evPhase event when it is entered (ENGINE.md, "The beam attempt"):
//
//	waiting   the beam prompt was answered; no meter is above its threshold
//	rising    a meter saw the beam; not every meter of the step has yet
//	settling  every meter of the step sees the beam; waiting for the
//	          brightness control and the meters' response to settle
//	sampling  settled: readings enter the result until precise enough
//	releasing "Release the beam" was said; waiting for every meter to fall
//	off       every meter that rose has fallen: the exposure is timed
//	failed    the attempt ends without a result (the reason is said)
type phase string

const (
	phWaiting   phase = "waiting"
	phRising    phase = "rising"
	phSettling  phase = "settling"
	phSampling  phase = "sampling"
	phReleasing phase = "releasing"
	phOff       phase = "off"
	phFailed    phase = "failed"
)

// evPhase: a beam attempt entered a phase (Detail: "rising: photometer").
const evPhase = "attempt_phase"

// enterPhase moves the attempt to ph and journals it. A journal that fails
// here is caught by the next reading (journalErr).
func (e *Engine) enterPhase(ctx context.Context, a *attempt, ph phase, detail string) {
	if a.phase == ph {
		return
	}
	a.phase = ph
	d := string(ph)
	if detail != "" {
		d += ": " + detail
	}
	_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evPhase, Detail: d, BeamOn: e.st.beamOn.Seconds()})
}

// track is one meter's signal in a beam attempt: its beam-off level and
// noise, measured just before the prompt, the threshold above which it
// sees the beam, and every usable reading it gave during the attempt
// (for timing the exposure). Kept by role, so any sensor the attempt
// reads detects and times the beam the same way.
type track struct {
	role          string
	dark          float64 // mean of the beam-off readings (corrected scale)
	noise         float64 // their experimental standard deviation
	step          float64 // display resolution, corrected scale (0: not known)
	thresh        float64
	risen         bool         // has been above the threshold in this exposure
	overThreshold bool         // is above it now (two readings at or below end it)
	low           int          // consecutive readings at or below the threshold
	under         int          // readings under range since the prompt
	over          int          // readings over range since the prompt: its fall cannot time the beam
	peak          float64      // highest reading since it rose
	all           []timedValue // usable readings since the prompt
}

// minFloor is the smallest threshold above the dark a meter may use: far
// below any beam signal at an intensifier (a few hundredths of a µGy/s at
// the input, tenths of a cd/m² behind a lead disk), far above rounding.
func (e *Engine) minFloor(role string) float64 {
	if role == Dosimeter {
		return e.cfg.Settings.BeamFloor
	}
	return 1e-3 // cd/m²
}

// newTrack sets a meter's beam threshold from its own beam-off readings:
// dark + max(k·σ, 3 display steps, half the dark, the floor), so a
// dim light (under 1 cd/m² behind a lead disk) is seen above a quiet dark
// and a noisy or coarse meter does not see a beam in its own noise. Half
// the dark, because the photometer is moved between its dark reading and
// the beam (a uniformity map) and a vignetted dark differs from place to
// place by a fifth or more.
//
// A meter still falling from the last exposure (a photometer's afterglow
// through its response time) while its dark is read would set the
// threshold from the fall, above a dim beam's light: when the first half
// of the dark readings stands out of the second half's noise (more than
// three of its standard deviations and more than the floor), the second
// half alone is the dark.
func (e *Engine) newTrack(role string, dark []float64, step float64) *track {
	if n := len(dark); n >= 6 {
		m1, _ := meanSD(dark[:n/2])
		m2, sd2 := meanSD(dark[n/2:])
		if d := math.Abs(m1 - m2); d > 3*sd2 && d > e.minFloor(role) {
			dark = dark[n/2:]
		}
	}
	m, sd := meanSD(dark)
	t := &track{role: role, dark: m, noise: sd, step: step}
	t.thresh = m + max(e.cfg.Settings.BeamSigmas*sd, 3*step, 0.5*math.Abs(m), e.minFloor(role))
	return t
}

// seeStatus adds one reading to the track and reports whether it made
// the meter rise (first reading above the threshold) or fall (the second
// of two in a row no longer showing the beam, after rising). v is the
// corrected value; usable is false for an under-range, over-range or
// faulty reading, over true for an over-range one (counted: a meter
// clipped at its maximum cannot time the fall).
func (t *track) seeStatus(at time.Duration, v float64, usable, over bool) (rose, fell bool) {
	if over {
		t.over++
	}
	if usable {
		t.all = append(t.all, timedValue{at, v})
	}
	if usable && t.high(v) {
		t.low = 0
		t.peak = math.Max(t.peak, v)
		if !t.overThreshold {
			t.overThreshold = true
			if !t.risen {
				t.risen = true
				return true, false
			}
		}
		return false, false
	}
	if t.overThreshold {
		t.low++
		if t.low >= 2 {
			t.overThreshold = false
			return false, true
		}
	}
	return false, false
}

// high reports whether v shows the beam: above the threshold and, once
// the meter has risen, above a tenth of the way from its dark to its
// peak. The second condition ends an exposure whose beam-off level is not
// the dark measured before it (a photometer moved to a place whose own
// dark light is brighter, a meter that drifted): a fall to a tenth is a
// beam switched off, or dropped, whatever the threshold says.
func (t *track) high(v float64) bool {
	if v <= t.thresh {
		return false
	}
	return !t.risen || v-t.dark > 0.1*(t.peak-t.dark)
}

// riseTime is when the track first crossed its threshold: interpolated
// between the last reading below and the first above. For a meter with a
// first-order response to a beam that steps on, the crossing lags the
// beam by τ·thr/P, a few milliseconds for a threshold a few percent of
// the beam level.
func (t *track) riseTime() (time.Duration, bool) {
	for i, x := range t.all {
		if x.v > t.thresh {
			if i == 0 {
				return x.t, true
			}
			p := t.all[i-1]
			return interpCross(p, x, t.thresh), true
		}
	}
	return 0, false
}

// fallTime estimates when the beam went off from this meter's fall: the
// level P it fell from, the last crossings of half and a quarter of the
// way from P down to the dark, and, for a first-order response (the
// half-to-quarter interval is τ·ln 2, as is the delay of the half
// crossing itself), t½ − (t¼ − t½). A meter that falls within one reading
// gives the half crossing.
func (t *track) fallTime() (time.Duration, bool) {
	n := len(t.all)
	if n < 2 {
		return 0, false
	}
	// The last reading above the threshold.
	k := -1
	for i := n - 1; i >= 0; i-- {
		if t.all[i].v > t.thresh && t.all[i].v-t.dark > 0.1*(t.peak-t.dark) {
			k = i
			break
		}
	}
	if k < 0 || k == n-1 {
		return 0, false
	}
	// P: the level the meter fell from, where the smoothed series last
	// stopped falling before that reading.
	// Walked back from there: through the fall and its noisy tail (a rise
	// within the noise does not stop the walk) up to the highest point
	// before the signal drops again by more than the noise (the rise).
	sm := smooth(t.all)
	tol := 3 * diffNoise(t.all)
	e := k
	for i := k; i > 0; i-- {
		if sm[i-1] > sm[e] {
			e = i - 1
		}
		if sm[i-1] < sm[e]-tol-0.02*math.Abs(sm[e]) {
			break
		}
	}
	p := math.Max(sm[e], t.all[e].v)
	// The beam may have gone off at any time since the reading before.
	edge := t.all[max(e-1, 0)].t
	if p <= t.thresh {
		p = t.all[k].v
	}
	half := t.dark + (p-t.dark)/2
	quarter := t.dark + (p-t.dark)/4
	lastDown := func(level float64, from int) (time.Duration, int, bool) {
		// The last reading at or above level from which the signal
		// stays below it to the end.
		j := -1
		for i := n - 1; i >= from; i-- {
			if t.all[i].v >= level {
				j = i
				break
			}
		}
		if j < 0 || j == n-1 {
			return 0, 0, false
		}
		return interpCross(t.all[j], t.all[j+1], level), j, true
	}
	th, j, ok := lastDown(half, 0)
	if !ok {
		return 0, false
	}
	tq, _, ok := lastDown(quarter, j)
	if !ok || tq < th {
		return th, true
	}
	// Not before the meter began to fall.
	return max(th-(tq-th), edge), true
}

// interpCross is the time at which the straight line from a to b crosses
// level.
func interpCross(a, b timedValue, level float64) time.Duration {
	if b.v == a.v {
		return b.t
	}
	f := (level - a.v) / (b.v - a.v)
	f = math.Min(math.Max(f, 0), 1)
	return a.t + time.Duration(f*float64(b.t-a.t))
}

// exposure is the beam-on time of the attempt's exposure, from the first
// meter that rose to the last that fell, each with its response's delay
// taken out (riseTime, fallTime); ok is false when the tracks cannot tell.
func (a *attempt) exposure() (time.Duration, bool) {
	on, off := time.Duration(math.MaxInt64), time.Duration(0)
	timed := false
	for _, role := range a.roles {
		t := a.tracks[role]
		if t == nil || !t.risen {
			continue
		}
		r, ok1 := t.riseTime()
		if !ok1 {
			continue
		}
		on = min(on, r)
		if t.over > 0 {
			// Clipped at its range maximum: the level it fell from is not
			// known, so neither is its half-way point.
			continue
		}
		f, ok2 := t.fallTime()
		if !ok2 {
			continue
		}
		timed = true
		off = max(off, f)
	}
	if !timed || off <= on {
		return 0, false
	}
	return off - on, true
}

// approach is the fit of an exponential approach to a settled level c
// (fitApproach): d is what remains of the approach at the last reading,
// ud its standard uncertainty, τ its time constant; sig is whether the
// approach is significant against a constant (an F test at about the
// 0.1 % level).
type approach struct {
	c, d, ud, tau float64
	sig           bool
	n             int
}

// taus is the grid of time constants fitted (0.05 s to 12 s, 14 values:
// the fit's remainder changes little between neighbours, and the board
// fits several series five times a second).
var taus = func() []float64 {
	var out []float64
	for t := 0.05; t <= 12; t *= 1.5 {
		out = append(out, t)
	}
	return out
}()

// fitApproach fits the exponential approach by linear least squares in
// (c, a) of v = c + a·ψ(t), ψ(t) = exp(−(t − t₀)/τ) from the first reading
// t₀ (so ψ ≤ 1 and the sums stay well conditioned), for each τ of the
// grid, and keeps the best; the remainder at the last reading is
// d = a·ψ(t_end). Its standard uncertainty follows from the fit's
// covariance (JCGM 100:2008 H.3), the noise variance from the residuals,
// inflated for autocorrelated readings by n/n_eff (effectiveN).
func fitApproach(xs []timedValue) (approach, bool) {
	n := len(xs)
	if n < 6 {
		return approach{}, false
	}
	t0, end := xs[0].t, xs[n-1].t
	vals := values(xs)
	mean, sd := meanSD(vals)
	rss0 := sd * sd * float64(n-1)
	best := approach{n: n, c: mean}
	bestRSS := math.Inf(1)
	var bS00, bS01, bS11, bEnd float64
	// An approach faster than two reading periods cannot be told from
	// the noise of the last reading or two: not fitted.
	period := (end - t0).Seconds() / float64(n-1)
	for _, tau := range taus {
		if tau < 2*period {
			continue
		}
		var s00, s01, s11, sy, s1y float64
		for _, x := range xs {
			psi := math.Exp(-(x.t - t0).Seconds() / tau)
			s00++
			s01 += psi
			s11 += psi * psi
			sy += x.v
			s1y += psi * x.v
		}
		det := s00*s11 - s01*s01
		if det <= 1e-9*s00*s11 {
			continue
		}
		c := (s11*sy - s01*s1y) / det
		amp := (s00*s1y - s01*sy) / det
		var rss float64
		for _, x := range xs {
			r := x.v - c - amp*math.Exp(-(x.t-t0).Seconds()/tau)
			rss += r * r
		}
		if rss < bestRSS {
			bestRSS = rss
			psiEnd := math.Exp(-(end - t0).Seconds() / tau)
			best.c, best.d, best.tau = c, amp*psiEnd, tau
			bS00, bS01, bS11, bEnd = s00, s01, s11, psiEnd
		}
	}
	if math.IsInf(bestRSS, 1) {
		return best, true
	}
	// The residuals' autocorrelation (a meter slower than its reading
	// period), not the values': a trend is not noise.
	res := make([]float64, n)
	for i, x := range xs {
		res[i] = x.v - best.c - best.d*math.Exp((end-x.t).Seconds()/best.tau)
	}
	s2 := bestRSS / float64(n-3)
	if ne := effectiveN(res); ne < float64(n) {
		s2 *= float64(n) / ne
	}
	det := bS00*bS11 - bS01*bS01
	best.ud = math.Sqrt(s2*bS00/det) * bEnd
	switch {
	case s2 > 0:
		// The best of the grid's τ is chosen after seeing the data, so
		// the F statistic is held to a higher bar than one fixed model's.
		best.sig = (rss0-bestRSS)/2/s2 > 16
	default:
		best.sig = rss0 > 0
	}
	return best, true
}

// settledSeries reports whether a series (one meter's readings, or the
// ratio of two, since the meter rose) has settled to within tol of its
// level. Its later three quarters and its later half are each fitted
// with an exponential approach (the earliest quarter is left out: it
// holds the meters' own rise, which one exponential cannot follow): a
// significant approach whose remainder at the last reading could exceed
// tol (the fitted remainder plus two of its standard uncertainties) is
// not settled, so an overshoot decaying slowly is not settled however
// flat its last second looks. The later half must also show no
// significant straight-line drift over its span larger than tol. A noisy
// flat signal is settled. minN readings at least in each part.
func settledSeries(xs []timedValue, tol float64, minN int) bool {
	if len(xs) < 2*minN {
		return false
	}
	if len(xs) > maxFit {
		// Only the latest readings say whether the signal has settled
		// (and a fit's cost grows with its length).
		xs = xs[len(xs)-maxFit:]
	}
	// A meter's rise is over when it first reaches 90 % of its present
	// level; half as long again must have passed since (for a first-order
	// rise, what remains is then under 3 % and the fit below sees it).
	sm := smooth(xs)
	level := sm[len(sm)-1]
	i90 := 0
	for i, v := range sm {
		if math.Abs(v-sm[0]) >= 0.9*math.Abs(level-sm[0]) {
			i90 = i
			break
		}
	}
	rise := xs[i90].t - xs[0].t
	if xs[len(xs)-1].t-xs[i90].t < rise/2 {
		return false
	}
	// An overshoot's peak (or an undershoot's trough) inside the series:
	// the approach to fit starts there, where one exponential can follow
	// it.
	from := i90
	hi, lo := from, from
	for i := from; i < len(sm); i++ {
		if sm[i] > sm[hi] {
			hi = i
		}
		if sm[i] < sm[lo] {
			lo = i
		}
	}
	// Only an extreme that stands out of the noise (three of its
	// standard deviations, and more than tol, from the present level) is
	// an overshoot: a noisy flat signal has its highest reading anywhere.
	noise := diffNoise(xs[from:])
	for _, ext := range []int{hi, lo} {
		d := math.Abs(sm[ext] - level)
		if ext > from && ext < len(sm)-minN && d > 3*noise && d > tol*math.Abs(level) {
			from = max(from, ext)
		}
	}
	rest := xs[from:]
	if len(rest) < 2*minN {
		return false
	}
	for _, f := range []float64{0, 0.5} {
		w := rest[int(f*float64(len(rest))):]
		if len(w) < minN {
			if f == 0 {
				return false
			}
			continue
		}
		fit, ok := fitApproach(w)
		if !ok {
			return false
		}
		m, _ := meanSD(values(w))
		if m == 0 {
			continue
		}
		if fit.sig && (math.Abs(fit.d)+2*fit.ud) > within(tol, w)*math.Abs(m) {
			return false
		}
	}
	w := rest[len(rest)/2:]
	if rel, se, ok := trend(w); ok {
		span := (w[len(w)-1].t - w[0].t).Seconds()
		if math.Abs(rel) > 3*se && math.Abs(rel)*span > within(tol, w) {
			return false
		}
	}
	return true
}

// within is the remainder settling admits over a window: tol, or twice
// the relative type A of the window's mean when the noise is larger (a
// remainder the readings cannot show apart from their own scatter; it
// enters U through residualSettling).
func within(tol float64, w []timedValue) float64 {
	rel, _ := relTypeA(values(w))
	if math.IsInf(rel, 0) || math.IsNaN(rel) {
		return tol
	}
	return math.Max(tol, 2*rel)
}

// diffNoise estimates a series' noise (standard deviation) from the
// differences of successive readings, robustly: their median absolute
// value over 0.6745·√2 (the normal distribution's MAD), so a trend adds
// almost nothing to it.
func diffNoise(xs []timedValue) float64 {
	if len(xs) < 3 {
		return 0
	}
	d := make([]float64, len(xs)-1)
	for i := 1; i < len(xs); i++ {
		d[i-1] = math.Abs(xs[i].v - xs[i-1].v)
	}
	sort.Float64s(d)
	return d[len(d)/2] / (0.6745 * math.Sqrt2)
}

// maxFit is the most readings a settling fit looks at: 12 s of a meter
// read ten times a second.
const maxFit = 120

// smooth is the running median of three of a series' values.
func smooth(xs []timedValue) []float64 {
	out := make([]float64, len(xs))
	for i := range xs {
		lo, hi := max(i-1, 0), min(i+1, len(xs)-1)
		w := make([]float64, 0, 3)
		for j := lo; j <= hi; j++ {
			w = append(w, xs[j].v)
		}
		sort.Float64s(w)
		out[i] = w[len(w)/2]
	}
	return out
}

// residualSettling is the relative change of the sampled readings' level
// that the data do not rule out, as the half-width of a rectangular
// distribution (JCGM 100:2008 4.3.7): the mean remainder of a significant
// exponential approach over the samples (the fit of the whole series since
// the meter rose), or half the significant part of a straight-line drift
// across them (its slope less two standard errors). Zero for a settled
// signal with no detectable trend.
func residualSettling(all, sampled []timedValue) float64 {
	if len(sampled) < 3 {
		return 0
	}
	m, _ := meanSD(values(sampled))
	if m == 0 {
		return 0
	}
	var res float64
	if fit, ok := fitApproach(all); ok && fit.sig {
		end := all[len(all)-1].t
		var s float64
		for _, x := range sampled {
			s += fit.d * math.Exp((end-x.t).Seconds()/fit.tau)
		}
		res = math.Abs(s/float64(len(sampled))) / math.Abs(m)
	}
	if rel, se, ok := trend(sampled); ok {
		span := (sampled[len(sampled)-1].t - sampled[0].t).Seconds()
		res = math.Max(res, math.Max(math.Abs(rel)-2*se, 0)*span/2)
	}
	return res
}

// ratioSeries is the time-aligned ratio of two series (the luminance
// over the kerma rate interpolated at each luminance reading), with the
// luminance readings' times.
func ratioSeries(lum, kerma []timedValue) []timedValue {
	var out []timedValue
	j := 0
	for _, l := range lum {
		for j+1 < len(kerma) && kerma[j+1].t < l.t {
			j++
		}
		if j+1 >= len(kerma) || kerma[j].t > l.t {
			continue
		}
		k1, k2 := kerma[j], kerma[j+1]
		k := k1.v
		if k2.t != k1.t {
			f := float64(l.t-k1.t) / float64(k2.t-k1.t)
			k = k1.v + f*(k2.v-k1.v)
		}
		if k > 0 {
			out = append(out, timedValue{l.t, l.v / k})
		}
	}
	return out
}

// settleTol is the relative remainder of an approach, or drift, that
// settling admits: half the type A target, so that what is left is small
// beside the repeatability the stopping rule allows; what is left still
// enters U (residualSettling).
func (e *Engine) settleTol(a *attempt) float64 {
	return e.target(a) / 2
}

// target is the attempt's type A target: the relative expanded
// uncertainty of repeatability (the mean's type A, at its coverage
// factor) at which sampling stops. The procedure's own, else the bench's.
func (e *Engine) target(a *attempt) float64 {
	if a.spec.Precision > 0 {
		return a.spec.Precision
	}
	return e.cfg.Settings.Precision
}

// minSamples is the smallest number of readings of each meter the
// stopping rule looks at, and minSpan the least time they must cover (the
// readings' span, each standing for one reading interval): with a fixed
// count alone, four readings of a 50 Hz meter would be 80 ms of signal, a
// single pulse of a pulsed fluoroscope at 7.5 pulses a second, and a
// slow meter's four would be seconds. Half a second is several pulses at
// 7.5 pulses a second and five readings of a 10 Hz meter (common
// practice, not from a standard).
const (
	minSamples = 4
	minSpan    = 500 * time.Millisecond
)

// enough reports whether the position's samples may end sampling: at
// least minPairs (and minSamples) of the count, and each meter's readings
// covering minSpan.
func (p positionStats) enough(minPairs int) bool {
	if p.count() < max(minPairs, minSamples) {
		return false
	}
	for _, m := range p.Meters {
		if m.Span < minSpan.Seconds() {
			return false
		}
	}
	return true
}

// covered is the time a meter's readings stand for: their span, with
// each reading counted for one reading interval.
func covered(xs []timedValue) time.Duration {
	if len(xs) < 2 {
		return 0
	}
	span := xs[len(xs)-1].t - xs[0].t
	return span * time.Duration(len(xs)) / time.Duration(len(xs)-1)
}

// isSettled: every meter of the step has risen and its series since, and
// the ratio of the two meters when the step reads both, is settled
// (settledSeries).
func (e *Engine) isSettled(a *attempt) bool {
	tol := e.settleTol(a)
	minN := max(e.cfg.Settings.MinPairs, 5)
	for _, role := range a.spec.Meters {
		if !settledSeries(a.series[role], tol, minN) {
			return false
		}
	}
	if a.inStep[Dosimeter] && a.inStep[Photometer] {
		if !settledSeries(ratioSeries(a.series[Photometer], a.series[Dosimeter]), tol, minN) {
			return false
		}
	}
	return true
}

// drifting: the samples taken since settling show a significant drift
// that would move the mean by more than half the target, for a meter of
// the step or for the ratio: settling was declared too early (a
// brightness control that starts moving again), and sampling restarts.
func (e *Engine) drifting(a *attempt) (string, bool) {
	tgt := e.target(a)
	check := func(xs []timedValue) bool {
		if len(xs) < 8 {
			return false
		}
		rel, se, ok := trend(xs)
		span := (xs[len(xs)-1].t - xs[0].t).Seconds()
		return ok && math.Abs(rel) > 3*se && math.Abs(rel)*span > tgt/2
	}
	for _, role := range a.spec.Meters {
		if check(after(a.series[role], a.settled)) {
			return role, true
		}
	}
	if a.inStep[Dosimeter] && a.inStep[Photometer] {
		if check(ratioSeries(after(a.series[Photometer], a.settled), after(a.series[Dosimeter], a.settled))) {
			return "ratio", true
		}
	}
	return "", false
}

// settleResiduals fills p.Settle with each meter's residual settling
// (and the ratio's), from the attempt's data.
func (a *attempt) settleResiduals(p *positionStats) {
	p.Settle = map[string]float64{}
	for _, role := range a.spec.Meters {
		p.Settle[role] = residualSettling(a.series[role], after(a.series[role], a.settled))
	}
	if a.inStep[Dosimeter] && a.inStep[Photometer] {
		all := ratioSeries(a.series[Photometer], a.series[Dosimeter])
		p.Settle["ratio"] = residualSettling(all, after(all, a.settled))
	}
}

// risenAll: every meter of the step has seen the beam.
func (a *attempt) risenAll() bool {
	for _, role := range a.spec.Meters {
		if t := a.tracks[role]; t == nil || !t.risen {
			return false
		}
	}
	return true
}

// anyAbove: some meter of the attempt sees the beam now.
func (a *attempt) anyAbove() bool {
	for _, t := range a.tracks {
		if t.overThreshold {
			return true
		}
	}
	return false
}

// notRisen names the meters of the step that have not seen the beam, and
// whether one of them reads under range.
func (a *attempt) notRisen() ([]string, bool) {
	var out []string
	under := false
	for _, role := range a.spec.Meters {
		if t := a.tracks[role]; t == nil || !t.risen {
			out = append(out, role)
			under = under || (t != nil && t.under > 0)
		}
	}
	slices.Sort(out)
	return out, under
}

// describeRise is the journal's detail for a meter that rose.
func describeRise(t *track, v float64) string {
	return fmt.Sprintf("%s %.4g above threshold %.4g (dark %.4g, noise %.2g)", t.role, v, t.thresh, t.dark, t.noise)
}
