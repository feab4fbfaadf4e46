// Package gpiopanel is the board's panel: a foot switch (or push button) on
// a GPIO input, status LEDs and a buzzer on GPIO outputs, and optionally
// spoken prompts. It drives pins through periph.io.
//
// The foot switch: a short press acknowledges (panel.Ack), a press held for
// the long-press time (1.5 s by default) asks for a retake (panel.Retake),
// and, when enabled, two short presses close together ask for a pause
// (panel.Pause). A value prompt is answered with its default by a press;
// the switch cannot enter a number.
//
// The buzzer: one beep for a good reading, three for a retake, two long for
// a warning, rapid beeping for an alarm, two at start-up. Without speech a
// short chirp also marks each prompt.
package gpiopanel

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"sync"

	"periph.io/x/conn/v3/gpio"
	"periph.io/x/conn/v3/gpio/gpioreg"
	"periph.io/x/host/v3"

	"kermalux/drivers/clock"
	"kermalux/procedures/panel"
)

// Voice is what the panel needs from speech: a queue of utterances where an
// urgent one pre-empts the rest. *speech.Queue provides it.
type Voice interface {
	Say(text string, urgent bool)
	Err() error
	Wait(ctx context.Context) error
	Close() error
}

// Panel is the GPIO panel. Say and Indicate are safe to call while an Ask
// waits; only one Ask may wait at a time.
type Panel struct {
	cfg   Config
	clk   clock.Clock
	sw    *footSwitch
	leds  map[panel.Indicator]gpio.PinOut // ready, beam, fault; absent if not fitted
	ledOn gpio.Level
	beep  *beeper // nil without a buzzer
	voice Voice   // nil without speech
	log   *slog.Logger

	askMu  sync.Mutex
	mu     sync.Mutex
	closed bool
}

var _ panel.Panel = (*Panel)(nil)

// Lookup finds a pin by name; gpioreg.ByName is the real one.
type Lookup func(name string) gpio.PinIO

// New initialises periph, finds the configured pins and returns the panel.
// voice may be nil (no speech: prompts are marked by a chirp). On a machine
// without the GPIO pins, the error wraps panel.ErrNoHardware and names the
// missing pin.
func New(cfg Config, clk clock.Clock, voice Voice, log *slog.Logger) (*Panel, error) {
	if _, err := host.Init(); err != nil {
		return nil, fmt.Errorf("gpio panel: initialising periph: %w: %w", panel.ErrNoHardware, err)
	}
	return NewWithLookup(cfg, clk, voice, log, gpioreg.ByName)
}

// NewWithLookup is New with the pins found by lookup (tests pass fakes).
func NewWithLookup(cfg Config, clk clock.Clock, voice Voice, log *slog.Logger, lookup Lookup) (*Panel, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	pull, err := cfg.pull()
	if err != nil {
		return nil, err
	}
	if clk == nil {
		clk = clock.NewReal()
	}
	if log == nil {
		log = slog.Default()
	}
	find := func(role, name string) (gpio.PinIO, error) {
		p := lookup(name)
		if p == nil {
			return nil, fmt.Errorf("gpio panel: %s pin %q not found on this machine (check the bench file's pin names and that GPIO is enabled): %w", role, name, panel.ErrNoHardware)
		}
		return p, nil
	}

	sp, err := find("foot switch", cfg.Switch)
	if err != nil {
		return nil, err
	}
	if err := sp.In(pull, gpio.NoEdge); err != nil {
		return nil, fmt.Errorf("gpio panel: setting foot switch pin %s as input: %w", cfg.Switch, err)
	}
	p := &Panel{
		cfg:   cfg,
		clk:   clk,
		voice: voice,
		log:   log,
		leds:  map[panel.Indicator]gpio.PinOut{},
		ledOn: gpio.Level(!cfg.LEDActiveLow),
		sw: &footSwitch{
			pin: sp, activeHigh: cfg.SwitchActiveHigh, clk: clk,
			debounce: cfg.Debounce, long: cfg.LongPress, double: cfg.DoublePress, poll: cfg.Poll,
		},
	}
	for _, l := range []struct {
		on         panel.Indicator
		role, name string
	}{{panel.Ready, "ready LED", cfg.ReadyLED}, {panel.BeamOn, "beam-on LED", cfg.BeamLED}, {panel.Fault, "fault LED", cfg.FaultLED}} {
		if l.name == "" {
			continue
		}
		pin, err := find(l.role, l.name)
		if err != nil {
			return nil, err
		}
		if err := pin.Out(!p.ledOn); err != nil {
			return nil, fmt.Errorf("gpio panel: setting %s pin %s as output: %w", l.role, l.name, err)
		}
		p.leds[l.on] = pin
	}
	if cfg.Buzzer != "" {
		pin, err := find("buzzer", cfg.Buzzer)
		if err != nil {
			return nil, err
		}
		bz := &buzzer{pin: pin, activeLow: cfg.BuzzerActiveLow, clk: clk}
		if err := bz.set(false); err != nil {
			return nil, fmt.Errorf("gpio panel: setting buzzer pin %s as output: %w", cfg.Buzzer, err)
		}
		p.beep = newBeeper(bz)
	}
	return p, nil
}

// ErrClosed is returned by calls after Close.
var ErrClosed = errors.New("gpio panel: closed")

// ErrNeedsValue means a value prompt has no default: a foot switch cannot
// enter a number, so the value must come from the bench file or a terminal.
var ErrNeedsValue = errors.New("gpio panel: value prompt has no default")

func (p *Panel) isClosed() bool {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.closed
}

// Beep plays a pattern (Ready at start-up, for instance) without waiting.
func (p *Panel) Beep(pat Pattern) {
	if p.beep != nil {
		p.beep.beep(pat, false)
	}
}

// speaking reports whether speech is present and working.
func (p *Panel) speaking() bool {
	return p.voice != nil && p.voice.Err() == nil
}

// Say speaks m and beeps for its level; it does not wait.
func (p *Panel) Say(ctx context.Context, m panel.Message) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if p.isClosed() {
		return ErrClosed
	}
	if p.voice != nil {
		p.voice.Say(p.cfg.Ear.ForEar(m.Text), m.Level == panel.Alarm)
	}
	if p.beep != nil {
		switch m.Level {
		case panel.Good:
			p.beep.beep(BeepGood, false)
		case panel.Retry:
			p.beep.beep(BeepRetry, false)
		case panel.Warn:
			p.beep.beep(BeepWarn, false)
		case panel.Alarm:
			p.beep.beep(BeepAlarm, true)
		default:
			if !p.speaking() {
				p.beep.beep(BeepPrompt, false)
			}
		}
	}
	return nil
}

// Ask speaks p's words and waits for a gesture on the foot switch.
func (p *Panel) Ask(ctx context.Context, pr panel.Prompt) (panel.Response, error) {
	if p.isClosed() {
		return panel.Response{}, ErrClosed
	}
	if v := pr.Value; v != nil && !v.HasDefault {
		return panel.Response{}, fmt.Errorf("%w: %s (%s) at step %s; set it in the bench file or use a terminal panel", ErrNeedsValue, v.Name, v.Unit, pr.StepID)
	}
	p.askMu.Lock()
	defer p.askMu.Unlock()

	if p.voice != nil {
		p.voice.Say(p.cfg.Ear.PromptText(pr, true), pr.Level == panel.Alarm)
	}
	if p.beep != nil && !p.speaking() {
		p.beep.beep(BeepPrompt, false)
	}
	ans, err := p.sw.press(ctx, func() {
		p.log.Warn("foot switch held down at a prompt; waiting for release", "pin", p.cfg.Switch)
		if p.voice != nil {
			p.voice.Say(p.cfg.Ear.ForEar(p.cfg.Ear.Text("The foot switch is held down. Release it.")), false)
		}
	})
	if err != nil {
		return panel.Response{}, fmt.Errorf("gpio panel: waiting for the foot switch (%s): %w", p.cfg.Switch, err)
	}
	if p.beep != nil {
		switch ans {
		case panel.Retake:
			p.beep.beep(BeepRetry, false)
		case panel.Pause:
			p.beep.beep(BeepPause, false)
		default:
			p.beep.beep(BeepPress, false)
		}
	}
	r := panel.Response{Answer: ans, At: p.clk.Now()}
	if pr.Value != nil && ans == panel.Ack {
		r.Value = pr.Value.Default
	}
	return r, nil
}

// ledPattern is which LEDs are lit for each indicator.
var ledPattern = map[panel.Indicator]map[panel.Indicator]bool{
	panel.Ready:  {panel.Ready: true},
	panel.BeamOn: {panel.BeamOn: true},
	panel.Fault:  {panel.Fault: true},
	panel.Busy:   {},
}

// Indicate lights the LED for on and darkens the others (Busy darkens all).
func (p *Panel) Indicate(ctx context.Context, on panel.Indicator) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if p.isClosed() {
		return ErrClosed
	}
	lit, ok := ledPattern[on]
	if !ok {
		return fmt.Errorf("gpio panel: unknown indicator %q", on)
	}
	var errs []error
	for which, pin := range p.leds {
		l := !p.ledOn
		if lit[which] {
			l = p.ledOn
		}
		if err := pin.Out(l); err != nil {
			errs = append(errs, fmt.Errorf("gpio panel: %s LED: %w", which, err))
		}
	}
	return errors.Join(errs...)
}

// Wait returns when the buzzer and speech have finished what is queued.
func (p *Panel) Wait(ctx context.Context) error {
	if p.beep != nil {
		if err := p.beep.wait(ctx); err != nil {
			return err
		}
	}
	if p.voice != nil {
		return p.voice.Wait(ctx)
	}
	return nil
}

// Close silences the buzzer, darkens the LEDs and stops speech.
func (p *Panel) Close() error {
	p.mu.Lock()
	if p.closed {
		p.mu.Unlock()
		return nil
	}
	p.closed = true
	p.mu.Unlock()
	if p.beep != nil {
		p.beep.close()
	}
	for _, pin := range p.leds {
		_ = pin.Out(!p.ledOn)
	}
	if p.voice != nil {
		return p.voice.Close()
	}
	return nil
}
