// Package poller reads a polled meter in the background: a goroutine asks
// the meter at its own pace (the dialect's Read waits for the meter's next
// update, on a fixed schedule of the meter's clock: clock.Cadence) and
// queues each reading, stamped when its reply arrived, in a bounded queue.
// The caller then takes readings as a streaming meter's: every one the
// meter gave, whatever the caller was doing in the meantime, so the number
// of samples per second of the meter's clock does not depend on how fast
// the host is (a slow journal write, a loaded board, the demo's scaled
// clock). Polling pauses only while the queue is full, so no reading is
// dropped and each keeps the time it arrived.
package poller

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync"
	"time"

	"kermalux/drivers"
)

// DefaultSize is the queue's length when New is given 0: at 10 readings a
// second, 1.6 s of readings; then polling pauses until the caller takes one
// or discards them. It bounds how far a caller that cannot keep up (a
// loaded host writing each reading to its journal) falls behind the meter:
// past it the meter is asked at the caller's pace, each reading still
// stamped on arrival, rather than queued for a caller seconds late.
const DefaultSize = 16

// errorPause is the least real time between two reads when the first
// failed.
const errorPause = 50 * time.Millisecond

type item struct {
	r   drivers.Reading
	err error
}

// Poller owns the reading goroutine of one meter.
type Poller struct {
	read func(context.Context) (drivers.Reading, error)
	size int
	log  *slog.Logger
	name string

	turn   sync.Mutex // held by the goroutine for each read; Exclusive takes it
	mu     sync.Mutex
	queue  []item
	full   bool          // the queue filled and polling paused (logged once a time)
	room   chan struct{} // a token when the caller made room in the queue
	notify chan struct{}
	cancel context.CancelFunc
	done   chan struct{}
}

// New starts polling with read (a dialect's own Read, which paces itself
// on the meter's update period). size bounds the queue (DefaultSize when
// 0): while it is full polling pauses, and it goes on as soon as the
// caller takes a reading or discards them (Discard), so every reading is
// kept with the time its reply arrived. A caller back from elsewhere that
// wants only fresh readings calls Discard first.
func New(name string, read func(context.Context) (drivers.Reading, error), size int, log *slog.Logger) *Poller {
	if size <= 0 {
		size = DefaultSize
	}
	if log == nil {
		log = slog.Default()
	}
	ctx, cancel := context.WithCancel(context.Background())
	p := &Poller{read: read, size: size, log: log, name: name, notify: make(chan struct{}, 1), room: make(chan struct{}, 1), cancel: cancel, done: make(chan struct{})}
	go p.loop(ctx)
	return p
}

func (p *Poller) loop(ctx context.Context) {
	defer close(p.done)
	for ctx.Err() == nil {
		p.mu.Lock()
		full := len(p.queue) >= p.size
		if full && !p.full {
			p.full = true
			p.log.Debug("meter readings not taken; polling paused until there is room", "meter", p.name, "queued", len(p.queue))
		}
		p.mu.Unlock()
		if full {
			select {
			case <-ctx.Done():
				return
			case <-p.room:
			}
			continue
		}
		began := time.Now()
		p.turn.Lock()
		r, err := p.read(ctx)
		if ctx.Err() != nil {
			p.turn.Unlock()
			return
		}
		p.push(item{r, err}) // under turn: Discard cannot fall in between
		p.turn.Unlock()
		if err != nil {
			// A meter that fails at once (another meter on the link, a
			// garbled reply) is not asked again in a tight loop.
			if wait := errorPause - time.Since(began); wait > 0 {
				t := time.NewTimer(wait)
				select {
				case <-ctx.Done():
				case <-t.C:
				}
				t.Stop()
			}
		}
	}
}

// push queues a reading; the loop asks for one only when there is room.
func (p *Poller) push(it item) {
	p.mu.Lock()
	p.queue = append(p.queue, it)
	p.mu.Unlock()
	select {
	case p.notify <- struct{}{}:
	default:
	}
}

// roomMade tells a paused loop that the queue has room. The caller holds
// p.mu.
func (p *Poller) roomMade() {
	p.full = false
	select {
	case p.room <- struct{}{}:
	default:
	}
}

// Next returns the oldest queued reading (or the error the read gave),
// waiting for one until ctx ends.
func (p *Poller) Next(ctx context.Context) (drivers.Reading, error) {
	for {
		p.mu.Lock()
		if len(p.queue) > 0 {
			it := p.queue[0]
			n := copy(p.queue, p.queue[1:])
			p.queue[n] = item{}
			p.queue = p.queue[:n]
			p.roomMade()
			p.mu.Unlock()
			return it.r, it.err
		}
		p.mu.Unlock()
		select {
		case <-ctx.Done():
			return drivers.Reading{}, fmt.Errorf("%s: waiting for a reading: %w", p.name, ctx.Err())
		case <-p.done:
			return drivers.Reading{}, fmt.Errorf("%s: %w", p.name, errStopped)
		case <-p.notify:
		}
	}
}

var errStopped = errors.New("meter closed")

// Pending is how many readings wait (drivers.Queued).
func (p *Poller) Pending() int {
	p.mu.Lock()
	defer p.mu.Unlock()
	return len(p.queue)
}

// Discard drops the queued readings and waits until the read in progress
// (which may have been asked before the call) is over and dropped too, so
// the next reading is one asked after the call (drivers.Freshener).
func (p *Poller) Discard() {
	p.turn.Lock()
	p.mu.Lock()
	clear(p.queue)
	p.queue = p.queue[:0]
	p.roomMade()
	p.mu.Unlock()
	p.turn.Unlock()
}

// Exclusive runs f between two reads (identification, a command): the
// meter's port is f's alone meanwhile. On a nil Poller (a meter read
// directly, without background polling) it just runs f.
func (p *Poller) Exclusive(f func()) {
	if p == nil {
		f()
		return
	}
	p.turn.Lock()
	defer p.turn.Unlock()
	f()
}

// Stop ends the goroutine and waits for it.
func (p *Poller) Stop() {
	p.cancel()
	<-p.done
}
