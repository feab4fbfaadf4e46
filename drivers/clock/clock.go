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
type Cadence struct {
	clk     Clock
	period  time.Duration
	next    time.Duration // the clock's Mono of the next tick
	started bool
}

// NewCadence returns a cadence of period on clk; its first Wait returns
// at once and starts the schedule.
func NewCadence(clk Clock, period time.Duration) *Cadence {
	return &Cadence{clk: clk, period: period}
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
		return ctx.Err()
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
