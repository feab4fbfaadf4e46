package gpiopanel

import (
	"context"
	"sync"
	"time"

	"periph.io/x/conn/v3/gpio"

	"kermalux/drivers/clock"
)

// Pattern is a beep pattern: alternating on and off times, starting with
// on. The buzzer is off after the last entry.
type Pattern []time.Duration

// The board's beep patterns. An operator in a lead apron learns them on the
// first day, so they stay few and distinct.
var (
	// BeepGood: one beep, a reading was accepted.
	BeepGood = Pattern{200 * time.Millisecond}
	// BeepRetry: three beeps, a retake is needed.
	BeepRetry = Pattern{120 * time.Millisecond, 120 * time.Millisecond, 120 * time.Millisecond, 120 * time.Millisecond, 120 * time.Millisecond}
	// BeepReady: two beeps at start-up.
	BeepReady = Pattern{150 * time.Millisecond, 150 * time.Millisecond, 150 * time.Millisecond}
	// BeepWarn: two long beeps, attention needed.
	BeepWarn = Pattern{500 * time.Millisecond, 250 * time.Millisecond, 500 * time.Millisecond}
	// BeepAlarm: rapid beeping for two seconds, stop now.
	BeepAlarm = rapid(50*time.Millisecond, 20)
	// BeepPrompt: a short chirp, "your turn" (used when there is no speech).
	BeepPrompt = Pattern{40 * time.Millisecond}
	// BeepPress: a tick confirming a press was taken.
	BeepPress = Pattern{25 * time.Millisecond}
	// BeepPause: two ticks confirming a double press (pause).
	BeepPause = Pattern{25 * time.Millisecond, 80 * time.Millisecond, 25 * time.Millisecond}
)

func rapid(d time.Duration, n int) Pattern {
	p := make(Pattern, 0, 2*n-1)
	for i := 0; i < n; i++ {
		if i > 0 {
			p = append(p, d)
		}
		p = append(p, d)
	}
	return p
}

// Duration is the pattern's total length.
func (p Pattern) Duration() time.Duration {
	var t time.Duration
	for _, d := range p {
		t += d
	}
	return t
}

// buzzer plays patterns on an output pin.
type buzzer struct {
	pin       gpio.PinOut
	activeLow bool
	clk       clock.Clock
}

func (b *buzzer) set(on bool) error {
	return b.pin.Out(gpio.Level(on != b.activeLow))
}

// play sounds p and returns when it has finished or ctx ends; the buzzer is
// left off either way.
func (b *buzzer) play(ctx context.Context, p Pattern) error {
	defer b.set(false)
	for i, d := range p {
		if err := b.set(i%2 == 0); err != nil {
			return err
		}
		if err := b.clk.Sleep(ctx, d); err != nil {
			return err
		}
	}
	return nil
}

// beeper plays patterns one after another on its own goroutine so Say and
// Ask never wait for the buzzer. An urgent pattern (the alarm) drops the
// queue and cuts short the pattern being played.
type beeper struct {
	bz *buzzer

	mu        sync.Mutex
	queue     []Pattern
	playing   bool
	cancelCur context.CancelFunc
	idle      chan struct{}
	wake      chan struct{}
	done      chan struct{}
	stop      context.CancelFunc
}

func newBeeper(bz *buzzer) *beeper {
	ctx, stop := context.WithCancel(context.Background())
	b := &beeper{bz: bz, wake: make(chan struct{}, 1), done: make(chan struct{}), stop: stop}
	go b.run(ctx)
	return b
}

func (b *beeper) beep(p Pattern, urgent bool) {
	b.mu.Lock()
	if urgent {
		b.queue = b.queue[:0]
		if b.cancelCur != nil {
			b.cancelCur()
		}
	}
	if len(b.queue) < 8 {
		b.queue = append(b.queue, p)
	}
	b.mu.Unlock()
	select {
	case b.wake <- struct{}{}:
	default:
	}
}

func (b *beeper) run(ctx context.Context) {
	defer close(b.done)
	for {
		b.mu.Lock()
		if len(b.queue) == 0 {
			b.playing = false
			if b.idle != nil {
				close(b.idle)
				b.idle = nil
			}
			b.mu.Unlock()
			select {
			case <-ctx.Done():
				return
			case <-b.wake:
				continue
			}
		}
		p := b.queue[0]
		b.queue = b.queue[1:]
		pctx, cancel := context.WithCancel(ctx)
		b.playing, b.cancelCur = true, cancel
		b.mu.Unlock()
		_ = b.bz.play(pctx, p)
		cancel()
		b.mu.Lock()
		b.cancelCur = nil
		b.mu.Unlock()
		if ctx.Err() != nil {
			return
		}
	}
}

// wait returns when no pattern is queued or playing.
func (b *beeper) wait(ctx context.Context) error {
	b.mu.Lock()
	if !b.playing && len(b.queue) == 0 {
		b.mu.Unlock()
		return nil
	}
	if b.idle == nil {
		b.idle = make(chan struct{})
	}
	idle := b.idle
	b.mu.Unlock()
	select {
	case <-idle:
	case <-b.done:
	case <-ctx.Done():
		return ctx.Err()
	}
	return nil
}

func (b *beeper) close() {
	b.stop()
	<-b.done
	_ = b.bz.set(false)
}
