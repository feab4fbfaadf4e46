package poller

import (
	"context"
	"sync/atomic"
	"testing"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/clock"
)

// meter is a polled meter on a manual clock: each read waits for the
// meter's next update on a cadence (as the dialects do), takes a reply
// 3 ms later and stamps it then, numbering the readings. asked receives
// each reading's number as its reply arrives, so tests wait on the
// meter's events, not on time.
type meter struct {
	clk   *clock.Manual
	cad   *clock.Cadence
	n     atomic.Int64
	asked chan int64
}

func newMeter() *meter {
	clk := clock.NewManual(time.Date(2026, 3, 2, 9, 0, 0, 0, time.UTC))
	return &meter{clk: clk, cad: clock.NewCadence(clk, 100*time.Millisecond), asked: make(chan int64, 1000)}
}

func (m *meter) read(ctx context.Context) (drivers.Reading, error) {
	if err := m.cad.Wait(ctx); err != nil {
		return drivers.Reading{}, err
	}
	m.clk.Advance(3 * time.Millisecond)
	n := m.n.Add(1)
	r := drivers.Reading{Value: float64(n), Status: drivers.StatusOK, Mono: m.clk.Mono()}
	m.asked <- n
	return r, nil
}

// waitAsked waits until the meter has answered reading n.
func (m *meter) waitAsked(t *testing.T, n int64) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	for {
		select {
		case got := <-m.asked:
			if got >= n {
				return
			}
		case <-ctx.Done():
			t.Fatalf("reading %d never asked (the poller stopped polling)", n)
		}
	}
}

// A caller that takes nothing for a while (the engine at a prompt, a slow
// journal write) does not stop polling: the readings asked meanwhile are
// queued with the times their replies arrived, and come out in order, none
// missing (the old poller paused after an idle time and dropped what it
// had queued, so the caller got a reading asked when it came back).
func TestIdleCallerKeepsReadingsAndStamps(t *testing.T) {
	m := newMeter()
	p := New("dosimeter", m.read, 16, nil)
	defer p.Stop()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	r, err := p.Next(ctx)
	if err != nil || r.Value != 1 {
		t.Fatalf("first reading %v, %v", r.Value, err)
	}
	m.waitAsked(t, 6) // the caller idle while five more replies arrive
	for want := 2.0; want <= 6; want++ {
		r, err := p.Next(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if r.Value != want {
			t.Fatalf("got reading %v, want %v: readings asked while the caller was idle were lost", r.Value, want)
		}
		// Stamped on arrival: on the meter's cadence (every 100 ms from
		// the first, reply 3 ms later), not when taken.
		if wantMono := time.Duration(want-1)*100*time.Millisecond + 3*time.Millisecond; r.Mono != wantMono {
			t.Errorf("reading %v stamped %v, want %v (its arrival)", want, r.Mono, wantMono)
		}
	}
}

// Polling pauses while the queue is full and goes on when the caller takes
// a reading: nothing is dropped, so the readings taken are consecutive and
// the queue never holds more than its size.
func TestFullQueuePausesPolling(t *testing.T) {
	m := newMeter()
	p := New("photometer", m.read, 4, nil)
	defer p.Stop()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	m.waitAsked(t, 4) // full
	for want := 1.0; want <= 200; want++ {
		if n := p.Pending(); n > 4 {
			t.Fatalf("%d readings queued, want at most 4", n)
		}
		r, err := p.Next(ctx)
		if err != nil {
			t.Fatal(err)
		}
		if r.Value != want {
			t.Fatalf("got reading %v, want %v: a reading was dropped", r.Value, want)
		}
	}
	if got := m.n.Load(); got > 204 {
		t.Errorf("%d readings asked with 200 taken and 4 queued at most: the poller asked while full", got)
	}
}

// Discard drops what is queued, and the next reading is one asked after
// the call; a full queue's pause ends with it.
func TestDiscardGivesAFreshReading(t *testing.T) {
	m := newMeter()
	p := New("dosimeter", m.read, 4, nil)
	defer p.Stop()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	m.waitAsked(t, 4)
	asked := m.n.Load() // 4: the queue is full and polling paused
	p.Discard()
	r, err := p.Next(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if int64(r.Value) != asked+1 {
		t.Errorf("after Discard got reading %v, want %d (the first asked after the call)", r.Value, asked+1)
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
