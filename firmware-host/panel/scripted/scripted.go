// Package scripted is a panel.Panel for tests and for the demo's simulated
// operator: it records every Say, Ask and Indicate with the clock's time and
// answers prompts from a script of responses or from a callback.
//
// A script is consumed in order, one response per Ask. When it runs out the
// callback (if any) answers; with neither, Ask fails with ErrScriptEnded so
// a test that forgot a step fails loudly instead of hanging.
package scripted

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"time"

	"kermalux/drivers/clock"
	"kermalux/procedures/panel"
)

// EventKind names what a recorded event was.
type EventKind string

const (
	KindSay      EventKind = "say"
	KindAsk      EventKind = "ask"
	KindIndicate EventKind = "indicate"
)

// Event is one recorded call on the panel.
type Event struct {
	Kind      EventKind
	At        time.Time       // the clock's time when the call was made
	Message   panel.Message   // KindSay
	Prompt    panel.Prompt    // KindAsk
	Response  panel.Response  // KindAsk: the answer given
	Err       error           // KindAsk: the error returned, if any
	Indicator panel.Indicator // KindIndicate
}

// Responder answers a prompt, as a simulated operator would.
type Responder func(panel.Prompt) panel.Response

// ErrScriptEnded means a prompt came after the script ran out and no
// Responder was set.
var ErrScriptEnded = errors.New("scripted panel: script ended")

// ErrClosed is returned by calls after Close.
var ErrClosed = errors.New("scripted panel: closed")

// ErrOutOfRange means a scripted value lies outside the prompt's Min..Max;
// a real panel would refuse it, so the scripted one does too.
var ErrOutOfRange = errors.New("scripted panel: value out of range")

// Option configures a Panel.
type Option func(*Panel)

// WithScript answers the first len(rs) prompts with rs, in order.
func WithScript(rs ...panel.Response) Option {
	return func(p *Panel) { p.script = append(p.script, rs...) }
}

// WithResponder answers prompts once the script (if any) is used up.
func WithResponder(r Responder) Option { return func(p *Panel) { p.answer = r } }

// OnSay calls f with every message said (after recording it), so a
// simulated operator can react to "release the beam" (ActBeamOff).
func OnSay(f func(panel.Message)) Option { return func(p *Panel) { p.onSay = f } }

// OnIndicate calls f with every indicator set.
func OnIndicate(f func(panel.Indicator)) Option { return func(p *Panel) { p.onIndicate = f } }

// WithThinkTime makes each Ask wait d on the panel's clock before answering,
// like an operator who takes a moment to press the foot switch.
func WithThinkTime(d time.Duration) Option { return func(p *Panel) { p.think = d } }

// AckAll is a Responder that acknowledges every prompt and accepts the
// default of every value prompt (the midpoint of Min..Max when there is no
// default).
func AckAll(pr panel.Prompt) panel.Response {
	r := panel.Response{Answer: panel.Ack}
	if v := pr.Value; v != nil {
		if v.HasDefault {
			r.Value = v.Default
		} else {
			r.Value = (v.Min + v.Max) / 2
		}
	}
	return r
}

// Panel is the scripted panel. It is safe for concurrent use.
type Panel struct {
	clk        clock.Clock
	think      time.Duration
	answer     Responder
	onSay      func(panel.Message)
	onIndicate func(panel.Indicator)

	mu     sync.Mutex
	script []panel.Response
	events []Event
	closed bool
}

// New returns a scripted panel on clk (a Manual clock if nil).
func New(clk clock.Clock, opts ...Option) *Panel {
	if clk == nil {
		clk = clock.NewManual(time.Time{})
	}
	p := &Panel{clk: clk}
	for _, o := range opts {
		o(p)
	}
	return p
}

var _ panel.Panel = (*Panel)(nil)

// Say records m.
func (p *Panel) Say(ctx context.Context, m panel.Message) error {
	if err := p.note(ctx, Event{Kind: KindSay, Message: m}); err != nil {
		return err
	}
	if p.onSay != nil {
		p.onSay(m)
	}
	return nil
}

// Ask records pr and answers it from the script or the Responder.
func (p *Panel) Ask(ctx context.Context, pr panel.Prompt) (panel.Response, error) {
	if err := ctx.Err(); err != nil {
		return panel.Response{}, err
	}
	p.mu.Lock()
	if p.closed {
		p.mu.Unlock()
		return panel.Response{}, ErrClosed
	}
	idx := len(p.events)
	p.events = append(p.events, Event{Kind: KindAsk, At: p.clk.Now(), Prompt: pr})
	var (
		r   panel.Response
		ok  bool
		err error
	)
	if len(p.script) > 0 {
		r, p.script, ok = p.script[0], p.script[1:], true
	}
	p.mu.Unlock()

	if p.think > 0 {
		if err := p.clk.Sleep(ctx, p.think); err != nil {
			p.record(idx, panel.Response{}, err)
			return panel.Response{}, err
		}
	}
	switch {
	case ok:
	case p.answer != nil:
		r = p.answer(pr)
	default:
		err = fmt.Errorf("%w: no answer for prompt %q (step %s)", ErrScriptEnded, pr.Text, pr.StepID)
	}
	if err == nil && pr.Value != nil && r.Answer == panel.Ack {
		if v := pr.Value; r.Value < v.Min || r.Value > v.Max {
			err = fmt.Errorf("%w: %s = %g %s, allowed %g to %g", ErrOutOfRange, v.Name, r.Value, v.Unit, v.Min, v.Max)
		}
	}
	if err != nil {
		p.record(idx, panel.Response{}, err)
		return panel.Response{}, err
	}
	if r.At.IsZero() {
		r.At = p.clk.Now()
	}
	p.record(idx, r, nil)
	return r, nil
}

func (p *Panel) record(idx int, r panel.Response, err error) {
	p.mu.Lock()
	p.events[idx].Response = r
	p.events[idx].Err = err
	p.mu.Unlock()
}

// Indicate records on.
func (p *Panel) Indicate(ctx context.Context, on panel.Indicator) error {
	if err := p.note(ctx, Event{Kind: KindIndicate, Indicator: on}); err != nil {
		return err
	}
	if p.onIndicate != nil {
		p.onIndicate(on)
	}
	return nil
}

// note records ev at the clock's time, unless ctx is done or the panel
// is closed.
func (p *Panel) note(ctx context.Context, ev Event) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.closed {
		return ErrClosed
	}
	ev.At = p.clk.Now()
	p.events = append(p.events, ev)
	return nil
}

// Close ends the panel; later calls fail with ErrClosed.
func (p *Panel) Close() error {
	p.mu.Lock()
	p.closed = true
	p.mu.Unlock()
	return nil
}

// Events returns a copy of everything recorded so far.
func (p *Panel) Events() []Event {
	p.mu.Lock()
	defer p.mu.Unlock()
	return append([]Event(nil), p.events...)
}

// Prompts returns the prompts asked so far, in order.
func (p *Panel) Prompts() []panel.Prompt {
	var out []panel.Prompt
	for _, e := range p.Events() {
		if e.Kind == KindAsk {
			out = append(out, e.Prompt)
		}
	}
	return out
}

// Messages returns the messages said so far, in order.
func (p *Panel) Messages() []panel.Message {
	var out []panel.Message
	for _, e := range p.Events() {
		if e.Kind == KindSay {
			out = append(out, e.Message)
		}
	}
	return out
}

// Remaining is how many scripted responses are still unused.
func (p *Panel) Remaining() int {
	p.mu.Lock()
	defer p.mu.Unlock()
	return len(p.script)
}

// Dialogue renders the events one per line, for golden files and
// failure messages:
//
//	+12.5s say warn: Cumulative beam-on time is 4 minutes.
//	+13s ask 5/31 check: Lead apron on? -> ack
//	+14s indicate beam_on
//
// Times are relative to the first event.
func (p *Panel) Dialogue() string {
	evs := p.Events()
	var b strings.Builder
	var t0 time.Time
	for i, e := range evs {
		if i == 0 {
			t0 = e.At
		}
		fmt.Fprintf(&b, "+%s %s", e.At.Sub(t0), e.Kind)
		switch e.Kind {
		case KindSay:
			if e.Message.Level != "" {
				fmt.Fprintf(&b, " %s", e.Message.Level)
			}
			if e.Message.Action != panel.ActNone {
				fmt.Fprintf(&b, " %s", e.Message.Action)
			}
			fmt.Fprintf(&b, ": %s", e.Message.Text)
		case KindAsk:
			if e.Prompt.Of > 0 {
				fmt.Fprintf(&b, " %d/%d", e.Prompt.Step, e.Prompt.Of)
			}
			if e.Prompt.Action != panel.ActNone {
				fmt.Fprintf(&b, " %s", e.Prompt.Action)
			}
			fmt.Fprintf(&b, ": %s -> ", e.Prompt.Text)
			switch {
			case e.Err != nil:
				fmt.Fprintf(&b, "error: %v", e.Err)
			case e.Prompt.Value != nil && e.Response.Answer == panel.Ack:
				fmt.Fprintf(&b, "%s %g %s", e.Response.Answer, e.Response.Value, e.Prompt.Value.Unit)
			default:
				fmt.Fprintf(&b, "%s", e.Response.Answer)
			}
		case KindIndicate:
			fmt.Fprintf(&b, " %s", e.Indicator)
		}
		b.WriteByte('\n')
	}
	return b.String()
}
