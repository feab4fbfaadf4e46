package poller

import (
	"context"
	"sync/atomic"
	"testing"
	"time"

	"kermalux/drivers"
)

// TestNoPauseUnderAWaitingCaller: the goroutine pauses when the caller has
// asked for nothing for idle; it must never pause while a caller is
// blocked in Next, or both wait for each other for ever (seen as a demo
// that stopped reading its meter on a loaded machine: the loop looked at
// the idle time just after Next had found it active). With an idle time
// of a nanosecond every check would pause; each Next must still get its
// reading.
func TestNoPauseUnderAWaitingCaller(t *testing.T) {
	t.Parallel()
	var n atomic.Int64
	read := func(ctx context.Context) (drivers.Reading, error) {
		return drivers.Reading{Value: float64(n.Add(1)), Status: drivers.StatusOK}, nil
	}
	p := New("dosimeter", read, 4, time.Nanosecond, nil)
	defer p.Stop()
	for i := 0; i < 2000; i++ {
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		_, err := p.Next(ctx)
		cancel()
		if err != nil {
			t.Fatalf("Next %d: %v (the poller paused under a waiting caller)", i, err)
		}
	}
}

// TestQueueBoundedAndCounted: a caller that takes nothing for a while
// finds at most size readings, and the dropped ones counted.
func TestQueueBoundedAndCounted(t *testing.T) {
	t.Parallel()
	var n atomic.Int64
	read := func(ctx context.Context) (drivers.Reading, error) {
		time.Sleep(100 * time.Microsecond)
		return drivers.Reading{Value: float64(n.Add(1))}, nil
	}
	p := New("photometer", read, 8, time.Hour, nil)
	defer p.Stop()
	ctx := context.Background()
	first, err := p.Next(ctx)
	if err != nil {
		t.Fatal(err)
	}
	for float64(n.Load()) < first.Value+40 {
		time.Sleep(time.Millisecond)
	}
	if got := p.Pending(); got > 8 {
		t.Errorf("%d readings queued, want at most 8", got)
	}
	if p.Lost() == 0 {
		t.Error("no dropped reading counted after 40 readings into a queue of 8")
	}
}

// TestExclusiveOnNilRuns: a meter without background polling has a nil
// Poller; Exclusive must still run f.
func TestExclusiveOnNilRuns(t *testing.T) {
	var p *Poller
	ran := false
	p.Exclusive(func() { ran = true })
	if !ran {
		t.Error("f did not run on a nil Poller")
	}
}
