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
	"sort"
	"strconv"
	"strings"
	"sync"
	"time"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/panel/speech"
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

// Delay is how long a person takes for one kind of action, and where the
// figure comes from.
type Delay struct {
	Time   time.Duration
	Source string
}

// Kinds of action in Delays that are not set-up keys.
const (
	DelayListen  = "listen"   // per word the board says before the answer
	DelayPress   = "press"    // a press of the foot switch once the words are heard
	DelayCheck   = "check"    // look at what a checklist line names before pressing
	DelayRead    = "read"     // read a value off the console or a room instrument and enter it
	DelayConfirm = "confirm"  // compare an offered default with the instrument and accept it
	DelayInPlace = "in place" // check a set-up item the bench already has
	DelayOther   = "other"    // a set-up key this table does not know
	DelayPedal   = "pedal"    // step on the beam pedal after the press, or release it when told
)

const estimate = "ESTIMATE (common practice, not measured): "

// Delays is what the simulated operator needs for each kind of action
// (the prompt kinds of procedures/panel) and each set-up key of the
// built-in procedures (procedures/builtin/*.yaml), "key=value" where one
// direction takes longer than the other. A set-up key whose value the
// bench already has costs only DelayInPlace. The set-up and read-off times
// vary by ±20 % and the press and pedal times by ±40 % from one action to
// the next (seeded, so a demo is reproducible). The estimates are for a
// trained engineer in a lead apron at a fluoroscope with the equipment laid
// out; replace them with timings of your own when you have them.
var Delays = map[string]Delay{
	DelayListen:  {time.Minute / 175, "espeak-ng's default rate of 175 words a minute (espeak-ng documentation, option -s), over the words as the board says them (speech.ForEar): the board's speech queue says every message in turn, so a prompt is heard out only after what was queued before it"},
	DelayPress:   {700 * time.Millisecond, estimate + "a foot-switch press once the words are heard (simple reaction times are 0.2 to 0.3 s; a decision and a foot movement more)"},
	DelayPedal:   {700 * time.Millisecond, estimate + "stepping on the pedal after the switch, or off it at \"release the beam\""},
	DelayCheck:   {2 * time.Second, estimate + "look at the door light, the apron, the room, before pressing"},
	DelayRead:    {8 * time.Second, estimate + "find the value on the console, thermometer or barometer and enter it"},
	DelayConfirm: {2 * time.Second, estimate + "compare the offered value with the instrument before pressing"},
	DelayInPlace: {time.Second, estimate + "a glance at a set-up item already in place"},
	DelayOther:   {15 * time.Second, estimate + "a set-up item this table does not name"},

	"grid=removed":        {90 * time.Second, estimate + "unlatch and lift off the anti-scatter grid, put it down where it cannot fall"},
	"grid":                {90 * time.Second, estimate + "refit the anti-scatter grid and latch it"},
	"chamber=input plane": {60 * time.Second, estimate + "tape the ion chamber to the centre of the input, route its cable out of the beam"},
	"chamber":             {20 * time.Second, estimate + "untape the chamber and lay it aside out of the beam"},
	"added_filter":        {30 * time.Second, estimate + "hang (or take down) the aluminium filter at the collimator"},
	"phantom":             {30 * time.Second, estimate + "place (or remove) the phantom in the beam"},
	"lead_disk=in":        {25 * time.Second, estimate + "place the lead disk at the input centre and check its centring on the monitor"},
	"lead_disk":           {15 * time.Second, estimate + "take the lead disk off the input"},
	"photometer":          {15 * time.Second, estimate + "move the photometer to a marked position on the output (radius and angle in one move)"},
	"tube_voltage":        {10 * time.Second, estimate + "set the kV on the console"},
	"tube_current":        {10 * time.Second, estimate + "set the mA on the console"},
	"brightness_control":  {5 * time.Second, estimate + "switch the automatic brightness control on or off"},
	"field_mode":          {5 * time.Second, estimate + "select a field mode on the console"},
	"beam_quality":        {0, "set through the tube voltage and the filter, counted there"},
}

// roomAsFound is the bench as the engineer finds the room: grid fitted,
// no chamber, filter, disk or phantom in the beam; the console's settings
// are not known until a prompt names them.
func roomAsFound() map[string]string {
	return map[string]string{"grid": "in", "chamber": "removed", "added_filter": "none", "lead_disk": "out", "phantom": "out"}
}

// Wait is one answer's wait: the prompt, how long the operator took and
// what for.
type Wait struct {
	StepID string
	Text   string
	Time   time.Duration
	For    []Part // what it was spent on, adding up to Time
}

// Part is the time spent on one kind of action (a key of Delays).
type Part struct {
	Kind string
	Time time.Duration
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
	// Hurried: answer every prompt after the reaction time only, with no
	// time to listen, set up or read off (tests that need speed).
	Hurried bool

	mu      sync.Mutex
	rng     *rand.Rand
	beamOn  bool
	actions []string // what the operator did, for tests
	wg      sync.WaitGroup
	state   map[string]string // the bench as the operator has arranged it
	spoken  time.Duration     // when the board's speech queue falls silent (clock's Mono)
	waits   []Wait
	presses int // beam-on pedal presses
}

// NewOperator returns an operator working bench on clk, with its delays
// drawn from a generator seeded with seed (so a demo is reproducible).
func NewOperator(ctx context.Context, b Bench, clk clock.Clock, seed uint64) *Operator {
	return &Operator{
		ctx:      ctx,
		bench:    b,
		clk:      clk,
		Readings: map[string]float64{},
		Reaction: Delays[DelayPress].Time,
		rng:      rand.New(rand.NewPCG(seed, seed^0x9e3779b97f4a7c15)),
		state:    roomAsFound(),
	}
}

// delay is a human reaction time: Reaction × (0.6 … 1.4).
func (o *Operator) delay() time.Duration {
	o.mu.Lock()
	f := 0.6 + 0.8*o.rng.Float64()
	o.mu.Unlock()
	return time.Duration(float64(o.Reaction) * f)
}

// vary is d × (0.8 … 1.2): a person is not a metronome.
func (o *Operator) vary(d time.Duration) time.Duration {
	o.mu.Lock()
	f := 0.8 + 0.4*o.rng.Float64()
	o.mu.Unlock()
	return time.Duration(float64(d) * f)
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

// Waits lists the operator's waits before each answer, in order.
func (o *Operator) Waits() []Wait {
	o.mu.Lock()
	defer o.mu.Unlock()
	return append([]Wait(nil), o.waits...)
}

// Waited is the sum of the operator's waits before its answers.
func (o *Operator) Waited() time.Duration {
	var d time.Duration
	for _, w := range o.Waits() {
		d += w.Time
	}
	return d
}

// WaitedFor sums the operator's waits by kind of action (keys of Delays).
func (o *Operator) WaitedFor() map[string]time.Duration {
	by := map[string]time.Duration{}
	for _, w := range o.Waits() {
		for _, q := range w.For {
			by[q.Kind] += q.Time
		}
	}
	return by
}

// Exposures is how many times the operator stepped on the beam pedal.
func (o *Operator) Exposures() int {
	o.mu.Lock()
	defer o.mu.Unlock()
	return o.presses
}

// think is how long the operator needs before answering p: listening to
// it and to what was said before it, the set-up it asks for (each item
// that changes), reading off or confirming a value, looking at a checklist
// line, and the press.
func (o *Operator) think(p panel.Prompt) (time.Duration, []Part) {
	press := Part{DelayPress, o.delay()}
	if o.Hurried {
		return press.Time, []Part{press}
	}
	parts := []Part{{DelayListen, o.speak(p.Spoken()) - o.clk.Mono()}}
	if p.Action == panel.ActSetup || p.Action == panel.ActBeamOn {
		for _, k := range o.changes(p.Setup) {
			parts = append(parts, Part{k, o.vary(Delays[k].Time)})
		}
	}
	if p.Action == panel.ActCheck {
		parts = append(parts, Part{DelayCheck, o.vary(Delays[DelayCheck].Time)})
	}
	if v := p.Value; v != nil {
		k := DelayConfirm
		if _, ok := o.Readings[v.Name]; ok || !v.HasDefault {
			k = DelayRead
		}
		parts = append(parts, Part{k, o.vary(Delays[k].Time)})
	}
	parts = append(parts, press)
	var d time.Duration
	for _, q := range parts {
		d += q.Time
	}
	return d, parts
}

// changes are the kinds of action (keys of Delays) a set-up block takes
// with the bench as the operator left it, in a fixed order; it notes the
// new state.
func (o *Operator) changes(setup map[string]string) []string {
	keys := make([]string, 0, len(setup))
	for k := range setup {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	o.mu.Lock()
	defer o.mu.Unlock()
	if o.state == nil {
		o.state = roomAsFound()
	}
	var out []string
	moved := false
	for _, k := range keys {
		v := strings.TrimSpace(setup[k])
		if cur, ok := o.state[k]; ok && cur == v {
			out = append(out, DelayInPlace)
			continue
		}
		o.state[k] = v
		kind := k
		switch {
		case k == "photometer_radius" || k == "photometer_angle" || k == "position":
			if moved {
				continue
			}
			kind, moved = "photometer", true
		default:
			if _, ok := Delays[k+"="+v]; ok {
				kind = k + "=" + v
			} else if _, ok := Delays[k]; !ok {
				kind = DelayOther
			}
		}
		out = append(out, kind)
	}
	return out
}

// Respond answers a prompt after the time a person needs for it.
func (o *Operator) Respond(p panel.Prompt) panel.Response {
	d, what := o.think(p)
	_ = o.clk.Sleep(o.ctx, d)
	o.mu.Lock()
	o.waits = append(o.waits, Wait{StepID: p.StepID, Text: p.Text, Time: d, For: what})
	o.mu.Unlock()
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
	if v.HasDefault {
		return v.Default, false
	}
	return (v.Min + v.Max) / 2, true
}

// speak queues text on the board's speech channel, which says one
// message after another (firmware-host/panel/speech's Queue) while the
// board goes on, and returns when it will have been said.
func (o *Operator) speak(text string) time.Duration {
	words := len(strings.Fields(speech.ForEar(text)))
	now := o.clk.Mono()
	o.mu.Lock()
	defer o.mu.Unlock()
	o.spoken = max(o.spoken, now) + time.Duration(words)*Delays[DelayListen].Time
	return o.spoken
}

// Heard reacts to what the board says: "release the beam". Everything
// said is queued to be spoken before the next prompt can be heard.
func (o *Operator) Heard(m panel.Message) {
	o.speak(m.Text)
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
	if changed && on {
		o.presses++
	}
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
