// Package clock gives kermalux one notion of time that can be the real
// clock, a scaled clock (the simulator and the engine run faster than real
// time in the demo, sharing one clock), or a manual clock for tests.
//
// Everything that waits takes a context and a Clock; nothing calls
// time.Sleep directly, so tests are deterministic and fast.
package clock

import (
	"context"
	"sync"
	"time"
)

// Clock is the time source. Mono is monotonic time since the clock's origin.
type Clock interface {
	Now() time.Time
	Mono() time.Duration
	// Sleep waits d of this clock's time or until ctx ends.
	Sleep(ctx context.Context, d time.Duration) error
	// Real converts a duration of this clock into real (wall) time, for I/O
	// timeouts that the operating system measures.
	Real(d time.Duration) time.Duration
}

// Real is the system clock.
type realClock struct{ origin time.Time }

// NewReal returns the system clock with its origin now.
func NewReal() Clock { return realClock{origin: time.Now()} }

func (c realClock) Now() time.Time                     { return time.Now() }
func (c realClock) Mono() time.Duration                { return time.Since(c.origin) }
func (c realClock) Real(d time.Duration) time.Duration { return d }
func (c realClock) Sleep(ctx context.Context, d time.Duration) error {
	return sleepReal(ctx, d)
}

func sleepReal(ctx context.Context, d time.Duration) error {
	if d <= 0 {
		return ctx.Err()
	}
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-ctx.Done():
		return ctx.Err()
	case <-t.C:
		return nil
	}
}

// Scaled runs Factor times faster than real time from its origin. The wall
// time it reports starts at Start.
type Scaled struct {
	Factor float64
	Start  time.Time
	origin time.Time
}

// NewScaled returns a clock running factor times faster than real time,
// whose Now starts at start.
func NewScaled(factor float64, start time.Time) *Scaled {
	if factor <= 0 {
		factor = 1
	}
	return &Scaled{Factor: factor, Start: start, origin: time.Now()}
}

func (c *Scaled) Mono() time.Duration {
	return time.Duration(float64(time.Since(c.origin)) * c.Factor)
}
func (c *Scaled) Now() time.Time { return c.Start.Add(c.Mono()) }
func (c *Scaled) Real(d time.Duration) time.Duration {
	return time.Duration(float64(d) / c.Factor)
}
func (c *Scaled) Sleep(ctx context.Context, d time.Duration) error {
	return sleepReal(ctx, c.Real(d))
}

// Manual is a clock that moves only when told (Advance) or when something
// sleeps on it: Sleep advances the clock by d at once. It suits tests of
// code with one goroutine waiting at a time.
type Manual struct {
	mu    sync.Mutex
	start time.Time
	mono  time.Duration
}

// NewManual returns a manual clock whose Now starts at start.
func NewManual(start time.Time) *Manual { return &Manual{start: start} }

func (c *Manual) Mono() time.Duration {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.mono
}
func (c *Manual) Now() time.Time                     { return c.start.Add(c.Mono()) }
func (c *Manual) Real(d time.Duration) time.Duration { return 0 }

// Advance moves the clock forward by d.
func (c *Manual) Advance(d time.Duration) {
	c.mu.Lock()
	c.mono += d
	c.mu.Unlock()
}

// Sleep advances the clock by d and returns at once (unless ctx is done).
func (c *Manual) Sleep(ctx context.Context, d time.Duration) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if d > 0 {
		c.Advance(d)
	}
	return nil
}

// Cadence paces a loop on a fixed schedule of a Clock: the n-th tick is
// at start + n·period (start is the first Wait), not at the end of the
// previous wait plus a period, so the time the work between two ticks
// takes, a loaded host or a timer that fires late (a scaled clock turns a
// millisecond of real lateness into many of its own) does not slow the
// loop down: it runs once a period of the clock's time on average. A tick
// missed by more than a period is not made up in a burst: Wait returns at
// once and the schedule goes on from the last grid point passed.
//
// A dithered cadence (Dither) keeps the grid but ticks at a random
// instant within each period of it.
type Cadence struct {
	clk     Clock
	period  time.Duration
	next    time.Duration // the clock's Mono of the next tick (dithered: of the next slot's start)
	started bool

	dither float64 // 0: ticks on the grid; else at a random instant within each slot
	seed   uint64
	slot   uint64 // the number of the slot that starts at next
}

// NewCadence returns a cadence of period on clk; its first Wait returns
// at once and starts the schedule.
func NewCadence(clk Clock, period time.Duration) *Cadence {
	return &Cadence{clk: clk, period: period}
}

// Dither makes the cadence tick once within each period of its grid (each
// slot) at a random instant: fraction·u of the way into the slot, u
// uniform in [0, 1) and drawn afresh for every slot (SplitMix64 of seed
// and the slot's number: a seed gives the same ticks every time), so the
// ticks still come once a period on average. With fraction 1 the ticks
// are a stratified random sample of time (one uniform instant in each
// slot): the mean of any signal over the ticks is then an unbiased
// estimate of its mean over the slots (Cochran, Sampling Techniques, 3rd
// ed., 1977, ch. 5, stratified random sampling, from memory), however
// the signal repeats. Two ticks may then come as close as the work
// between them allows, or two periods apart.
//
// Why: a meter read on a fixed grid under a pulsed beam whose pulse
// period is commensurate with the grid (100 ms readings at 10 or 30
// pulses a second see one phase of the pulse cycle, at 15 two) averages
// those phases, not the cycle, whatever the number of readings; its
// ripple never shows in their spread. Read at stratified instants, the
// readings' phases cover the cycle evenly and the ripple shows as
// scatter, which the type A uncertainty counts.
func (c *Cadence) Dither(fraction float64, seed uint64) {
	c.dither, c.seed = min(max(fraction, 0), 1), seed
}

// offset is where in slot n the dithered tick falls.
func (c *Cadence) offset(n uint64) time.Duration {
	u := float64(splitMix64(c.seed^(n*0x2545f4914f6cdd1d))>>11) / (1 << 53)
	return time.Duration(c.dither * u * float64(c.period))
}

// splitMix64 is the output function of SplitMix64 (Steele, Lea and
// Flood, "Fast splittable pseudorandom number generators", OOPSLA 2014):
// a well-mixed 64-bit value of each input, for ticks that depend on their
// slot's number and not on the calls before them.
func splitMix64(z uint64) uint64 {
	z += 0x9e3779b97f4a7c15
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	return z ^ (z >> 31)
}

// Period returns the cadence's period.
func (c *Cadence) Period() time.Duration { return c.period }

// Wait waits for the next tick or until ctx ends. A tick already passed
// returns at once. Use a Cadence from one goroutine.
func (c *Cadence) Wait(ctx context.Context) error {
	now := c.clk.Mono()
	if !c.started || c.period <= 0 {
		c.started = true
		c.next = now + c.period
		c.slot = 1
		return ctx.Err()
	}
	if c.dither > 0 {
		// Slots wholly passed are skipped (not made up in a burst);
		// in the slot at hand, wait for its instant, or tick now when
		// it has passed.
		if passed := (now - c.next) / c.period; passed > 0 {
			c.next += passed * c.period
			c.slot += uint64(passed)
		}
		tick := c.next + c.offset(c.slot)
		c.next += c.period
		c.slot++
		if now >= tick {
			return ctx.Err()
		}
		return c.clk.Sleep(ctx, tick-now)
	}
	if late := now - c.next; late >= 0 {
		// On time or late: tick now; the next one stays on the grid
		// (one period after the last grid point passed).
		c.next += (late/c.period + 1) * c.period
		return ctx.Err()
	}
	if err := c.clk.Sleep(ctx, c.next-now); err != nil {
		return err
	}
	c.next += c.period
	return nil
}

// Reset starts the schedule again at the next Wait (which returns at
// once).
func (c *Cadence) Reset() { c.started = false }
