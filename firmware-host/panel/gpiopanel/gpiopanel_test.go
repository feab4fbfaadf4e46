package gpiopanel

import (
	"context"
	"errors"
	"strings"
	"sync"
	"testing"
	"time"

	"periph.io/x/conn/v3/gpio"
	"periph.io/x/conn/v3/gpio/gpiotest"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/panel/speech"
	"kermalux/procedures/catalog"
	"kermalux/procedures/panel"
)

const ms = time.Millisecond

var t0 = time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC)

// switchPin is a gpiotest.Pin whose level follows a timeline on a manual
// clock: changes[i] toggles the switch (pressed, released, pressed, ...)
// at that monotonic time.
type switchPin struct {
	gpiotest.Pin
	clk        *clock.Manual
	changes    []time.Duration
	activeHigh bool
	startDown  bool
}

func (p *switchPin) Read() gpio.Level {
	now := p.clk.Mono()
	down := p.startDown
	for _, c := range p.changes {
		if c <= now {
			down = !down
		}
	}
	return gpio.Level(down == p.activeHigh)
}

// edge is an output pin change.
type edge struct {
	at time.Duration
	l  gpio.Level
}

// outPin is a gpiotest.Pin that records every Out with the clock's time.
type outPin struct {
	gpiotest.Pin
	clk   clock.Clock
	mu    sync.Mutex
	edges []edge
}

func (p *outPin) Out(l gpio.Level) error {
	p.mu.Lock()
	p.edges = append(p.edges, edge{p.clk.Mono(), l})
	p.mu.Unlock()
	return p.Pin.Out(l)
}

// beeps returns the start times of beeps (rising edges after a low level).
func (p *outPin) beeps(activeLow bool) []time.Duration {
	p.mu.Lock()
	defer p.mu.Unlock()
	var out []time.Duration
	on := false
	for _, e := range p.edges {
		now := bool(e.l) != activeLow
		if now && !on {
			out = append(out, e.at)
		}
		on = now
	}
	return out
}

// fakeVoice records what would be said.
type fakeVoice struct {
	mu   sync.Mutex
	said []string
	err  error
}

func (v *fakeVoice) Say(text string, urgent bool) {
	v.mu.Lock()
	defer v.mu.Unlock()
	if urgent {
		text = "URGENT " + text
	}
	v.said = append(v.said, text)
}
func (v *fakeVoice) Err() error                 { return v.err }
func (v *fakeVoice) Wait(context.Context) error { return nil }
func (v *fakeVoice) Close() error               { return nil }

type bench struct {
	clk    *clock.Manual
	sw     *switchPin
	ready  *outPin
	beam   *outPin
	fault  *outPin
	buzzer *outPin
	voice  *fakeVoice
}

func (b *bench) lookup(name string) gpio.PinIO {
	switch name {
	case "GPIO17":
		return b.sw
	case "GPIO22":
		return b.ready
	case "GPIO23":
		return b.beam
	case "GPIO24":
		return b.fault
	case "GPIO25":
		return b.buzzer
	}
	return nil
}

func newBench(t *testing.T, cfg Config, sw *switchPin) (*bench, *Panel) {
	t.Helper()
	clk := clock.NewManual(t0)
	if sw == nil {
		sw = &switchPin{}
	}
	sw.clk = clk
	sw.Pin.N = "GPIO17"
	b := &bench{clk: clk, sw: sw, voice: &fakeVoice{}}
	for _, p := range []**outPin{&b.ready, &b.beam, &b.fault, &b.buzzer} {
		*p = &outPin{clk: clk}
	}
	if cfg.Switch == "" {
		cfg.Switch = "GPIO17"
	}
	p, err := NewWithLookup(cfg, clk, b.voice, nil, b.lookup)
	if err != nil {
		t.Fatalf("NewWithLookup: %v", err)
	}
	t.Cleanup(func() { p.Close() })
	return b, p
}

func TestFootSwitch(t *testing.T) {
	t.Parallel()
	// Defaults: debounce 30 ms, long press 1.5 s, sampling every 5 ms. The
	// answer time is when the gesture was recognised: a short press when
	// its release has held for the debounce time, a long press as soon as
	// it has been held for the long-press time.
	tests := []struct {
		name       string
		double     time.Duration
		activeHigh bool
		startDown  bool
		changes    []time.Duration
		want       panel.Answer
		atMin      time.Duration // recognised no earlier than this
		atMax      time.Duration // and no later
	}{
		{name: "clean short press", changes: []time.Duration{100 * ms, 300 * ms},
			want: panel.Ack, atMin: 330 * ms, atMax: 340 * ms},
		{name: "bounces shorter than debounce are ignored",
			changes: []time.Duration{100 * ms, 110 * ms, 200 * ms, 215 * ms, 400 * ms, 425 * ms, 1000 * ms, 1200 * ms},
			want:    panel.Ack, atMin: 1230 * ms, atMax: 1240 * ms},
		{name: "bounce while held is one press, not a double press", double: 400 * ms,
			changes: []time.Duration{100 * ms, 500 * ms, 510 * ms, 900 * ms},
			want:    panel.Ack, atMin: 900*ms + 400*ms, atMax: 900*ms + 450*ms},
		{name: "release bounce is not a second press", double: 400 * ms,
			changes: []time.Duration{100 * ms, 300 * ms, 310 * ms, 320 * ms},
			want:    panel.Ack, atMin: 320*ms + 400*ms, atMax: 320*ms + 450*ms},
		{name: "long press is a retake, reported while held", changes: []time.Duration{100 * ms, 2500 * ms},
			want: panel.Retake, atMin: 1600 * ms, atMax: 1610 * ms},
		{name: "just under long press is an ack", changes: []time.Duration{100 * ms, 1550 * ms},
			want: panel.Ack, atMin: 1580 * ms, atMax: 1590 * ms},
		{name: "double press is a pause, once no third press follows", double: 400 * ms,
			changes: []time.Duration{100 * ms, 250 * ms, 450 * ms, 600 * ms},
			want:    panel.Pause, atMin: 600*ms + 400*ms, atMax: 600*ms + 420*ms},
		{name: "triple press says the prompt again", double: 400 * ms,
			changes: []time.Duration{100 * ms, 250 * ms, 450 * ms, 600 * ms, 800 * ms, 950 * ms},
			want:    panel.Repeat, atMin: 980 * ms, atMax: 990 * ms},
		{name: "presses too far apart: the first is an ack", double: 400 * ms,
			changes: []time.Duration{100 * ms, 250 * ms, 700 * ms, 800 * ms},
			want:    panel.Ack, atMin: 250*ms + 400*ms, atMax: 250*ms + 420*ms},
		{name: "held at the prompt must be released first", startDown: true,
			changes: []time.Duration{500 * ms, 800 * ms, 900 * ms},
			want:    panel.Ack, atMin: 930 * ms, atMax: 940 * ms},
		{name: "active-high switch", activeHigh: true, changes: []time.Duration{100 * ms, 300 * ms},
			want: panel.Ack, atMin: 330 * ms, atMax: 340 * ms},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			sw := &switchPin{changes: tc.changes, activeHigh: tc.activeHigh, startDown: tc.startDown}
			b, p := newBench(t, Config{DoublePress: tc.double, SwitchActiveHigh: tc.activeHigh}, sw)
			r, err := p.Ask(context.Background(), panel.Prompt{Message: panel.Message{Text: "Press the switch."}})
			if err != nil {
				t.Fatal(err)
			}
			if r.Answer != tc.want {
				t.Errorf("answer %q, want %q", r.Answer, tc.want)
			}
			at := r.At.Sub(t0)
			if at < tc.atMin || at > tc.atMax {
				t.Errorf("recognised at %v, want %v to %v", at, tc.atMin, tc.atMax)
			}
			if wantPull := map[bool]gpio.Pull{false: gpio.PullUp, true: gpio.PullDown}[tc.activeHigh]; b.sw.P != wantPull {
				t.Errorf("pull %v, want %v", b.sw.P, wantPull)
			}
		})
	}
}

func TestStuckSwitchIsReported(t *testing.T) {
	t.Parallel()
	sw := &switchPin{startDown: true, changes: []time.Duration{4000 * ms, 4200 * ms, 4300 * ms}}
	b, p := newBench(t, Config{}, sw)
	r, err := p.Ask(context.Background(), panel.Prompt{Message: panel.Message{Text: "Apron on?"}})
	if err != nil {
		t.Fatal(err)
	}
	if r.Answer != panel.Ack || r.At.Sub(t0) < 4300*ms {
		t.Errorf("got %q at %v, want ack after the press at 4.2 s", r.Answer, r.At.Sub(t0))
	}
	said := strings.Join(b.voice.said, "|")
	if !strings.Contains(said, "held down") {
		t.Errorf("no warning about the held switch; said %q", said)
	}
}

func TestAskHonoursContext(t *testing.T) {
	t.Parallel()
	_, p := newBench(t, Config{}, &switchPin{})
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	_, err := p.Ask(ctx, panel.Prompt{})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("err = %v, want context.Canceled", err)
	}
}

func TestValuePrompts(t *testing.T) {
	t.Parallel()
	_, p := newBench(t, Config{}, &switchPin{changes: []time.Duration{100 * ms, 200 * ms}})
	ctx := context.Background()
	_, err := p.Ask(ctx, panel.Prompt{StepID: "room", Value: &panel.ValueRequest{Name: "pressure", Unit: "kPa", Min: 80, Max: 110}})
	if !errors.Is(err, ErrNeedsValue) || !strings.Contains(err.Error(), "pressure") {
		t.Errorf("no default: err = %v, want ErrNeedsValue naming pressure", err)
	}
	r, err := p.Ask(ctx, panel.Prompt{Value: &panel.ValueRequest{Name: "pressure", Unit: "kPa", Default: 101.3, HasDefault: true, Min: 80, Max: 110}})
	if err != nil {
		t.Fatal(err)
	}
	if r.Answer != panel.Ack || r.Value != 101.3 {
		t.Errorf("got %+v, want ack with the default 101.3", r)
	}
}

func TestLEDs(t *testing.T) {
	t.Parallel()
	tests := []struct {
		on                 panel.Indicator
		ready, beam, fault bool
	}{
		{panel.Ready, true, false, false},
		{panel.BeamOn, false, true, false},
		{panel.Fault, false, false, true},
		{panel.Busy, false, false, false},
	}
	for _, activeLow := range []bool{false, true} {
		b, p := newBench(t, Config{ReadyLED: "GPIO22", BeamLED: "GPIO23", FaultLED: "GPIO24", LEDActiveLow: activeLow}, nil)
		lit := func(o *outPin) bool { return (o.Read() == gpio.High) != activeLow }
		for _, l := range []*outPin{b.ready, b.beam, b.fault} {
			if lit(l) {
				t.Errorf("active low %v: an LED is lit before any Indicate", activeLow)
			}
		}
		for _, tc := range tests {
			if err := p.Indicate(context.Background(), tc.on); err != nil {
				t.Fatal(err)
			}
			if lit(b.ready) != tc.ready || lit(b.beam) != tc.beam || lit(b.fault) != tc.fault {
				t.Errorf("active low %v, %s: ready %v beam %v fault %v, want %v %v %v", activeLow, tc.on,
					lit(b.ready), lit(b.beam), lit(b.fault), tc.ready, tc.beam, tc.fault)
			}
		}
		if err := p.Indicate(context.Background(), "disco"); err == nil {
			t.Error("unknown indicator accepted")
		}
		p.Close()
		if lit(b.fault) || lit(b.ready) {
			t.Error("LEDs left lit after Close")
		}
	}
}

func TestBuzzerPatterns(t *testing.T) {
	t.Parallel()
	// Beep counts from the brief's convention: one = good, three = retake,
	// two = ready, rapid = alarm.
	tests := []struct {
		name      string
		pat       Pattern
		beeps     int
		total     time.Duration
		activeLow bool
	}{
		{"good", BeepGood, 1, 200 * ms, false},
		{"retry", BeepRetry, 3, 600 * ms, false},
		{"ready", BeepReady, 2, 450 * ms, false},
		{"warn", BeepWarn, 2, 1250 * ms, false},
		{"alarm", BeepAlarm, 20, 1950 * ms, false},
		{"retry on an active-low buzzer", BeepRetry, 3, 600 * ms, true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			clk := clock.NewManual(t0)
			pin := &outPin{clk: clk}
			bz := &buzzer{pin: pin, activeLow: tc.activeLow, clk: clk}
			if err := bz.play(context.Background(), tc.pat); err != nil {
				t.Fatal(err)
			}
			if got := pin.beeps(tc.activeLow); len(got) != tc.beeps {
				t.Errorf("%d beeps at %v, want %d", len(got), got, tc.beeps)
			}
			if clk.Mono() != tc.total {
				t.Errorf("pattern lasted %v, want %v", clk.Mono(), tc.total)
			}
			last := pin.edges[len(pin.edges)-1]
			if on := bool(last.l) != tc.activeLow; on {
				t.Error("buzzer left sounding")
			}
		})
	}
}

func TestSayBeepsByLevel(t *testing.T) {
	t.Parallel()
	tests := []struct {
		level panel.Level
		beeps int
	}{
		{panel.Good, 1},
		{panel.Retry, 3},
		{panel.Warn, 2},
		{panel.Alarm, 20},
		{panel.Info, 0}, // speech is working: no chirp
	}
	for _, tc := range tests {
		b, p := newBench(t, Config{Buzzer: "GPIO25"}, nil)
		if err := p.Say(context.Background(), panel.Message{Text: "Luminance 102 cd/m²", Level: tc.level}); err != nil {
			t.Fatal(err)
		}
		if err := p.Wait(context.Background()); err != nil {
			t.Fatal(err)
		}
		if got := len(b.buzzer.beeps(false)); got != tc.beeps {
			t.Errorf("%s: %d beeps, want %d", tc.level, got, tc.beeps)
		}
		want := "Luminance 102 candelas per square metre"
		if tc.level == panel.Alarm {
			want = "URGENT " + want
		}
		if len(b.voice.said) != 1 || b.voice.said[0] != want {
			t.Errorf("%s: said %q, want %q", tc.level, b.voice.said, want)
		}
	}
}

func TestChirpWithoutSpeech(t *testing.T) {
	t.Parallel()
	b, p := newBench(t, Config{Buzzer: "GPIO25"}, nil)
	b.voice.err = errors.New("espeak-ng failed")
	if err := p.Say(context.Background(), panel.Message{Text: "Place the lead disk."}); err != nil {
		t.Fatal(err)
	}
	if err := p.Wait(context.Background()); err != nil {
		t.Fatal(err)
	}
	if got := len(b.buzzer.beeps(false)); got != 1 {
		t.Errorf("%d beeps with broken speech, want a chirp", got)
	}
}

func TestNoHardware(t *testing.T) {
	t.Parallel()
	// On this machine host.Init succeeds but no pin has this name.
	_, err := New(Config{Switch: "KERMALUX_NO_SUCH_PIN"}, nil, nil, nil)
	if !errors.Is(err, panel.ErrNoHardware) {
		t.Fatalf("err = %v, want ErrNoHardware", err)
	}
	if !strings.Contains(err.Error(), "KERMALUX_NO_SUCH_PIN") || !strings.Contains(err.Error(), "foot switch") {
		t.Errorf("error does not name the pin and its role: %v", err)
	}
	// A missing LED is named too.
	b := &bench{sw: &switchPin{}}
	_, err = NewWithLookup(Config{Switch: "GPIO17", FaultLED: "GPIO99"}, clock.NewManual(t0), nil, nil, b.lookup)
	if !errors.Is(err, panel.ErrNoHardware) || !strings.Contains(err.Error(), "GPIO99") {
		t.Errorf("missing LED: err = %v", err)
	}
}

func TestConfigChecks(t *testing.T) {
	t.Parallel()
	tests := []struct {
		name string
		cfg  Config
		want string
	}{
		{"no switch", Config{}, "no foot switch"},
		{"bad pull", Config{Switch: "GPIO17", SwitchPull: "sideways"}, "switch_pull"},
		{"long press too short", Config{Switch: "GPIO17", LongPress: 40 * ms}, "long press"},
		{"poll too slow", Config{Switch: "GPIO17", Poll: 100 * ms}, "poll"},
		{"negative", Config{Switch: "GPIO17", Debounce: -ms}, "negative"},
	}
	b := &bench{sw: &switchPin{}}
	for _, tc := range tests {
		_, err := NewWithLookup(tc.cfg, clock.NewManual(t0), nil, nil, b.lookup)
		if err == nil || !strings.Contains(err.Error(), tc.want) {
			t.Errorf("%s: err = %v, want one mentioning %q", tc.name, err, tc.want)
		}
	}
}

// A French board says the held-switch warning, an offered value and its
// cue in French, the number with "virgule" (the expected words written by
// hand: procedures/catalog/lang/fr/panel.yaml, and the SI Brochure's
// French unit names).
func TestSaysInTheBenchLanguage(t *testing.T) {
	t.Parallel()
	c, err := catalog.Builtin("fr")
	if err != nil {
		t.Fatal(err)
	}
	sw := &switchPin{startDown: true, changes: []time.Duration{4000 * ms, 4200 * ms, 4300 * ms}}
	b, p := newBench(t, Config{Ear: speech.NewEar(c)}, sw)
	_, err = p.Ask(context.Background(), panel.Prompt{Message: panel.Message{Text: "Pression de l'air."},
		Value: &panel.ValueRequest{Name: "pressure", Unit: "kPa", Default: 101.3, HasDefault: true, Min: 80, Max: 110}})
	if err != nil {
		t.Fatal(err)
	}
	said := strings.Join(b.voice.said, "|")
	for _, want := range []string{"Pression de l'air. 101 virgule 3 kilopascals. Appuyez pour accepter.", "Le bouton au pied reste enfoncé. Relâchez-le."} {
		if !strings.Contains(said, want) {
			t.Errorf("not said: %q; said %q", want, said)
		}
	}
}
