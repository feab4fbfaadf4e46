package clock

import (
	"context"
	"math/rand/v2"
	"testing"
	"time"
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
