// Package scpi drives a meter that speaks SCPI over a serial line:
// identification with *IDN? (the four comma-separated fields of IEEE
// 488.2, 10.14: maker, model, serial number, firmware), configurable
// set-up commands, a configurable reading query (READ? by default), the
// unit queried or configured, and the error queue (SYST:ERR?) drained after
// the set-up (its errors are the set-up's) and after every reading (so
// that an instrument error is reported with the reading it spoilt).
//
// The meter identifies when the link opens and again after every
// reconnection: another model or serial on the link is
// drivers.ErrMeterChanged. The unit is asked again while reading, so a
// meter switched to another unit gives errors, not readings.
//
// SCPI (1999.0, Vol. 1, 7.2.1) writes an overflow as 9.9E37 and
// not-a-number as 9.91E37; they come back as over range and fault
// readings with no value (Reading.NoValue), never converted.
package scpi

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"math/rand/v2"
	"strconv"
	"strings"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/serialline"
	"kermalux/drivers/units"
)

// SCPI special values (SCPI 1999.0 Vol. 1, 7.2.1.4 and 7.2.1.5).
const (
	Overflow = 9.9e37
	NotANum  = 9.91e37
)

// Config describes an SCPI meter.
type Config struct {
	// Line is the serial settings; zero fields default to 19200 8N1 with
	// LF line ends both ways.
	Line serialline.Config
	// Quantity measured; air_kerma_rate when empty.
	Quantity units.Quantity
	// Init commands sent after every (re)open, in order; SCPI set-up
	// commands send no reply. Default: *RST, *CLS, CONF:KRAT.
	Init []string
	// Query is the reading query; READ? when empty.
	Query string
	// Unit is the unit readings are in, in SCPI spelling (UGY/S) or
	// ours (uGy/s). When empty it is asked with UnitQuery after set-up.
	Unit string
	// UnitQuery asks the unit; UNIT:KRAT? when empty.
	UnitQuery string
	// ErrorQuery reads one error-queue entry; SYST:ERR? when empty, "-"
	// to never ask.
	ErrorQuery string
	// ReplyTimeout bounds each reply (meter's clock time); 1 s when zero.
	ReplyTimeout time.Duration
	// Period is how often the meter updates its reading: it is asked once
	// a period on average (a faster query returns the same value again,
	// which would pass repeated values off as independent samples), at a
	// random instant within each period (drivers.PollDither); 100 ms when
	// zero.
	Period time.Duration
	// UnitEvery is how many readings may pass between two checks of the
	// unit with UnitQuery: 0 checks after every reading, a negative value
	// never. When Unit is given and UnitQuery is not, the unit is never
	// asked (the meter may have no such query).
	UnitEvery int
}

// ErrInstrument is what a meter reported in its error queue; it is
// wrapped with the entries and with what caused them.
var ErrInstrument = errors.New("the meter reported errors")

// DefaultInit is the set-up of an air-kerma-rate meter.
var DefaultInit = []string{"*RST", "*CLS", "CONF:KRAT"}

func (c *Config) defaults() {
	if c.Line.Baud == 0 {
		c.Line.Baud = 19200
	}
	if c.Line.SendEnd == "" {
		c.Line.SendEnd = serialline.LF
	}
	if c.Line.ReceiveEnd == "" {
		c.Line.ReceiveEnd = serialline.LF
	}
	if c.Quantity == "" {
		c.Quantity = units.AirKermaRate
	}
	if c.Init == nil {
		c.Init = DefaultInit
	}
	if c.Query == "" {
		c.Query = "READ?"
	}
	if c.UnitQuery == "" {
		if c.Unit != "" && c.UnitEvery == 0 {
			c.UnitEvery = -1
		}
		c.UnitQuery = "UNIT:KRAT?"
	}
	if c.ErrorQuery == "" {
		c.ErrorQuery = "SYST:ERR?"
	}
	if c.ReplyTimeout <= 0 {
		c.ReplyTimeout = time.Second
	}
}

// Option sets an optional collaborator of Open.
type Option func(*options)

type options struct {
	name string
	clk  clock.Clock
	log  *slog.Logger
}

// WithName sets the meter's role ("dosimeter"), copied into readings.
func WithName(name string) Option { return func(o *options) { o.name = name } }

// WithClock sets the clock that stamps readings and scales timeouts.
func WithClock(c clock.Clock) Option { return func(o *options) { o.clk = c } }

// WithLogger sets the logger for link and protocol events.
func WithLogger(l *slog.Logger) Option { return func(o *options) { o.log = l } }

// Meter is an SCPI meter over a serial line; it implements drivers.Meter
// and drivers.Identifier. Use it from one goroutine.
type Meter struct {
	cfg  Config
	port *serialline.Port
	o    options

	gen       uint64
	reconnect bool
	dirty     bool
	unit      string         // as the meter spells it
	ourUnit   string         // as package units spells it
	cadence   *clock.Cadence // when the meter is asked, on its clock
	sinceUnit int            // readings since the unit was last checked

	id      drivers.Identity // the identity first seen on the link
	idKnown bool
	changed error // set when a reconnection found another meter

}

var (
	_ drivers.Meter      = (*Meter)(nil)
	_ drivers.Identifier = (*Meter)(nil)
)

// Open opens the port, sends the set-up commands and learns the unit.
func Open(ctx context.Context, port string, cfg Config, opts ...Option) (*Meter, error) {
	cfg.defaults()
	o := options{name: "meter"}
	for _, f := range opts {
		f(&o)
	}
	if o.clk == nil {
		o.clk = clock.NewReal()
	}
	if o.log == nil {
		o.log = slog.Default()
	}
	if !cfg.Quantity.Valid() {
		return nil, fmt.Errorf("%s on %s: quantity %q: expected air_kerma_rate, air_kerma or luminance", o.name, port, cfg.Quantity)
	}
	lc := cfg.Line
	lc.Port = port
	lc.ReadTimeout = serialline.RealTimeout(o.clk, cfg.ReplyTimeout)
	sp, err := serialline.Open(ctx, lc, serialline.Options{Clock: o.clk, Log: o.log})
	if err != nil {
		return nil, fmt.Errorf("%s (SCPI): %w", o.name, err)
	}
	period := cfg.Period
	if period <= 0 {
		period = 100 * time.Millisecond
	}
	m := &Meter{cfg: cfg, port: sp, o: o, cadence: clock.NewCadence(o.clk, period)}
	m.cadence.Dither(drivers.PollDither, rand.Uint64())
	if cfg.Unit != "" {
		if err := m.setUnit(cfg.Unit); err != nil {
			sp.Close()
			return nil, err
		}
	}
	if err := m.prepare(ctx); err != nil {
		sp.Close()
		return nil, err
	}
	return m, nil
}

// Port returns the transport.
func (m *Meter) Port() *serialline.Port { return m.port }

// Unit returns the unit readings arrive in, as the meter spells it.
func (m *Meter) Unit() string { return m.unit }

func (m *Meter) errorf(format string, args ...any) error {
	return fmt.Errorf("%s (SCPI) on %s: %w", m.o.name, m.port.Name(), fmt.Errorf(format, args...))
}

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
		m.o.log.Info("meter reconnected", "meter", m.o.name, "port", m.port.Name())
	}
	// Who is on the link, before anything is sent that would change its
	// state: after a reconnection another meter must not carry on under
	// the first one's identity (and certificate).
	if err := m.checkIdentity(ctx, again); err != nil {
		return err
	}
	for _, c := range m.cfg.Init {
		if err := m.port.WriteLine(ctx, c); err != nil {
			return m.errorf("sending %q: %w", c, err)
		}
	}
	// Errors the set-up caused are the set-up's, not the first reading's.
	if errs, err := m.drain(ctx); err != nil {
		return fmt.Errorf("after the set-up commands %q: %w", m.cfg.Init, err)
	} else if len(errs) > 0 {
		return m.errorf("%w after the set-up commands %q: %s (check the set-up; the meter may not know one of them)", ErrInstrument, m.cfg.Init, entries(errs))
	}
	if m.cfg.Unit == "" {
		u, err := m.query(ctx, m.cfg.UnitQuery)
		if err != nil {
			return fmt.Errorf("asking the unit: %w (a meter without this query needs its unit given: the bench file's unit, or kermalux read --unit)", err)
		}
		if err := m.setUnit(u); err != nil {
			return err
		}
	}
	m.gen = g
	m.sinceUnit = 0
	return nil
}

// checkIdentity asks *IDN? and, after a reconnection, compares the model
// and serial with the first identity seen. At the first open a meter that
// does not identify is only logged (Identify reports it); after a
// reconnection it is an error, since the meter cannot be told from
// another.
func (m *Meter) checkIdentity(ctx context.Context, again bool) error {
	m.changed = nil
	id, err := m.identify(ctx)
	if err != nil {
		if again && m.idKnown {
			return fmt.Errorf("identifying the meter after the reconnection: %w", err)
		}
		m.o.log.Warn("meter does not identify", "meter", m.o.name, "port", m.port.Name(), "err", err)
		return nil
	}
	if !m.idKnown {
		m.id, m.idKnown = id, true
		return nil
	}
	if !strings.EqualFold(id.Model, m.id.Model) || !strings.EqualFold(id.Serial, m.id.Serial) || !strings.EqualFold(id.Maker, m.id.Maker) {
		m.changed = m.errorf("%w: it identified as %s %s serial %s when the link opened, and now as %s %s serial %s", drivers.ErrMeterChanged,
			m.id.Maker, m.id.Model, m.id.Serial, id.Maker, id.Model, id.Serial)
		m.o.log.Error("another meter on the link", "meter", m.o.name, "port", m.port.Name(), "first", m.id.Raw, "now", id.Raw)
		return m.changed
	}
	return nil
}

func entries(errs []QueueEntry) string {
	var b strings.Builder
	for i, e := range errs {
		if i > 0 {
			b.WriteString("; ")
		}
		b.WriteString(e.String())
	}
	return b.String()
}

// setUnit accepts a unit in SCPI spelling (case-insensitive mnemonics,
// where a leading M is milli and MA mega: SCPI 1999.0 Vol. 1, 7.7.3) or in
// ours.
func (m *Meter) setUnit(u string) error {
	ours, err := Unit(m.cfg.Quantity, u)
	if err != nil {
		return m.errorf("%w", err)
	}
	m.unit, m.ourUnit = strings.TrimSpace(u), ours
	return nil
}

// scpiUnits maps upper-case SCPI unit mnemonics to our spelling.
var scpiUnits = map[string]string{
	"GY/S": "Gy/s", "MGY/S": "mGy/s", "UGY/S": "µGy/s", "NGY/S": "nGy/s",
	"GY/MIN": "Gy/min", "MGY/MIN": "mGy/min", "UGY/MIN": "µGy/min",
	"MGY/H": "mGy/h", "UGY/H": "µGy/h",
	"R/S": "R/s", "MR/S": "mR/s", "UR/S": "µR/s",
	"R/MIN": "R/min", "MR/MIN": "mR/min", "R/H": "R/h", "MR/H": "mR/h",
	"GY": "Gy", "MGY": "mGy", "UGY": "µGy", "NGY": "nGy", "R": "R", "MR": "mR", "UR": "µR",
	"CD/M2": "cd/m²", "FL": "fL",
}

// Unit converts a unit as an SCPI meter prints it into package units'
// spelling, checking that it measures q. An unknown unit is
// drivers.ErrUnit.
func Unit(q units.Quantity, u string) (string, error) {
	u = strings.TrimSpace(strings.Trim(strings.TrimSpace(u), `"`))
	cand := u
	if s, ok := scpiUnits[strings.ToUpper(u)]; ok {
		cand = s
	}
	if _, err := units.ToCanonical(q, 1, cand); err != nil {
		return "", fmt.Errorf("%w: %q is not a unit of %s (expected one convertible to %s, such as UGY/S)", drivers.ErrUnit, u, q, units.Canonical(q))
	}
	return cand, nil
}

// query sends a command and returns its one-line reply.
func (m *Meter) query(ctx context.Context, cmd string) (string, error) {
	if m.dirty {
		if err := m.port.FlushContext(ctx); err != nil && ctx.Err() != nil {
			return "", m.errorf("before %q: %w", cmd, err)
		}
		m.dirty = false
	}
	if err := m.port.WriteLine(ctx, cmd); err != nil {
		return "", m.errorf("sending %q: %w", cmd, err)
	}
	l, err := m.port.ReadLine(ctx)
	if err != nil {
		m.dirty = true
		return "", m.errorf("reply to %q: %w%s", cmd, err, m.explain(ctx, err))
	}
	return l.Text, nil
}

// explain reads the error queue after a query went unanswered: a meter
// that does not know a query says so there (-113 Undefined header) rather
// than on the line. It returns "" when there is nothing to add.
func (m *Meter) explain(ctx context.Context, err error) string {
	if !errors.Is(err, drivers.ErrTimeout) || m.cfg.ErrorQuery == "-" || ctx.Err() != nil {
		return ""
	}
	_ = m.port.FlushContext(ctx)
	m.dirty = false
	if werr := m.port.WriteLine(ctx, m.cfg.ErrorQuery); werr != nil {
		return ""
	}
	var errs []QueueEntry
	for range maxQueue {
		l, rerr := m.port.ReadLine(ctx)
		if rerr != nil {
			m.dirty = true
			break
		}
		e, perr := ParseError(l.Text)
		if perr != nil || e.Code == 0 {
			break
		}
		errs = append(errs, e)
		if m.port.WriteLine(ctx, m.cfg.ErrorQuery) != nil {
			break
		}
	}
	if len(errs) == 0 {
		return ""
	}
	return fmt.Sprintf("; the meter's error queue says %s", entries(errs))
}

// Identify sends *IDN? and splits the IEEE 488.2 reply.
func (m *Meter) Identify(ctx context.Context) (id drivers.Identity, err error) {
	run := func() {
		if err = m.prepare(ctx); err != nil {
			return
		}
		id, err = m.identify(ctx)
		if err == nil && !m.idKnown {
			m.id, m.idKnown = id, true
		}
	}
	run()
	return id, err
}

func (m *Meter) identify(ctx context.Context) (drivers.Identity, error) {
	s, err := m.query(ctx, "*IDN?")
	if err != nil {
		return drivers.Identity{}, err
	}
	id, err := ParseIDN(s)
	if err != nil {
		m.dirty = true
		return id, m.errorf("%w", err)
	}
	return id, nil
}

// ParseIDN splits an *IDN? reply into its four fields (IEEE 488.2,
// 10.14.1: manufacturer, model, serial number or 0, firmware level or 0).
func ParseIDN(s string) (drivers.Identity, error) {
	f := strings.Split(s, ",")
	if len(f) != 4 {
		return drivers.Identity{Raw: s}, fmt.Errorf("%w: *IDN? reply %q: expected four comma-separated fields (maker,model,serial,firmware)", drivers.ErrGarbled, s)
	}
	for i := range f {
		f[i] = strings.TrimSpace(f[i])
	}
	if f[0] == "" || f[1] == "" {
		return drivers.Identity{Raw: s}, fmt.Errorf("%w: *IDN? reply %q: expected a maker and a model", drivers.ErrGarbled, s)
	}
	return drivers.Identity{Maker: f[0], Model: f[1], Serial: f[2], Firmware: f[3], Raw: s}, nil
}

// ParseNumber reads an SCPI numeric reply (NR1, NR2 or NR3 of IEEE 488.2,
// 8.7) and classifies the SCPI special values: 9.9E37 is over range and
// 9.91E37 (not a number) is a fault. -9.9E37 is taken as under range.
func ParseNumber(s string) (float64, drivers.Status, error) {
	t := strings.TrimSpace(s)
	if t == "" || !numeric(t) {
		return 0, "", fmt.Errorf("%w: %q: expected a number such as 1.2340E-01", drivers.ErrGarbled, s)
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || math.IsInf(v, 0) || math.IsNaN(v) {
		return 0, "", fmt.Errorf("%w: %q: expected a finite number", drivers.ErrGarbled, s)
	}
	switch {
	case near(v, NotANum):
		return v, drivers.StatusFault, nil
	case near(v, Overflow):
		return v, drivers.StatusOverRange, nil
	case near(v, -Overflow):
		return v, drivers.StatusUnderRange, nil
	}
	return v, drivers.StatusOK, nil
}

func near(a, b float64) bool { return math.Abs(a-b) <= 1e-6*math.Abs(b) }

// numeric accepts [+-]digits[.digits][E[+-]digits] and nothing else.
func numeric(s string) bool {
	i := 0
	if s[0] == '+' || s[0] == '-' {
		i++
	}
	d := 0
	for ; i < len(s) && s[i] >= '0' && s[i] <= '9'; i++ {
		d++
	}
	if i < len(s) && s[i] == '.' {
		i++
		for ; i < len(s) && s[i] >= '0' && s[i] <= '9'; i++ {
			d++
		}
	}
	if d == 0 {
		return false
	}
	if i < len(s) && (s[i] == 'E' || s[i] == 'e') {
		i++
		if i < len(s) && (s[i] == '+' || s[i] == '-') {
			i++
		}
		e := 0
		for ; i < len(s) && s[i] >= '0' && s[i] <= '9'; i++ {
			e++
		}
		if e == 0 || e > 4 {
			return false
		}
	}
	return i == len(s)
}

// QueueEntry is one entry of the SCPI error queue.
type QueueEntry struct {
	Code    int
	Message string
}

func (e QueueEntry) String() string { return fmt.Sprintf("%d,%q", e.Code, e.Message) }

// ParseError reads a SYST:ERR? reply: <code>,"<message>" (SCPI 1999.0
// Vol. 2, 21.8.8). Code 0 means the queue is empty.
func ParseError(s string) (QueueEntry, error) {
	code, msg, ok := strings.Cut(strings.TrimSpace(s), ",")
	if !ok {
		return QueueEntry{}, fmt.Errorf("%w: SYST:ERR? reply %q: expected <code>,\"<message>\"", drivers.ErrGarbled, s)
	}
	n, err := strconv.Atoi(strings.TrimSpace(code))
	if err != nil {
		return QueueEntry{}, fmt.Errorf("%w: SYST:ERR? reply %q: expected a whole-number code before the comma", drivers.ErrGarbled, s)
	}
	msg = strings.TrimSpace(msg)
	if len(msg) < 2 || msg[0] != '"' || msg[len(msg)-1] != '"' {
		return QueueEntry{}, fmt.Errorf("%w: SYST:ERR? reply %q: expected the message in double quotes", drivers.ErrGarbled, s)
	}
	return QueueEntry{Code: n, Message: msg[1 : len(msg)-1]}, nil
}

// maxQueue bounds the error-queue drain (a meter repeating the same error
// forever must not hang the read); it is longer than the queues of SCPI
// meters (SCPI 1999.0 Vol. 2, 21.8 asks for at least two entries; ten to
// a few dozen is common practice).
const maxQueue = 64

// drain empties the error queue.
func (m *Meter) drain(ctx context.Context) ([]QueueEntry, error) {
	if m.cfg.ErrorQuery == "-" {
		return nil, nil
	}
	var out []QueueEntry
	for range maxQueue {
		s, err := m.query(ctx, m.cfg.ErrorQuery)
		if err != nil {
			return out, err
		}
		e, err := ParseError(s)
		if err != nil {
			m.dirty = true
			return out, m.errorf("%w", err)
		}
		if e.Code == 0 {
			return out, nil
		}
		out = append(out, e)
	}
	return out, m.errorf("%w: the error queue did not empty after %d entries: %s", ErrInstrument, maxQueue, entries(out[:3]))
}

// dataOutOfRange is the SCPI execution error that accompanies an
// overflow (SCPI 1999.0 Vol. 2, 21.8.9: -222).
const dataOutOfRange = -222

// Read queries a reading and drains the error queue. Error-queue entries
// make the status fault and are appended to Raw after " | " (an over-range
// or under-range reading whose only entries are -222 "Data out of range"
// keeps its status).
func (m *Meter) Read(ctx context.Context) (drivers.Reading, error) {
	return m.read(ctx)
}

func (m *Meter) read(ctx context.Context) (drivers.Reading, error) {
	if err := m.prepare(ctx); err != nil {
		return drivers.Reading{}, err
	}
	// Once a period of the meter's clock, on a fixed schedule (late
	// timers and slow replies do not lower the rate of readings).
	if err := m.cadence.Wait(ctx); err != nil {
		return drivers.Reading{}, err
	}
	if m.dirty {
		if err := m.port.FlushContext(ctx); err != nil && ctx.Err() != nil {
			return drivers.Reading{}, m.errorf("before %q: %w", m.cfg.Query, err)
		}
		m.dirty = false
	}
	if err := m.port.WriteLine(ctx, m.cfg.Query); err != nil {
		return drivers.Reading{}, m.errorf("sending %q: %w", m.cfg.Query, err)
	}
	l, err := m.port.ReadLine(ctx)
	if err != nil {
		m.dirty = true
		return drivers.Reading{}, m.errorf("reply to %q: %w%s", m.cfg.Query, err, m.explain(ctx, err))
	}
	r := drivers.Reading{
		Meter: m.o.name, Quantity: m.cfg.Quantity, Raw: l.Text, Mono: l.Mono, Wall: l.Wall,
		AfterReconnect: m.reconnect || l.AfterReconnect, Status: drivers.StatusFault, RawUnit: m.unit,
	}
	v, st, perr := ParseNumber(l.Text)
	if perr != nil {
		m.dirty = true
	}
	errs, qerr := m.drain(ctx)
	if perr != nil {
		return r, m.errorf("reply to %q: %w", m.cfg.Query, perr)
	}
	if qerr != nil {
		return r, qerr
	}
	r.RawValue = v
	if len(errs) > 0 {
		var b strings.Builder
		b.WriteString(r.Raw)
		onlyRange := true
		for _, e := range errs {
			b.WriteString(" | ")
			b.WriteString(e.String())
			if e.Code != dataOutOfRange {
				onlyRange = false
			}
		}
		r.Raw = b.String()
		if !((st == drivers.StatusOverRange || st == drivers.StatusUnderRange) && onlyRange) {
			st = drivers.StatusFault
		}
		if onlyRange {
			m.o.log.Debug("meter reported out of range", "meter", m.o.name, "port", m.port.Name(), "errors", r.Raw)
		} else {
			m.o.log.Warn("meter reported errors", "meter", m.o.name, "port", m.port.Name(), "errors", r.Raw)
		}
	}
	r.Status = st
	r.Unit = units.Canonical(m.cfg.Quantity)
	if err := m.recheckUnit(ctx); err != nil {
		r.Status = drivers.StatusFault
		return r, err
	}
	if near(v, Overflow) || near(v, NotANum) || near(v, -Overflow) {
		// A marker, not a measurement: never converted.
		r.NoValue = true
	} else {
		c, err := units.ToCanonical(m.cfg.Quantity, v, m.ourUnit)
		if err != nil {
			return r, m.errorf("%w: %w", drivers.ErrUnit, err)
		}
		r.Value = c
	}
	m.reconnect = false // marked until a reading gets through
	return r, nil
}

// recheckUnit asks the unit again when it is due: a meter switched to
// another unit (by its front panel, or a reset) must not have its numbers
// read in the old one.
func (m *Meter) recheckUnit(ctx context.Context) error {
	if m.cfg.UnitEvery < 0 {
		return nil
	}
	if m.sinceUnit < m.cfg.UnitEvery {
		m.sinceUnit++
		return nil
	}
	m.sinceUnit = 0
	u, err := m.query(ctx, m.cfg.UnitQuery)
	if err != nil {
		return fmt.Errorf("checking the unit: %w", err)
	}
	ours, err := Unit(m.cfg.Quantity, u)
	if err != nil {
		return m.errorf("the unit changed while reading: %w", err)
	}
	if ours != m.ourUnit {
		return m.errorf("%w: the meter now reads in %s, not %s as when it was set up; its readings are not used", drivers.ErrUnit, strings.TrimSpace(u), m.unit)
	}
	return nil
}

// Close closes the port.
func (m *Meter) Close() error {
	return m.port.Close()
}
