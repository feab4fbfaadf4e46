package scripted

import (
	"context"
	"errors"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/procedures/panel"
)

var t0 = time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC)

func temperature(def float64) *panel.ValueRequest {
	return &panel.ValueRequest{Name: "temperature", Unit: "°C", Default: def, HasDefault: true, Min: 10, Max: 40}
}

func TestAsk(t *testing.T) {
	t.Parallel()
	tests := []struct {
		name    string
		opts    []Option
		prompts []panel.Prompt
		want    []panel.Response // Answer and Value compared
		wantErr []error          // per prompt; nil for none
	}{
		{
			name:    "script in order",
			opts:    []Option{WithScript(panel.Response{Answer: panel.Ack}, panel.Response{Answer: panel.Retake})},
			prompts: []panel.Prompt{{Message: panel.Message{Text: "a"}}, {Message: panel.Message{Text: "b"}}},
			want:    []panel.Response{{Answer: panel.Ack}, {Answer: panel.Retake}},
			wantErr: []error{nil, nil},
		},
		{
			name:    "script then responder",
			opts:    []Option{WithScript(panel.Response{Answer: panel.Pause}), WithResponder(AckAll)},
			prompts: []panel.Prompt{{}, {Value: temperature(21.5)}},
			want:    []panel.Response{{Answer: panel.Pause}, {Answer: panel.Ack, Value: 21.5}},
			wantErr: []error{nil, nil},
		},
		{
			name:    "script ends",
			opts:    []Option{WithScript(panel.Response{Answer: panel.Ack})},
			prompts: []panel.Prompt{{}, {StepID: "dark"}},
			want:    []panel.Response{{Answer: panel.Ack}, {}},
			wantErr: []error{nil, ErrScriptEnded},
		},
		{
			name:    "value out of range refused",
			opts:    []Option{WithScript(panel.Response{Answer: panel.Ack, Value: 55}, panel.Response{Answer: panel.Ack, Value: 10})},
			prompts: []panel.Prompt{{Value: temperature(20)}, {Value: temperature(20)}},
			want:    []panel.Response{{}, {Answer: panel.Ack, Value: 10}},
			wantErr: []error{ErrOutOfRange, nil},
		},
		{
			name:    "abort needs no value",
			opts:    []Option{WithScript(panel.Response{Answer: panel.Abort, Value: 999})},
			prompts: []panel.Prompt{{Value: temperature(20)}},
			want:    []panel.Response{{Answer: panel.Abort, Value: 999}},
			wantErr: []error{nil},
		},
		{
			name:    "ack all midpoint without default",
			opts:    []Option{WithResponder(AckAll)},
			prompts: []panel.Prompt{{Value: &panel.ValueRequest{Name: "pressure", Min: 90, Max: 110}}},
			want:    []panel.Response{{Answer: panel.Ack, Value: 100}},
			wantErr: []error{nil},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			p := New(clock.NewManual(t0), tc.opts...)
			for i, pr := range tc.prompts {
				got, err := p.Ask(context.Background(), pr)
				if !errors.Is(err, tc.wantErr[i]) || (err != nil) != (tc.wantErr[i] != nil) {
					t.Fatalf("prompt %d: err = %v, want %v", i, err, tc.wantErr[i])
				}
				if got.Answer != tc.want[i].Answer || got.Value != tc.want[i].Value {
					t.Errorf("prompt %d: got %+v, want %+v", i, got, tc.want[i])
				}
				if err == nil && !got.At.Equal(t0) {
					t.Errorf("prompt %d: At = %v, want the clock's time %v", i, got.At, t0)
				}
			}
		})
	}
}

func TestRecordsWithClockTime(t *testing.T) {
	t.Parallel()
	clk := clock.NewManual(t0)
	var heard []panel.Action
	var lit []panel.Indicator
	p := New(clk, WithResponder(AckAll), WithThinkTime(2*time.Second),
		OnSay(func(m panel.Message) { heard = append(heard, m.Action) }),
		OnIndicate(func(i panel.Indicator) { lit = append(lit, i) }))
	ctx := context.Background()

	if err := p.Indicate(ctx, panel.Ready); err != nil {
		t.Fatal(err)
	}
	clk.Advance(500 * time.Millisecond)
	if err := p.Say(ctx, panel.Message{Text: "Release the beam.", Level: panel.Info, Action: panel.ActBeamOff}); err != nil {
		t.Fatal(err)
	}
	r, err := p.Ask(ctx, panel.Prompt{Message: panel.Message{Text: "Lead apron on?", Action: panel.ActCheck}, Step: 2, Of: 9})
	if err != nil {
		t.Fatal(err)
	}
	// The think time is slept on the clock: the answer comes 2 s after the ask.
	if want := t0.Add(2500 * time.Millisecond); !r.At.Equal(want) {
		t.Errorf("answer at %v, want %v", r.At, want)
	}
	want := "+0s indicate ready\n" +
		"+500ms say info beam_off: Release the beam.\n" +
		"+500ms ask 2/9 check: Lead apron on? -> ack\n"
	if got := p.Dialogue(); got != want {
		t.Errorf("dialogue:\n%s\nwant:\n%s", got, want)
	}
	if len(heard) != 1 || heard[0] != panel.ActBeamOff {
		t.Errorf("OnSay saw %v", heard)
	}
	if len(lit) != 1 || lit[0] != panel.Ready {
		t.Errorf("OnIndicate saw %v", lit)
	}
	if n := len(p.Prompts()); n != 1 {
		t.Errorf("Prompts() has %d, want 1", n)
	}
	if n := len(p.Messages()); n != 1 {
		t.Errorf("Messages() has %d, want 1", n)
	}
}

func TestContextAndClose(t *testing.T) {
	t.Parallel()
	p := New(nil, WithResponder(AckAll))
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := p.Ask(ctx, panel.Prompt{}); !errors.Is(err, context.Canceled) {
		t.Errorf("Ask on cancelled ctx: %v", err)
	}
	if err := p.Say(ctx, panel.Message{}); !errors.Is(err, context.Canceled) {
		t.Errorf("Say on cancelled ctx: %v", err)
	}
	p.Close()
	bg := context.Background()
	if _, err := p.Ask(bg, panel.Prompt{}); !errors.Is(err, ErrClosed) {
		t.Errorf("Ask after Close: %v", err)
	}
	if err := p.Indicate(bg, panel.Fault); !errors.Is(err, ErrClosed) {
		t.Errorf("Indicate after Close: %v", err)
	}
}

func TestScriptRemaining(t *testing.T) {
	t.Parallel()
	p := New(nil, WithScript(panel.Response{Answer: panel.Ack}, panel.Response{Answer: panel.Ack}))
	if _, err := p.Ask(context.Background(), panel.Prompt{}); err != nil {
		t.Fatal(err)
	}
	if got := p.Remaining(); got != 1 {
		t.Errorf("Remaining = %d, want 1", got)
	}
}
