package profile

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/poller"
	"kermalux/drivers/serialline"
)

// Options are the collaborators of an open meter.
type Options struct {
	// Name is the meter's role in the bench file ("dosimeter"); it is
	// copied into every Reading.
	Name string
	// Clock stamps readings and scales the profile's timeouts; the real
	// clock when nil.
	Clock clock.Clock
	// Log receives link and protocol events; slog.Default() when nil.
	Log *slog.Logger
	// Background, for a polled meter, asks it in a goroutine at its own
	// pace (reading.period) and queues the readings (package poller), so
	// the caller takes every reading the meter gave, stamped when it
	// came, however slow the caller is; Pending and Discard then work as
	// for a streaming meter. Read no longer asks the meter itself.
	Background bool
}

// Meter is a meter driven by a profile over a serial line. It implements
// drivers.Meter and drivers.Identifier. Use it from one goroutine.
type Meter struct {
	p    *Profile
	port *serialline.Port
	opts Options

	gen       uint64         // port generation the set-up was done for
	reconnect bool           // the next reading is the first after a reconnection
	dirty     bool           // a reply may be pending after an error: flush first
	streaming bool           // the start command has been acknowledged
	cadence   *clock.Cadence // when a polled meter is asked, on its clock

	id      drivers.Identity // the identity first seen on the link
	idKnown bool
	changed error // set when a reconnection found another meter

	bg *poller.Poller // the background reader of a polled meter, or nil
}

var (
	_ drivers.Meter      = (*Meter)(nil)
	_ drivers.Identifier = (*Meter)(nil)
	_ drivers.Queued     = (*Meter)(nil)
)

// Open opens port with the profile's serial settings and runs its set-up
// commands (and, for a streaming meter, its start command). port may be a
// device or a stable link; the link is resolved again on every reconnect.
func Open(ctx context.Context, p *Profile, port string, opts Options) (*Meter, error) {
	if opts.Clock == nil {
		opts.Clock = clock.NewReal()
	}
	if opts.Log == nil {
		opts.Log = slog.Default()
	}
	if opts.Name == "" {
		opts.Name = p.Name
	}
	cfg := p.Line
	cfg.Port = port
	cfg.ReadTimeout = serialline.RealTimeout(opts.Clock, p.ReplyTimeout)
	sp, err := serialline.Open(ctx, cfg, serialline.Options{Clock: opts.Clock, Log: opts.Log})
	if err != nil {
		return nil, fmt.Errorf("%s (%s): %w", opts.Name, p.Name, err)
	}
	m := &Meter{p: p, port: sp, opts: opts, cadence: clock.NewCadence(opts.Clock, p.Period)}
	m.cadence.Dither(drivers.PollDither, rand.Uint64())
	if err := m.prepare(ctx); err != nil {
		sp.Close()
		return nil, err
	}
	if opts.Background && p.Mode == Polled {
		m.bg = poller.New(opts.Name, m.read, 0, opts.Log)
	}
	return m, nil
}

// Profile returns the meter's profile.
func (m *Meter) Profile() *Profile { return m.p }

// Port returns the transport (for its name and state).
func (m *Meter) Port() *serialline.Port { return m.port }

func (m *Meter) errorf(format string, args ...any) error {
	return fmt.Errorf("%s (%s) on %s: %w", m.opts.Name, m.p.Name, m.port.Name(), fmt.Errorf(format, args...))
}

// prepare (re)runs set-up and start when the link was (re)opened.
func (m *Meter) prepare(ctx context.Context) error {
	if err := m.port.Ensure(ctx); err != nil {
		return m.errorf("%w", err)
	}
	g := m.port.Generation()
	if g == m.gen {
		return m.changed
	}
	again := m.gen != 0
	if again {
		m.reconnect = true
		m.streaming = false
		m.opts.Log.Info("meter reconnected", "meter", m.opts.Name, "port", m.port.Name(), "device", m.port.Device())
	}
	if err := m.checkIdentity(ctx, again); err != nil {
		m.gen = g
		return err
	}
	for _, x := range m.p.Setup {
		if err := m.exchange(ctx, x); err != nil {
			return err
		}
	}
	if m.p.Mode == Streaming {
		if err := m.exchange(ctx, m.p.Start); err != nil {
			return err
		}
		m.streaming = true
	}
	m.gen = g
	m.dirty = false
	return nil
}

// checkIdentity identifies the meter when the link opens (the identity
// is kept) and after every reconnection, where another model or serial is
// drivers.ErrMeterChanged naming both (kept until the next reconnection).
// A profile without an identify command cannot tell meters apart.
func (m *Meter) checkIdentity(ctx context.Context, again bool) error {
	m.changed = nil
	if m.p.Identify == "" {
		return nil
	}
	id, err := m.identify(ctx)
	if err != nil {
		if again && m.idKnown {
			return m.errorf("identifying the meter after the reconnection: %w", err)
		}
		m.opts.Log.Warn("meter does not identify", "meter", m.opts.Name, "port", m.port.Name(), "err", err)
		return nil
	}
	if !m.idKnown {
		m.id, m.idKnown = id, true
		return nil
	}
	if id.Model != m.id.Model || id.Serial != m.id.Serial || id.Maker != m.id.Maker {
		m.changed = m.errorf("%w: it identified as %s %s serial %s when the link opened, and now as %s %s serial %s", drivers.ErrMeterChanged,
			m.id.Maker, m.id.Model, m.id.Serial, id.Maker, id.Model, id.Serial)
		m.opts.Log.Error("another meter on the link", "meter", m.opts.Name, "port", m.port.Name(), "first", m.id.Raw, "now", id.Raw)
		return m.changed
	}
	return nil
}

// exchange sends a command and waits for its exact reply, skipping lines
// that are readings (a streaming meter may still be talking). An empty
// command (a meter that streams unprompted) sends nothing.
func (m *Meter) exchange(ctx context.Context, x Exchange) error {
	if x.Send == "" {
		return nil
	}
	if m.dirty {
		// A late reply to the command before (an identify that timed
		// out) is not this one's.
		if err := m.port.FlushContext(ctx); err != nil && ctx.Err() != nil {
			return m.errorf("before %q: %w", x.Send, err)
		}
		m.dirty = false
	}
	if err := m.port.WriteLine(ctx, x.Send); err != nil {
		return m.errorf("sending %q: %w", x.Send, err)
	}
	if x.Expect == "" {
		return nil
	}
	_, err := m.await(ctx, x.Send, fmt.Sprintf("%q", x.Expect), func(s string) bool { return s == x.Expect })
	return err
}

// await reads lines until match accepts one, skipping up to 100 lines
// that match the reading pattern (or, after another command, the identify
// reply: a late answer to an identify that timed out); any other line is
// an error.
func (m *Meter) await(ctx context.Context, sent, want string, match func(string) bool) (serialline.Line, error) {
	for skipped := 0; ; skipped++ {
		l, err := m.port.ReadLine(ctx)
		if err != nil {
			m.dirty = true
			return l, m.errorf("after %q, expected %s: %w", sent, want, err)
		}
		if match(l.Text) {
			return l, nil
		}
		if skipped < 100 && m.p.Pattern.MatchString(l.Text) {
			continue
		}
		if skipped < 100 && sent != m.p.Identify && m.p.IdentifyPattern != nil && m.p.IdentifyPattern.MatchString(l.Text) {
			continue
		}
		m.dirty = true
		return l, m.errorf("%w: after %q, expected %s, got %q", drivers.ErrGarbled, sent, want, l.Text)
	}
}

// Identify asks the meter who it is. Without an identify command in the
// profile it returns the profile's maker and model.
func (m *Meter) Identify(ctx context.Context) (drivers.Identity, error) {
	id := drivers.Identity{Maker: m.p.Maker, Model: m.p.Model}
	if m.p.Identify == "" {
		return id, nil
	}
	var err error
	run := func() {
		if err = m.prepare(ctx); err != nil {
			return
		}
		id, err = m.identify(ctx)
		if err == nil && !m.idKnown {
			m.id, m.idKnown = id, true
		}
	}
	m.bg.Exclusive(run)
	return id, err
}

func (m *Meter) identify(ctx context.Context) (drivers.Identity, error) {
	id := drivers.Identity{Maker: m.p.Maker, Model: m.p.Model}
	// What arrived before the question is not its answer: a streaming
	// meter's backlog (it talked while nobody read) may hold more lines
	// than await skips.
	if err := m.port.FlushContext(ctx); err != nil && ctx.Err() != nil {
		return id, m.errorf("before %q: %w", m.p.Identify, err)
	}
	m.dirty = false
	if err := m.port.WriteLine(ctx, m.p.Identify); err != nil {
		return id, m.errorf("sending %q: %w", m.p.Identify, err)
	}
	re := m.p.IdentifyPattern
	l, err := m.await(ctx, m.p.Identify, "a reply matching "+re.String(), re.MatchString)
	if err != nil {
		return id, err
	}
	sub := re.FindStringSubmatch(l.Text)
	for i, name := range re.SubexpNames() {
		if i == 0 || sub[i] == "" {
			continue
		}
		switch name {
		case "maker":
			id.Maker = sub[i]
		case "model":
			id.Model = sub[i]
		case "serial":
			id.Serial = sub[i]
		case "firmware":
			id.Firmware = sub[i]
		}
	}
	id.Raw = l.Text
	return id, nil
}

// Read returns the next reading: a polled meter is queried, a streaming
// meter's next line is awaited (at most SilentPeriods periods: longer is
// reported as a silent meter, wrapping drivers.ErrTimeout, and the stream
// is restarted on the next call). Instrument statuses other than ok come
// back as readings with that status; a garbled line or a wrong unit is an
// error wrapping drivers.ErrGarbled or drivers.ErrUnit, and a lost link
// drivers.ErrLinkDown (the next call reconnects).
func (m *Meter) Read(ctx context.Context) (drivers.Reading, error) {
	if m.bg != nil {
		return m.bg.Next(ctx)
	}
	return m.read(ctx)
}

func (m *Meter) read(ctx context.Context) (drivers.Reading, error) {
	if err := m.prepare(ctx); err != nil {
		return drivers.Reading{}, err
	}
	var (
		l   serialline.Line
		err error
	)
	switch m.p.Mode {
	case Polled:
		// Once a period of the meter's clock, on a fixed schedule, so
		// that late timers (a loaded host, a scaled clock) and slow
		// replies do not lower the rate of readings.
		if err := m.cadence.Wait(ctx); err != nil {
			return drivers.Reading{}, err
		}
		if m.dirty { // a late reply to an earlier query is not fresh
			if err := m.port.FlushContext(ctx); err != nil && ctx.Err() != nil {
				return drivers.Reading{}, m.errorf("before %q: %w", m.p.Query, err)
			}
			m.dirty = false
		}
		if err := m.port.WriteLine(ctx, m.p.Query); err != nil {
			return drivers.Reading{}, m.errorf("sending %q: %w", m.p.Query, err)
		}
		l, err = m.port.ReadLine(ctx)
		if err != nil {
			m.dirty = true
			return drivers.Reading{}, m.errorf("reply to %q: %w", m.p.Query, err)
		}
	case Streaming:
		if !m.streaming {
			if err := m.exchange(ctx, m.p.Start); err != nil {
				return drivers.Reading{}, err
			}
			m.streaming = true
		}
		wd := m.p.Watchdog()
		l, err = m.port.ReadLineTimeout(ctx, serialline.RealTimeout(m.opts.Clock, wd))
		if err != nil {
			if errors.Is(err, drivers.ErrTimeout) {
				m.streaming = false
				return drivers.Reading{}, m.errorf("meter silent: no reading for %d periods of %v (%w)", m.p.SilentPeriods, m.p.Period, err)
			}
			return drivers.Reading{}, m.errorf("%w", err)
		}
	}
	return m.reading(l)
}

func (m *Meter) reading(l serialline.Line) (drivers.Reading, error) {
	r := drivers.Reading{
		Meter:          m.opts.Name,
		Quantity:       m.p.Quantity,
		Raw:            l.Text,
		Mono:           l.Mono,
		Wall:           l.Wall,
		AfterReconnect: m.reconnect || l.AfterReconnect,
		Status:         drivers.StatusFault,
	}
	v, unit, st, err := m.p.ParseLine(l.Text)
	r.RawValue, r.RawUnit = v, unit
	if errors.Is(err, ErrNoValue) {
		r.Status, r.NoValue, r.Unit = st, true, unitsCanonical(m.p)
		m.reconnect = false
		return r, nil
	}
	if err != nil {
		m.dirty = true
		return r, m.errorf("%w", err)
	}
	c, err := m.p.Convert(v, unit)
	if err != nil {
		return r, m.errorf("%w", err)
	}
	r.Value, r.Unit, r.Status = c, unitsCanonical(m.p), st
	m.reconnect = false // marked until a reading gets through
	return r, nil
}

// Discard implements drivers.Freshener: a streaming meter drops the lines
// waiting in the buffers (and the line in progress), so the next reading is
// one sent after the call. A polled meter's readings are always fresh.
func (m *Meter) Discard() {
	if m.bg != nil {
		m.bg.Discard()
		return
	}
	if m.p.Mode == Streaming && m.port.Up() {
		m.port.Discard()
	}
}

// Pending implements drivers.Queued: the lines a streaming meter has sent
// that wait to be read (0 for a polled meter, which answers when asked).
func (m *Meter) Pending() int {
	if m.bg != nil {
		return m.bg.Pending()
	}
	if m.p.Mode != Streaming || !m.port.Up() {
		return 0
	}
	return m.port.Buffered()
}

// Close stops a streaming meter (best effort) and closes the port.
func (m *Meter) Close() error {
	if m.bg != nil {
		m.bg.Stop()
	}
	if m.p.Mode == Streaming && m.p.Stop != "" && m.port.Up() {
		ctx, cancel := context.WithTimeout(context.Background(), 200*time.Millisecond)
		m.port.WriteLine(ctx, m.p.Stop)
		cancel()
	}
	return m.port.Close()
}
