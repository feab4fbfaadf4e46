// Package live is the board's read-only live view: a page, served over the
// board's own network link to a paired browser, that shows what the board
// hears and reads while a session runs (the step and what comes next, each
// meter's reading with a short trend, beam on or off against the
// five-minute alarm, every result as computed, retakes and why, the safety
// acknowledgements).
//
// It does not touch the engine's internals. Two tees wrap what the engine
// already talks to: Journal wraps the engine's journal (every transition
// and reading is journalled) and Panel wraps the panel (what is said and
// asked). Each publishes to a Hub with bounded buffers: publishing never
// blocks, a subscriber that falls behind is dropped (its browser
// reconnects and catches up from the journal), and with nobody watching a
// publish is one atomic load. The server (server.go) has no endpoint that
// writes: every method but GET is refused, so the page can never start a
// step or an exposure.
package live

import (
	"sync"
	"sync/atomic"
)

// Event is one thing to show: a journal record (Seq > 0) or a panel call
// (Seq 0), already encoded as the JSON the page reads.
type Event struct {
	Seq     int64
	Session string
	Data    []byte
}

// DefaultBuffer is how many events a subscriber may fall behind before it
// is dropped: a few seconds of two meters at 20 Hz.
const DefaultBuffer = 256

// Hub fans events out to subscribers without ever waiting for one.
type Hub struct {
	mu      sync.Mutex
	subs    map[*Sub]struct{}
	n       atomic.Int32
	buf     int
	dropped atomic.Int64
}

// NewHub returns a hub whose subscribers each buffer buf events (0: DefaultBuffer).
func NewHub(buf int) *Hub {
	if buf <= 0 {
		buf = DefaultBuffer
	}
	return &Hub{subs: map[*Sub]struct{}{}, buf: buf}
}

// Watching reports whether anyone is subscribed; publishers skip the work
// of encoding an event when nobody is.
func (h *Hub) Watching() bool { return h.n.Load() > 0 }

// Dropped is how many subscribers were dropped for falling behind.
func (h *Hub) Dropped() int64 { return h.dropped.Load() }

// Publish hands ev to every subscriber that has room and drops those that
// have none. It never blocks.
func (h *Hub) Publish(ev Event) {
	if !h.Watching() {
		return
	}
	h.mu.Lock()
	defer h.mu.Unlock()
	for s := range h.subs {
		select {
		case s.c <- ev:
		default:
			h.removeLocked(s)
			h.dropped.Add(1)
		}
	}
}

// Subscribe adds a subscriber. Its channel is closed when it is dropped
// or closed.
func (h *Hub) Subscribe() *Sub {
	s := &Sub{h: h, c: make(chan Event, h.buf)}
	h.mu.Lock()
	h.subs[s] = struct{}{}
	h.n.Add(1)
	h.mu.Unlock()
	return s
}

func (h *Hub) removeLocked(s *Sub) {
	if _, ok := h.subs[s]; !ok {
		return
	}
	delete(h.subs, s)
	h.n.Add(-1)
	close(s.c)
}

// Sub is one subscriber.
type Sub struct {
	h *Hub
	c chan Event
}

// C delivers the events; it is closed when the subscriber is dropped.
func (s *Sub) C() <-chan Event { return s.c }

// Close unsubscribes.
func (s *Sub) Close() {
	s.h.mu.Lock()
	s.h.removeLocked(s)
	s.h.mu.Unlock()
}
