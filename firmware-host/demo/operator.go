// Package demo runs the whole acceptance sequence hands-free against the
// bench simulator over pseudo-terminals, with a simulated operator who does
// what the prompts ask: arranges the bench, presses the foot switch, steps
// on the beam pedal and releases it when told, each after a human delay.
//
// Everything the demo measures is simulated: its figures are not
// measurements of any real intensifier.
package demo

import (
	"context"
	"math/rand/v2"
	"strconv"
	"strings"
	"sync"
	"time"

	"kermalux/drivers/clock"
	"kermalux/procedures/panel"
)

// Bench is what the simulated operator works on: the simulator's controls.
type Bench interface {
	SetBeam(on bool)
	SetFieldMode(name string) error
	SetLeadDisk(in bool)
	SetPhotometerPosition(rFrac, angleDeg float64) error
	SetTubeVoltage(kv float64) error
	SetPhantom(in bool)
	SetBrightnessControl(on bool)
}

// Operator answers prompts as a person at the bench would. Use Respond as
// the scripted panel's responder and Heard as its OnSay hook.
type Operator struct {
	ctx   context.Context
	bench Bench
	clk   clock.Clock

	// Reading are what the operator reads off the room's instruments and
	// the console when a value is asked (temperature °C, pressure kPa...);
	// a value not listed is confirmed at its default.
	Readings map[string]float64
	// Reaction is the mean human delay before a press or a pedal action.
	Reaction time.Duration

	mu      sync.Mutex
	rng     *rand.Rand
	beamOn  bool
	actions []string // what the operator did, for tests
	wg      sync.WaitGroup
}

// NewOperator returns an operator working bench on clk, with its delays
// drawn from a generator seeded with seed (so a demo is reproducible).
func NewOperator(ctx context.Context, b Bench, clk clock.Clock, seed uint64) *Operator {
	return &Operator{
		ctx:      ctx,
		bench:    b,
		clk:      clk,
		Readings: map[string]float64{},
		Reaction: 700 * time.Millisecond,
		rng:      rand.New(rand.NewPCG(seed, seed^0x9e3779b97f4a7c15)),
	}
}

// delay is a human reaction time: Reaction × (0.6 … 1.4).
func (o *Operator) delay() time.Duration {
	o.mu.Lock()
	f := 0.6 + 0.8*o.rng.Float64()
	o.mu.Unlock()
	return time.Duration(float64(o.Reaction) * f)
}

func (o *Operator) did(s string) {
	o.mu.Lock()
	o.actions = append(o.actions, s)
	o.mu.Unlock()
}

// Actions lists what the operator did, in order.
func (o *Operator) Actions() []string {
	o.mu.Lock()
	defer o.mu.Unlock()
	return append([]string(nil), o.actions...)
}

// Respond answers a prompt after a human delay.
func (o *Operator) Respond(p panel.Prompt) panel.Response {
	_ = o.clk.Sleep(o.ctx, o.delay())
	switch p.Action {
	case panel.ActSetup:
		o.arrange(p.Setup)
	case panel.ActBeamOn:
		o.arrange(p.Setup)
		// Press the switch now; step on the pedal a moment later.
		o.wg.Add(1)
		go func() {
			defer o.wg.Done()
			if o.clk.Sleep(o.ctx, o.delay()) != nil {
				return
			}
			o.setBeam(true)
		}()
	}
	r := panel.Response{Answer: panel.Ack, At: o.clk.Now()}
	if p.Value != nil {
		r.Value, r.Entered = o.value(p.Value)
	}
	return r
}

// value is what the operator reads off for a value prompt, and whether
// it was read off (entered) rather than the offered default accepted.
func (o *Operator) value(v *panel.ValueRequest) (float64, bool) {
	if x, ok := o.Readings[v.Name]; ok && (v.Min == v.Max || (x >= v.Min && x <= v.Max)) {
		o.did("enter " + v.Name + " " + strconv.FormatFloat(x, 'g', -1, 64))
		return x, true
	}
	if v.HasDef {
		return v.Default, false
	}
	return (v.Min + v.Max) / 2, true
}

// Heard reacts to what the board says: "release the beam".
func (o *Operator) Heard(m panel.Message) {
	if m.Action != panel.ActBeamOff {
		return
	}
	o.wg.Add(1)
	go func() {
		defer o.wg.Done()
		if o.clk.Sleep(o.ctx, o.delay()) != nil {
			return
		}
		o.setBeam(false)
	}()
}

// Wait waits for the operator's pending actions (pedal presses) to finish.
func (o *Operator) Wait() { o.wg.Wait() }

func (o *Operator) setBeam(on bool) {
	o.mu.Lock()
	changed := o.beamOn != on
	o.beamOn = on
	o.mu.Unlock()
	if changed {
		o.bench.SetBeam(on)
		if on {
			o.did("beam on")
		} else {
			o.did("beam off")
		}
	}
}

// arrange sets the bench as a setup block asks; keys the simulator does
// not model (grid, filter, chamber) are arranged by hand and need nothing.
func (o *Operator) arrange(setup map[string]string) {
	if len(setup) == 0 {
		return
	}
	if v, ok := setup["field_mode"]; ok {
		if o.bench.SetFieldMode(v) == nil {
			o.did("field mode " + v)
		}
	}
	if v, ok := setup["tube_voltage"]; ok {
		if kv, ok := number(v); ok && o.bench.SetTubeVoltage(kv) == nil {
			o.did("tube voltage " + v)
		}
	}
	if v, ok := setup["lead_disk"]; ok {
		o.bench.SetLeadDisk(v == "in")
		o.did("lead disk " + v)
	}
	if v, ok := setup["phantom"]; ok {
		o.bench.SetPhantom(v == "in")
		o.did("phantom " + v)
	}
	if v, ok := setup["brightness_control"]; ok {
		o.bench.SetBrightnessControl(v == "on")
		o.did("brightness control " + v)
	}
	r, okR := setup["photometer_radius"]
	a, okA := setup["photometer_angle"]
	if okR || okA {
		rf, _ := number(r)
		af, _ := number(a)
		if o.bench.SetPhotometerPosition(rf, af) == nil {
			o.did("photometer at " + strings.TrimSpace(r+" "+a))
		}
	}
}

// number reads the leading number of a setup value such as "70 kV" or "0.9 r".
func number(s string) (float64, bool) {
	f := strings.Fields(s)
	if len(f) == 0 {
		return 0, false
	}
	x, err := strconv.ParseFloat(f[0], 64)
	return x, err == nil
}
