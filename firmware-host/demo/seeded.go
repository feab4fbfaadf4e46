package demo

import (
	"context"
	"encoding/json"
	"fmt"
	"sort"
	"sync"
	"time"

	"periph.io/x/conn/v3/i2c"

	"kermalux/drivers"
	"kermalux/drivers/benchsim"
	"kermalux/drivers/clock"
	"kermalux/drivers/roomair"
	"kermalux/drivers/roomair/airsim"
	"kermalux/drivers/units"
	"kermalux/firmware-host/bench"
	"kermalux/firmware-host/panel/scripted"
	"kermalux/procedures/engine"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// SeededOptions configure Seeded.
type SeededOptions struct {
	Dir       string // where the bench file and its example files are written
	Scenario  string // scenario file; empty: the embedded default
	Seed      int64  // the scenario's seed when HasSeed
	HasSeed   bool
	Procedure string // empty: the acceptance sequence
	// Period is each simulated meter's reading period (0: 100 ms).
	Period time.Duration
	// Journal records the session; nil: an in-memory journal (returned).
	Journal engine.Journal
	// Wrap, when set, wraps the journal and the panel the engine is given
	// (the live view's tees).
	Wrap func(j engine.Journal, p panel.Panel, clk clock.Clock) (engine.Journal, panel.Panel)
	// Config, when set, may change the engine's configuration before the
	// run (a room-air sensor, other values).
	Config func(cfg *engine.Config, clk clock.Clock)
	// OnAsk is called with each prompt before the simulated operator
	// answers it (a test may wait there, as a slow operator would).
	OnAsk func(p panel.Prompt)
	// OnSay is called with each message before the operator hears it.
	OnSay func(m panel.Message)
	// Language is the bench's language (empty: the bench file's, English).
	Language string
	// RoomAir simulates the bench's room-air sensor (a BME280 on a
	// simulated I2C bus) holding the scenario's air: the procedure's
	// temperature and pressure are read from it instead of entered.
	RoomAir bool
}

// SeededOutcome is what Seeded produced.
type SeededOutcome struct {
	Summary  engine.Summary
	Journal  engine.Journal
	Readings int // meter readings taken
	Config   engine.Config
	// Model is the simulator's physics after the run: its answer key
	// (Truth) and its true beam log (BeamOnTime, BeamLog).
	Model *benchsim.Model
	// Ran is the real time the engine's run took, set-up and teardown
	// around it left out (benchmarks of sampling speed).
	Ran time.Duration
}

// Seeded runs a procedure against the simulator's physics model in this
// process, on a manual clock, with a simulated operator who acts at once
// and switches the beam at fixed delays: the same options and seed give
// the same session, reading for reading. It is the demo's wiring (bench
// file, certificates, corrections, engine) without pseudo-terminals or
// real time, for tests and benchmarks that compare two runs.
func Seeded(ctx context.Context, o SeededOptions) (*SeededOutcome, error) {
	scn, err := loadScenario(o.Scenario)
	if err != nil {
		return nil, err
	}
	if o.HasSeed {
		scn.Seed = o.Seed
	}
	model, err := benchsim.NewModel(scn)
	if err != nil {
		return nil, fmt.Errorf("demo: %w", err)
	}
	clk := clock.NewManual(time.Date(2026, 9, 1, 9, 0, 0, 0, time.UTC)) // within the demo certificates' dates
	_, b, proc, err := benchFor(o.Dir, scn, clk.Now(), o.Procedure, o.Language)
	if err != nil {
		return nil, err
	}
	period := o.Period
	if period <= 0 {
		period = 100 * time.Millisecond
	}
	var count countReads
	meters := map[string]drivers.Meter{
		engine.Dosimeter:  &modelMeter{role: engine.Dosimeter, m: model, clk: clk, cad: meterCadence(clk, period, 1), n: &count, spec: scn.Dosimeter},
		engine.Photometer: &modelMeter{role: engine.Photometer, m: model, clk: clk, cad: meterCadence(clk, period, 2), n: &count, spec: scn.Photometer},
	}
	air := map[string]float64{"temperature": 20, "pressure": 101.325}
	if a := scn.Air; a != nil {
		air["temperature"], air["pressure"] = a.TemperatureC, a.PressureKPa
	}
	if o.RoomAir {
		simulateRoomAir(b, air["temperature"], air["pressure"])
	}
	mb := modelBench{m: model, clk: clk}
	op := &Operator{bench: mb, Readings: air}
	pan := scripted.New(clk, scripted.WithThinkTime(300*time.Millisecond),
		scripted.WithResponder(func(p panel.Prompt) panel.Response {
			if o.OnAsk != nil {
				o.OnAsk(p)
			}
			if p.Action == panel.ActSetup || p.Action == panel.ActBeamOn {
				op.arrange(p.Setup)
			}
			if p.Action == panel.ActBeamOn {
				model.SetBeam(clk.Mono()+500*time.Millisecond, true)
			}
			r := panel.Response{Answer: panel.Ack, At: clk.Now()}
			if p.Value != nil {
				r.Value, r.Entered = op.value(p.Value)
			}
			return r
		}),
		scripted.OnSay(func(m panel.Message) {
			if o.OnSay != nil {
				o.OnSay(m)
			}
			if m.Action == panel.ActBeamOff {
				model.SetBeam(clk.Mono()+300*time.Millisecond, false)
			}
		}))
	defer pan.Close()
	j := o.Journal
	if j == nil {
		j = NewMemJournal(clk)
	}
	var ej engine.Journal = seededJournal{j, scn}
	var ep panel.Panel = pan
	if o.Wrap != nil {
		ej, ep = o.Wrap(ej, ep, clk)
	}
	cfg, err := b.Config(proc, meters, ep, ej, clk, "seeded")
	if err != nil {
		return nil, err
	}
	cfg.BootID = "seeded"
	if o.Config != nil {
		o.Config(&cfg, clk)
	}
	eng, err := engine.New(cfg)
	if err != nil {
		return nil, err
	}
	began := time.Now()
	sum, err := eng.Run(ctx)
	ran := time.Since(began)
	return &SeededOutcome{Summary: sum, Journal: j, Readings: count.get(), Config: cfg, Model: model, Ran: ran}, err
}

type countReads struct {
	mu sync.Mutex
	n  int
}

func (c *countReads) add() { c.mu.Lock(); c.n++; c.mu.Unlock() }
func (c *countReads) get() int {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.n
}

// modelMeter reads the physics model in-process; Read advances the manual
// clock to the meter's next sample time, as the drivers' polling does
// (a dithered cadence: clock.Cadence.Dither).
type modelMeter struct {
	role string
	m    *benchsim.Model
	clk  *clock.Manual
	cad  *clock.Cadence
	n    *countReads
	spec benchsim.MeterSpec
}

// meterCadence is a simulated meter's reading schedule: the drivers'
// dithered one (drivers.PollDither), with a fixed seed per meter so that
// a seed gives the same session.
func meterCadence(clk clock.Clock, period time.Duration, seed uint64) *clock.Cadence {
	c := clock.NewCadence(clk, period)
	c.Dither(drivers.PollDither, seed)
	return c
}

func (s *modelMeter) Read(ctx context.Context) (drivers.Reading, error) {
	if err := s.cad.Wait(ctx); err != nil {
		return drivers.Reading{}, err
	}
	t := s.clk.Mono()
	q, role := units.AirKermaRate, benchsim.RoleDosimeter
	if s.role == engine.Photometer {
		q, role = units.Luminance, benchsim.RolePhotometer
	}
	// What the meter shows, its range included: over range at its
	// maximum, under range with no value.
	mv, st := s.m.Show(role, t)
	v := mv.Value
	if st == drivers.StatusUnderRange {
		v = 0
	}
	s.n.add()
	return drivers.Reading{Meter: s.role, Quantity: q, Value: v, Unit: units.Canonical(q), RawValue: v,
		RawUnit: units.Canonical(q), Status: st, Raw: fmt.Sprintf("%g", v), Mono: t, Wall: s.clk.Now()}, nil
}

// Identify implements drivers.Identifier: the maker, model and serial the
// scenario's meter reports on its link (as the simulator's protocols do).
func (s *modelMeter) Identify(ctx context.Context) (drivers.Identity, error) {
	spec := s.spec
	id := drivers.Identity{Serial: spec.Serial, Firmware: spec.Firmware}
	switch spec.Protocol {
	case benchsim.ProtocolVeltrane:
		id.Maker, id.Model = "Veltrane", "KR-40"
	case benchsim.ProtocolOndrakel:
		id.Maker, id.Model = "Ondrakel", "DX-2"
	case benchsim.ProtocolVessoric:
		id.Maker, id.Model = "Vessoric", "LM-9"
	}
	id.Raw = id.Maker + " " + id.Model + " " + id.Serial
	return id, nil
}

func (s *modelMeter) Close() error { return nil }

// modelBench is the operator's Bench on the model, acting at the clock's now.
type modelBench struct {
	m   *benchsim.Model
	clk clock.Clock
}

func (b modelBench) SetBeam(on bool)                 { b.m.SetBeam(b.clk.Mono(), on) }
func (b modelBench) SetFieldMode(name string) error  { return b.m.SetFieldMode(b.clk.Mono(), name) }
func (b modelBench) SetLeadDisk(in bool)             { b.m.SetLeadDisk(b.clk.Mono(), in) }
func (b modelBench) SetTubeVoltage(kv float64) error { return b.m.SetTubeVoltage(b.clk.Mono(), kv) }
func (b modelBench) SetPhantom(in bool)              { b.m.SetPhantom(b.clk.Mono(), in) }
func (b modelBench) SetBrightnessControl(on bool)    { b.m.SetBrightnessControl(b.clk.Mono(), on) }
func (b modelBench) SetPhotometerPosition(r, a float64) error {
	return b.m.SetPhotometerPosition(b.clk.Mono(), r, a)
}

// MemJournal is an in-memory engine.Journal (not durable, not signed) for
// seeded sessions.
type MemJournal struct {
	mu   sync.Mutex
	clk  clock.Clock
	n    int
	recs map[string][]entry.Envelope
}

// NewMemJournal returns an empty in-memory journal stamping records with clk.
func NewMemJournal(clk clock.Clock) *MemJournal {
	return &MemJournal{clk: clk, recs: map[string][]entry.Envelope{}}
}

// Begin implements engine.Journal.
func (j *MemJournal) Begin(ctx context.Context, s entry.Session) (string, error) {
	j.mu.Lock()
	j.n++
	id := fmt.Sprintf("seeded-%d", j.n)
	j.mu.Unlock()
	s.ID = id
	_, err := j.Append(ctx, id, entry.KindSession, s)
	return id, err
}

// Append implements engine.Journal.
func (j *MemJournal) Append(ctx context.Context, session string, kind entry.Kind, payload any) (int64, error) {
	data, err := json.Marshal(payload)
	if err != nil {
		return 0, fmt.Errorf("memory journal: %s record: %w", kind, err)
	}
	j.mu.Lock()
	defer j.mu.Unlock()
	seq := int64(len(j.recs[session]) + 1)
	j.recs[session] = append(j.recs[session], entry.Envelope{Seq: seq, Session: session, Kind: kind, Wall: j.clk.Now(), Mono: j.clk.Mono(), BootID: "seeded", Payload: data})
	return seq, nil
}

// AppendAll implements engine.Journal.
func (j *MemJournal) AppendAll(ctx context.Context, session string, items []entry.Item) (int64, error) {
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

// Envelopes implements engine.Journal.
func (j *MemJournal) Envelopes(ctx context.Context, session string) ([]entry.Envelope, error) {
	j.mu.Lock()
	defer j.mu.Unlock()
	return append([]entry.Envelope(nil), j.recs[session]...), nil
}

// VerifySession implements engine.Journal: nothing is signed here, and a
// record cannot be tampered with in memory.
func (j *MemJournal) VerifySession(ctx context.Context, session string) error {
	j.mu.Lock()
	defer j.mu.Unlock()
	if _, ok := j.recs[session]; !ok {
		return fmt.Errorf("memory journal: no session %q", session)
	}
	return nil
}

// Sessions lists the sessions begun, in order.
func (j *MemJournal) Sessions() []string {
	j.mu.Lock()
	defer j.mu.Unlock()
	var ids []string
	for id := range j.recs {
		ids = append(ids, id)
	}
	sort.Strings(ids)
	return ids
}

// seededJournal marks each session it begins as a simulator session.
type seededJournal struct {
	engine.Journal
	scn *benchsim.Scenario
}

func (j seededJournal) Begin(ctx context.Context, s entry.Session) (string, error) {
	id, err := j.Journal.Begin(ctx, s)
	if err != nil {
		return id, err
	}
	_, err = j.Journal.Append(ctx, id, entry.KindEvent, entry.Event{
		Name:   "simulated_bench",
		Detail: fmt.Sprintf("readings come from the bench simulator's model in-process (scenario %s, seed %d): not measurements", j.scn.Source, j.scn.Seed),
	})
	return id, err
}

// benchFor writes the simulated bench's file into dir, loads it (marked
// simulated) and the procedure name (empty: the bench's sequence).
func benchFor(dir string, scn *benchsim.Scenario, day time.Time, name, lang string) (string, *bench.Bench, engine.Procedure, error) {
	path, err := writeBench(dir, scn, day)
	if err != nil {
		return "", nil, engine.Procedure{}, err
	}
	b, err := bench.Load(path)
	if err != nil {
		return "", nil, engine.Procedure{}, err
	}
	if err := b.SetLanguage(lang); err != nil {
		return "", nil, engine.Procedure{}, err
	}
	b.Simulated = true // the session, its results and its report say so
	proc, err := b.Procedure(name)
	return path, b, proc, err
}

// simulateRoomAir gives b a room-air sensor on a simulated I2C bus holding
// the room's air (°C, kPa; the humidity is the simulator's own, k_TP does
// not use it).
func simulateRoomAir(b *bench.Bench, tempC, pressKPa float64) {
	chip := airsim.New(airsim.Air{TemperatureC: tempC, PressureKPa: pressKPa, HumidityPct: 45})
	b.RoomAir = &bench.RoomAir{Bus: chip.String(), Address: roomair.AddrLow}
	b.OpenI2C = func(string) (i2c.BusCloser, error) { return chip, nil }
}
