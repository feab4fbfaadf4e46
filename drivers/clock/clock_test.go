package clock

import (
	"context"
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
