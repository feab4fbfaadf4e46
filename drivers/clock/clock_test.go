package clock

import (
	"context"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat/distuv"
)

func TestManualAdvancesOnlyWhenTold(t *testing.T) {
	start := time.Date(2026, 3, 10, 9, 0, 0, 0, time.UTC)
	c := NewManual(start)
	if c.Mono() != 0 || !c.Now().Equal(start) {
		t.Fatalf("new manual clock at %v / %v", c.Mono(), c.Now())
	}
	if err := c.Sleep(context.Background(), 1500*time.Millisecond); err != nil {
		t.Fatal(err)
	}
	c.Advance(500 * time.Millisecond)
	if c.Mono() != 2*time.Second || !c.Now().Equal(start.Add(2*time.Second)) {
		t.Errorf("after 1.5 s sleep and 0.5 s advance: %v, %v", c.Mono(), c.Now())
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := c.Sleep(ctx, time.Hour); err == nil || c.Mono() != 2*time.Second {
		t.Errorf("sleep on a cancelled context: err %v, clock %v", err, c.Mono())
	}
}

func TestScaledRunsFaster(t *testing.T) {
	c := NewScaled(50, time.Unix(0, 0))
	if got := c.Real(10 * time.Second); got != 200*time.Millisecond {
		t.Errorf("10 s of a 50× clock is %v of real time, want 200ms", got)
	}
	before := time.Now()
	if err := c.Sleep(context.Background(), time.Second); err != nil {
		t.Fatal(err)
	}
	real := time.Since(before)
	// One simulated second at 50× is 20 ms of real time; the clock has then
	// moved at least one simulated second.
	if c.Mono() < time.Second || real > time.Second {
		t.Errorf("slept 1 s simulated: clock %v, real %v", c.Mono(), real)
	}
	if NewScaled(-3, time.Time{}).Factor != 1 {
		t.Error("a non-positive factor must fall back to real time")
	}
}

func TestRealSleepHonoursContext(t *testing.T) {
	c := NewReal()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Millisecond)
	defer cancel()
	if err := c.Sleep(ctx, time.Minute); err == nil {
		t.Error("a one-minute sleep returned no error when its context ended")
	}
}

// lateClock is a manual clock whose sleeps overshoot by a seeded random
// lateness up to max, as timers do on a loaded host, and far more so in
// a scaled clock's time (a millisecond of real lateness is 20 ms at 20×).
type lateClock struct {
	*Manual
	rnd *rand.Rand
	max time.Duration
}

func (c *lateClock) Sleep(ctx context.Context, d time.Duration) error {
	return c.Manual.Sleep(ctx, d+time.Duration(c.rnd.Int64N(int64(c.max))))
}

// A cadence's ticks fall on start + n·period whatever the work between
// them took (less than a period) and however late each sleep ended, so
// the rate over a long run is exactly one a period; pacing by "the end
// of the last wait plus a period" drifts by each lateness.
func TestCadenceKeepsItsSchedule(t *testing.T) {
	const period = 100 * time.Millisecond
	for _, tc := range []struct {
		name string
		late time.Duration // the most a sleep overshoots
		work time.Duration // the most the work between ticks takes
	}{
		{"punctual", 1, 0},
		{"late timers", 40 * time.Millisecond, 0},
		{"slow work", 1, 60 * time.Millisecond},
		{"both", 30 * time.Millisecond, 50 * time.Millisecond},
	} {
		t.Run(tc.name, func(t *testing.T) {
			rnd := rand.New(rand.NewPCG(1, 2))
			clk := &lateClock{Manual: NewManual(time.Time{}), rnd: rnd, max: tc.late}
			c := NewCadence(clk, period)
			ctx := context.Background()
			const n = 1000
			var worst time.Duration
			for i := 0; i <= n; i++ {
				if err := c.Wait(ctx); err != nil {
					t.Fatal(err)
				}
				// The tick is at i·period, or later by at most the last
				// sleep's lateness (or the work that made it miss).
				off := clk.Mono() - time.Duration(i)*period
				if off < 0 {
					t.Fatalf("tick %d at %v, before its time %v", i, clk.Mono(), time.Duration(i)*period)
				}
				worst = max(worst, off)
				if tc.work > 0 {
					clk.Advance(time.Duration(rnd.Int64N(int64(tc.work))))
				}
			}
			if worst > max(tc.late, tc.work) {
				t.Errorf("a tick fell %v after its time; want at most %v", worst, max(tc.late, tc.work))
			}
			// Rate over the run: n ticks in n periods, within one tick.
			rate := float64(n) / clk.Mono().Seconds()
			if rate < 9.99 || rate > 10.01 {
				t.Errorf("%.3f ticks a second of the clock's time, want 10 (one a period of 100 ms)", rate)
			}
		})
	}
}

// A tick missed by more than a period is not made up in a burst: Wait
// returns at once and the next tick is on the grid.
func TestCadenceSkipsMissedTicks(t *testing.T) {
	clk := NewManual(time.Time{})
	c := NewCadence(clk, 100*time.Millisecond)
	ctx := context.Background()
	if err := c.Wait(ctx); err != nil || clk.Mono() != 0 {
		t.Fatalf("first Wait: %v at %v, want at once", err, clk.Mono())
	}
	clk.Advance(350 * time.Millisecond) // ticks at 100, 200, 300 ms missed
	if err := c.Wait(ctx); err != nil || clk.Mono() != 350*time.Millisecond {
		t.Fatalf("late Wait: %v at %v, want at once (350ms)", err, clk.Mono())
	}
	if err := c.Wait(ctx); err != nil || clk.Mono() != 400*time.Millisecond {
		t.Fatalf("next Wait at %v (%v), want the grid point 400ms", clk.Mono(), err)
	}
	c.Reset()
	clk.Advance(30 * time.Millisecond)
	if err := c.Wait(ctx); err != nil || clk.Mono() != 430*time.Millisecond {
		t.Fatalf("Wait after Reset at %v (%v), want at once", clk.Mono(), err)
	}
	if err := c.Wait(ctx); err != nil || clk.Mono() != 530*time.Millisecond {
		t.Fatalf("tick after Reset at %v (%v), want a period after the restart", clk.Mono(), err)
	}
	cancelled, cancel := context.WithCancel(ctx)
	cancel()
	if err := c.Wait(cancelled); err == nil {
		t.Error("Wait on a cancelled context returned no error")
	}
}

// ticks returns the clock times of n ticks of a cadence of period,
// dithered by fraction (0: the fixed grid) with seed.
func ticks(n int, period time.Duration, fraction float64, seed uint64) []time.Duration {
	clk := NewManual(time.Time{})
	c := NewCadence(clk, period)
	c.Dither(fraction, seed)
	out := make([]time.Duration, n)
	for i := range out {
		if err := c.Wait(context.Background()); err != nil {
			panic(err)
		}
		out[i] = clk.Mono()
	}
	return out
}

// A dithered cadence ticks once in each period-long slot of its grid, at
// an instant spread over the slot's first fraction, the same for a seed;
// a late Wait ticks at once, and the slots wholly passed are skipped.
func TestCadenceDitherSlots(t *testing.T) {
	const period = 100 * time.Millisecond
	ts := ticks(20001, period, 1, 7)
	var offs float64
	for k := 1; k < len(ts); k++ {
		slot := time.Duration(k) * period
		if ts[k] < slot || ts[k] >= slot+period {
			t.Fatalf("tick %d at %v, outside its slot [%v, %v)", k, ts[k], slot, slot+period)
		}
		offs += (ts[k] - slot).Seconds()
	}
	// Uniform instants in a 100 ms slot: mean 50 ms, standard deviation
	// 100/√12 = 28.9 ms, so the mean of 20,000 is within 0.82 ms at 4σ.
	if mean := offs / float64(len(ts)-1); math.Abs(mean-0.05) > 0.00082 {
		t.Errorf("mean instant %.2f ms into the slot, want 50", 1000*mean)
	}
	half := ticks(2001, period, 0.5, 7)
	for k := 1; k < len(half); k++ {
		if off := half[k] - time.Duration(k)*period; off < 0 || off >= period/2 {
			t.Fatalf("fraction 0.5: tick %d %v into its slot, want under 50 ms", k, off)
		}
	}
	if again := ticks(50, period, 1, 7); !slices.Equal(again, ts[:50]) {
		t.Error("the same seed gave other ticks")
	}
	if other := ticks(50, period, 1, 8); slices.Equal(other, ts[:50]) {
		t.Error("another seed gave the same ticks")
	}
	clk := NewManual(time.Time{})
	c := NewCadence(clk, period)
	c.Dither(1, 1)
	ctx := context.Background()
	c.Wait(ctx)
	clk.Advance(1050 * time.Millisecond) // slots 1 to 9 passed, in slot 10
	if err := c.Wait(ctx); err != nil || clk.Mono() < 1050*time.Millisecond || clk.Mono() >= 1100*time.Millisecond {
		t.Fatalf("late Wait at %v (%v), want in the slot at hand [1.05 s, 1.1 s)", clk.Mono(), err)
	}
	c.Wait(ctx)
	if now := clk.Mono(); now < 1100*time.Millisecond || now >= 1200*time.Millisecond {
		t.Errorf("the tick after a late one at %v, want in the next slot [1.1 s, 1.2 s)", now)
	}
}

// The phases of a dithered cadence's ticks in the cycle of a pulsed beam
// are uniform for every pulse rate of fluoroscopy, 3 to 30 pulses a
// second (a chi-square test of 20 phase bins at p = 0.001, gonum's
// distuv.ChiSquared as the reference), while a fixed 100 ms grid sees one
// phase at 10 and 30 pulses a second and two at 15.
func TestCadenceDitherCoversPulsePhases(t *testing.T) {
	const period = 100 * time.Millisecond
	const bins = 20
	crit := distuv.ChiSquared{K: bins - 1}.Quantile(0.999)
	phases := func(ts []time.Duration, pulse time.Duration) (chi2 float64, seen int) {
		counts := make([]float64, bins)
		for _, x := range ts {
			counts[int(x%pulse)*bins/int(pulse)]++
		}
		want := float64(len(ts)) / bins
		for _, c := range counts {
			chi2 += (c - want) * (c - want) / want
			if c > 0 {
				seen++
			}
		}
		return chi2, seen
	}
	dithered := ticks(4000, period, 1, 3)
	grid := ticks(4000, period, 0, 3)
	for _, hz := range []float64{30, 25, 15, 12.5, 10, 7.5, 6, 5, 3.75, 3} {
		pulse := time.Duration(float64(time.Second) / hz)
		if chi2, _ := phases(dithered, pulse); chi2 > crit {
			t.Errorf("%g pulses/s: the dithered ticks' phases are not uniform (chi-square %.1f > %.1f)", hz, chi2, crit)
		}
		if _, seen := phases(grid, pulse); (hz == 10 || hz == 30) && seen != 1 || hz == 15 && seen != 2 {
			t.Errorf("%g pulses/s: the fixed grid saw %d phase bins", hz, seen)
		}
	}
}
