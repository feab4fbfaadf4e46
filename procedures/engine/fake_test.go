package engine

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
	"time"

	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/units"
	"kermalux/firmware-host/panel/scripted"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// physics is a small in-process bench: a fluoroscope whose brightness
// control settles after beam-on, an intensifier of known conversion
// factor, and two meters with first-order response and Gaussian noise.
// It is deterministic from its seed and the manual clock.
type physics struct {
	clk       *clock.Manual
	mu        sync.Mutex
	beam      bool
	beamAt    time.Duration // when the beam state last changed
	kerma     float64       // settled input kerma rate, µGy/s
	g         float64       // true conversion factor, cd·m⁻²/(µGy·s⁻¹)
	overshoot float64       // ABC: relative excess of output at beam-on
	tau       time.Duration // ABC settling time constant
	darkK     float64
	darkL     float64
	// scheduled beam changes
	onDelay, offDelay time.Duration
	pending           []change
	drops             []time.Duration // beam drops: time after each beam-on at which it drops (one per beam-on, 0: none)
	beamOns           int
	beamTotal         time.Duration // true beam-on so far, ended exposures
}

type change struct {
	at time.Duration
	on bool
}

func newPhysics(clk *clock.Manual) *physics {
	return &physics{clk: clk, kerma: 0.8, g: 150, overshoot: 0.3, tau: 800 * time.Millisecond,
		darkK: 0, darkL: 0.05, onDelay: 700 * time.Millisecond, offDelay: 400 * time.Millisecond}
}

// beamState is whether the beam is on now and its true beam-on time so
// far (ended exposures).
func (p *physics) beamState() (on bool, total time.Duration) {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.beam, p.beamTotal
}

func (p *physics) schedule(on bool, after time.Duration) {
	p.mu.Lock()
	p.pending = append(p.pending, change{p.clk.Mono() + after, on})
	p.mu.Unlock()
}

// advance applies scheduled changes up to t.
func (p *physics) advance(t time.Duration) {
	for len(p.pending) > 0 && p.pending[0].at <= t {
		c := p.pending[0]
		p.pending = p.pending[1:]
		if c.on != p.beam {
			if !c.on {
				p.beamTotal += c.at - p.beamAt
			}
			p.beam = c.on
			p.beamAt = c.at
			if c.on {
				if p.beamOns < len(p.drops) && p.drops[p.beamOns] > 0 {
					p.pending = append([]change{{c.at + p.drops[p.beamOns], false}}, p.pending...)
				}
				p.beamOns++
			}
		}
	}
}

// truth returns the true kerma rate and luminance at t.
func (p *physics) truth(t time.Duration) (k, l float64) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.advance(t)
	if !p.beam {
		return 0, p.darkL
	}
	s := 1 + p.overshoot*math.Exp(-float64(t-p.beamAt)/float64(p.tau))
	k = p.kerma * s
	return k, p.g*k + p.darkL
}

// fakeMeter reads the physics at its own rate; Read advances the manual
// clock to the next sample time, so time is deterministic.
type fakeMeter struct {
	name    string
	q       units.Quantity
	p       *physics
	period  time.Duration
	resp    time.Duration // first-order response time constant
	noise   float64       // relative standard deviation of each reading
	floor   float64       // absolute noise floor
	rng     *rand.Rand
	next    time.Duration
	y       float64
	lastT   time.Duration
	started bool
	lost    []window2 // link down in these intervals
	wasLost bool
	reads   int
	spike   func(v float64, t time.Duration) float64
	// rangeMax > 0: a reading above it is over range (no value);
	// rangeMin > 0: a reading below it is under range.
	rangeMax, rangeMin float64
	// brokenFrom > 0: from this time on every read fails with a garbled
	// line (a meter gone wrong for good).
	brokenFrom time.Duration
	// backlog: the meter streams, and the samples it took while the
	// engine waited on the other meter are read afterwards, stamped when
	// they were taken (behind the clock), as a streaming meter's queued
	// lines are; read it through queued, which reports them pending.
	backlog bool
	// From slowFrom on (when > 0), the meter answers only every
	// slowPeriod: a dosimeter that went to a long integration, or a
	// poller starved by a loaded host.
	slowFrom, slowPeriod time.Duration
}

// queued is a backlog meter as the engine sees a streaming one
// (drivers.Queued): how many of its samples are waiting.
type queued struct{ *fakeMeter }

func (q queued) Pending() int {
	behind := q.p.clk.Mono() - q.next
	if behind <= 0 {
		return 0
	}
	return int(behind / q.period)
}

type window2 struct{ from, to time.Duration }

func newMeter(name string, q units.Quantity, p *physics, period, resp time.Duration, noise float64, seed uint64) *fakeMeter {
	return &fakeMeter{name: name, q: q, p: p, period: period, resp: resp, noise: noise, rng: rand.New(rand.NewPCG(seed, 7))}
}

func (m *fakeMeter) Read(ctx context.Context) (drivers.Reading, error) {
	if err := ctx.Err(); err != nil {
		return drivers.Reading{}, err
	}
	now := m.p.clk.Mono()
	if m.next < now && !m.backlog {
		m.next = now
	}
	if m.slowFrom > 0 && m.next >= m.slowFrom {
		m.next += m.slowPeriod
	} else {
		m.next += m.period
	}
	if m.next > now {
		m.p.clk.Advance(m.next - now)
	}
	t := m.next
	for _, w := range m.lost {
		if t >= w.from && t < w.to {
			m.wasLost = true
			return drivers.Reading{}, fmt.Errorf("%s: %w", m.name, drivers.ErrLinkDown)
		}
	}
	if m.brokenFrom > 0 && t >= m.brokenFrom {
		return drivers.Reading{}, fmt.Errorf("%s: %w", m.name, drivers.ErrGarbled)
	}
	k, l := m.p.truth(t)
	x := k + m.p.darkK
	if m.q == units.Luminance {
		x = l
	}
	if !m.started {
		m.y, m.started = x, true
	} else if m.resp > 0 {
		m.y += (x - m.y) * (1 - math.Exp(-float64(t-m.lastT)/float64(m.resp)))
	} else {
		m.y = x
	}
	m.lastT = t
	v := m.y * (1 + m.noise*m.rng.NormFloat64())
	v += m.floor * m.rng.NormFloat64()
	if m.spike != nil {
		v = m.spike(v, t)
	}
	m.reads++
	st := drivers.StatusOK
	switch {
	case m.rangeMax > 0 && v > m.rangeMax:
		st, v = drivers.StatusOverRange, m.rangeMax
	case m.rangeMin > 0 && v < m.rangeMin:
		st, v = drivers.StatusUnderRange, 0
	}
	r := drivers.Reading{Meter: m.name, Quantity: m.q, Value: v, Unit: units.Canonical(m.q), RawValue: v,
		RawUnit: units.Canonical(m.q), Status: st, Raw: fmt.Sprintf("%.5g", v), Mono: t,
		Wall: m.p.clk.Now(), AfterReconnect: m.wasLost}
	m.wasLost = false
	return r, nil
}

func (m *fakeMeter) Close() error { return nil }

// memJournal is an in-memory journal. cutAfter > 0 simulates a power cut:
// the append with that number fails and cancels the run's context.
type memJournal struct {
	mu        sync.Mutex
	sessions  map[string][]entry.Envelope
	ended     map[string]bool
	n         int
	cutAfter  int
	cancel    context.CancelFunc
	onCut     func()
	clk       clock.Clock
	verifyErr error
	// failOn, when set, makes the append it returns true for fail, and
	// every append after it: a journal whose storage has gone.
	failOn func(kind entry.Kind, payload any) bool
	failed bool
}

func newMemJournal(clk clock.Clock) *memJournal {
	return &memJournal{sessions: map[string][]entry.Envelope{}, ended: map[string]bool{}, clk: clk}
}

func (j *memJournal) Begin(ctx context.Context, s entry.Session) (string, error) {
	j.mu.Lock()
	id := fmt.Sprintf("s%d", len(j.sessions)+1)
	j.sessions[id] = nil
	j.mu.Unlock()
	_, err := j.Append(ctx, id, entry.KindSession, s)
	return id, err
}

// AppendAll appends the items one by one: a cut or a failure mid-way
// keeps those before it, as a power cut between two writes would.
func (j *memJournal) AppendAll(ctx context.Context, session string, items []entry.Item) (int64, error) {
	var last int64
	for _, it := range items {
		seq, err := j.Append(ctx, session, it.Kind, it.Payload)
		if err != nil {
			return last, err
		}
		last = seq
	}
	return last, nil
}

func (j *memJournal) Append(ctx context.Context, session string, kind entry.Kind, payload any) (int64, error) {
	if err := ctx.Err(); err != nil {
		return 0, err
	}
	j.mu.Lock()
	defer j.mu.Unlock()
	if j.ended[session] {
		// As the board journal does (journal.ErrSessionEnded).
		return 0, fmt.Errorf("session %s already ended", session)
	}
	j.n++
	if j.failed || (j.failOn != nil && j.failOn(kind, payload)) {
		j.failed = true
		return 0, fmt.Errorf("write journal: disk I/O error")
	}
	if j.cutAfter > 0 && j.n == j.cutAfter {
		j.cancel()
		if j.onCut != nil {
			j.onCut()
		}
		return 0, context.Canceled
	}
	b, err := json.Marshal(payload)
	if err != nil {
		return 0, err
	}
	seq := int64(len(j.sessions[session]) + 1)
	j.sessions[session] = append(j.sessions[session], entry.Envelope{Seq: seq, Session: session, Kind: kind, Wall: j.clk.Now(), Mono: j.clk.Mono(), Payload: b})
	if kind == entry.KindSessionEnd {
		j.ended[session] = true
	}
	return seq, nil
}

// VerifySession implements Journal: the records live in memory, out of
// reach of tampering; verifyErr (set by a test) is what it reports.
func (j *memJournal) VerifySession(ctx context.Context, session string) error {
	j.mu.Lock()
	defer j.mu.Unlock()
	return j.verifyErr
}

func (j *memJournal) Envelopes(ctx context.Context, session string) ([]entry.Envelope, error) {
	j.mu.Lock()
	defer j.mu.Unlock()
	return append([]entry.Envelope(nil), j.sessions[session]...), nil
}

// records decodes every record of a kind.
func records[T any](j *memJournal, session string, kind entry.Kind) []T {
	var out []T
	for _, e := range j.sessions[session] {
		if e.Kind != kind {
			continue
		}
		var v T
		if err := json.Unmarshal(e.Payload, &v); err != nil {
			panic(err)
		}
		out = append(out, v)
	}
	return out
}

// rig is a whole bench for a test.
type rig struct {
	clk   *clock.Manual
	phys  *physics
	dos   *fakeMeter
	phot  *fakeMeter
	pan   *scripted.Panel
	jr    *memJournal
	cfg   Config
	reply func(panel.Prompt) (panel.Response, bool) // test's own answers first
}

func newRig(steps []Step) *rig {
	clk := clock.NewManual(time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC))
	ph := newPhysics(clk)
	r := &rig{clk: clk, phys: ph}
	// Dosimeter: polled at 10 Hz, 0.3 s response; photometer streaming at
	// 10 Hz, 0.5 s response (the demo meters' figures).
	r.dos = newMeter("veltrane", units.AirKermaRate, ph, 100*time.Millisecond, 300*time.Millisecond, 0.02, 1)
	r.dos.floor = 0.0005
	r.phot = newMeter("vessoric", units.Luminance, ph, 100*time.Millisecond, 500*time.Millisecond, 0.01, 2)
	r.jr = newMemJournal(clk)
	r.pan = scripted.New(clk, scripted.WithThinkTime(500*time.Millisecond), scripted.WithResponder(func(p panel.Prompt) panel.Response {
		if r.reply != nil {
			if resp, ok := r.reply(p); ok {
				return resp
			}
		}
		if p.Action == panel.ActBeamOn {
			ph.schedule(true, ph.onDelay)
		}
		return scripted.AckAll(p)
	}), scripted.OnSay(func(m panel.Message) {
		if m.Action == panel.ActBeamOff {
			ph.schedule(false, ph.offDelay)
		}
	}))
	r.cfg = Config{
		Procedure: Procedure{Name: "test", Title: "test sequence", Hash: "abc", Steps: steps},
		Meters:    map[string]drivers.Meter{Dosimeter: r.dos, Photometer: r.phot},
		Panel:     r.pan, Journal: r.jr, Clock: clk,
		Session:  entry.Session{Site: "Tollemby Rise Clinic", Room: "room 2", IntensifierSerial: "HV-2291"},
		Values:   map[string]float64{"temperature": 22, "pressure": 101.3},
		Settings: DefaultSettings(),
		BootID:   "boot-1", ReadInTurn: true,
	}
	return r
}

func (r *rig) run(ctx context.Context) (Summary, error) {
	e, err := New(r.cfg)
	if err != nil {
		return Summary{}, err
	}
	return e.Run(ctx)
}

var safetyItems = []string{
	"Lead apron and thyroid collar on.",
	"Nobody else in the room unless shielded.",
	"Door warning light on.",
	"You are qualified and authorised to operate this unit.",
}

// cfSteps is a conversion factor sequence for one field mode.
func cfSteps() []Step {
	return []Step{
		{ID: "hello", Kind: Say, Text: "Conversion factor check."},
		{ID: "safety", Kind: Checklist, Safety: true, Items: safetyItems},
		{ID: "temp", Kind: Enter, Value: &ValueRequest{Name: "temperature", Unit: "°C", Min: 10, Max: 40}},
		{ID: "press", Kind: Enter, Value: &ValueRequest{Name: "pressure", Unit: "kPa", Min: 70, Max: 110}},
		{ID: "dark", Kind: Measure, Text: "Keep the beam off. Press the switch for the dark reading.", Measure: &MeasureSpec{Meters: []string{Photometer}, Duration: 2 * time.Second}},
		{ID: "cf@32cm", Kind: Measure, FieldMode: "32cm", Text: "Select the 32 centimetre field. Set 70 kV. Press the switch, then step on the pedal.",
			Setup:   map[string]string{"field_mode": "32cm", "tube_voltage": "70 kV"},
			Measure: &MeasureSpec{Meters: []string{Dosimeter, Photometer}, Beam: true, BeamQuality: "RQA5", Precision: 0.02, MaxBeam: 30 * time.Second}},
		{ID: "g@32cm", Kind: Compute, FieldMode: "32cm", Compute: &ComputeSpec{Figure: "conversion_factor", Inputs: map[string]string{"luminance": "cf@32cm", "air_kerma_rate": "cf@32cm"}}},
		{ID: "judge@32cm", Kind: Judge, FieldMode: "32cm", Judge: &JudgeSpec{Result: "g@32cm", Limits: []JudgeLimit{{Kind: "min", Value: 100}}}},
	}
}
