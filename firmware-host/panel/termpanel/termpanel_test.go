package termpanel

import (
	"bytes"
	"context"
	"errors"
	"flag"
	"io"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"kermalux/drivers/clock"
	"kermalux/procedures/panel"
)

var update = flag.Bool("update", false, "rewrite golden files")

var t0 = time.Date(2026, 3, 4, 9, 0, 0, 0, time.UTC)

func golden(t *testing.T, name string, got []byte) {
	t.Helper()
	path := filepath.Join("testdata", name)
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test -update to create it)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("output differs from %s:\n--- got\n%s\n--- want\n%s", path, got, want)
	}
}

type voiceLog struct{ said []string }

func (v *voiceLog) Say(text string, urgent bool) {
	if urgent {
		text = "! " + text
	}
	v.said = append(v.said, text)
}
func (v *voiceLog) Close() error { return nil }

func temperature() *panel.ValueRequest {
	return &panel.ValueRequest{Name: "temperature", Unit: "°C", Default: 21.5, HasDef: true, Min: 10, Max: 40}
}

// TestDialogue runs a short session through the panel and compares the
// screen with a golden dialogue.
func TestDialogue(t *testing.T) {
	input := strings.Join([]string{
		"",      // apron: done
		"x",     // not a key
		"R",     // retake (any case)
		"55",    // out of range
		"warm",  // not a number
		"",      // default 21.5
		"",      // no default: refused
		"101,3", // comma decimal
		"q", "", // abort asked, then carry on
		"q", "q", // abort confirmed
		"p", // pause
	}, "\n") + "\n"
	var out bytes.Buffer
	clk := clock.NewManual(t0)
	voice := &voiceLog{}
	p := New(strings.NewReader(input), &out, Options{Clock: clk, Echo: true, Voice: voice})
	ctx := context.Background()
	step := func(d time.Duration) { clk.Advance(d) }

	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	ask := func(pr panel.Prompt, want panel.Answer, wantValue float64) {
		t.Helper()
		r, err := p.Ask(ctx, pr)
		must(err)
		if r.Answer != want || r.Value != wantValue {
			t.Errorf("%q: got %s %g, want %s %g", pr.Text, r.Answer, r.Value, want, wantValue)
		}
		if !r.At.Equal(clk.Now()) {
			t.Errorf("%q: answered at %v, want the clock's %v", pr.Text, r.At, clk.Now())
		}
	}

	must(p.Indicate(ctx, panel.Ready))
	must(p.Indicate(ctx, panel.Ready)) // unchanged: not printed again
	must(p.Say(ctx, panel.Message{Text: "Dosimeter found, certificate valid until 2027-03-01.", Level: panel.Info}))
	step(2 * time.Second)
	ask(panel.Prompt{Message: panel.Message{Text: "Apron and thyroid collar on?", Action: panel.ActCheck},
		Step: 1, Of: 31, Next: "room temperature"}, panel.Ack, 0)
	step(3 * time.Second)
	ask(panel.Prompt{Message: panel.Message{Text: "Place the lead disk at the centre of the input."}, Step: 12, Of: 31}, panel.Retake, 0)
	step(time.Second)
	ask(panel.Prompt{Message: panel.Message{Text: "Room temperature."}, Step: 2, Of: 31, Value: temperature()}, panel.Ack, 21.5)
	ask(panel.Prompt{Message: panel.Message{Text: "Room pressure."}, Value: &panel.ValueRequest{Name: "pressure", Unit: "kPa", Min: 80, Max: 110}}, panel.Ack, 101.3)
	step(time.Minute)
	must(p.Indicate(ctx, panel.BeamOn))
	must(p.Say(ctx, panel.Message{Text: "Conversion factor 32 cm field: 152 (cd/m²)/(µGy/s).", Level: panel.Good}))
	must(p.Say(ctx, panel.Message{Text: "Cumulative beam-on time 4 min 30 s.", Level: panel.Warn}))
	must(p.Say(ctx, panel.Message{Text: "Beam on for 5 minutes: release the beam now.", Level: panel.Alarm, Action: panel.ActBeamOff}))
	must(p.Say(ctx, panel.Message{Text: "The reading is still drifting.", Level: panel.Retry}))
	must(p.Indicate(ctx, panel.Fault))
	ask(panel.Prompt{Message: panel.Message{Text: "Continue with the next field mode?"}}, panel.Abort, 0)
	ask(panel.Prompt{Message: panel.Message{Text: "Select the 17 cm field."}}, panel.Pause, 0)

	_, err := p.Ask(ctx, panel.Prompt{Message: panel.Message{Text: "One more?"}})
	if !errors.Is(err, io.ErrUnexpectedEOF) || !strings.Contains(err.Error(), "One more?") {
		t.Errorf("at end of input: err = %v, want ErrUnexpectedEOF naming the prompt", err)
	}
	golden(t, "dialogue.golden", out.Bytes())

	// Speech gets the words rewritten for the ear; the alarm is urgent.
	joined := strings.Join(voice.said, "\n")
	for _, want := range []string{"Place the lead disk at the centre of the input.", "! Beam on for 5 minutes: release the beam now.", "4 minutes 30 seconds"} {
		if !strings.Contains(joined, want) {
			t.Errorf("speech lacks %q; said:\n%s", want, joined)
		}
	}
}

func TestColour(t *testing.T) {
	for _, color := range []bool{false, true} {
		var out bytes.Buffer
		p := New(strings.NewReader(""), &out, Options{Clock: clock.NewManual(t0), Color: color})
		if err := p.Say(context.Background(), panel.Message{Text: "stop", Level: panel.Alarm}); err != nil {
			t.Fatal(err)
		}
		if has := strings.Contains(out.String(), "\x1b["); has != color {
			t.Errorf("Color %v: escape codes present = %v: %q", color, has, out.String())
		}
	}
}

func TestParseValue(t *testing.T) {
	v := temperature()
	noDef := &panel.ValueRequest{Name: "diameter", Unit: "mm", Min: 5, Max: 50}
	tests := []struct {
		in     string
		v      *panel.ValueRequest
		want   float64
		refuse string // part of the refusal, "" when accepted
	}{
		{"", v, 21.5, ""},
		{"18", v, 18, ""},
		{"18.25", v, 18.25, ""},
		{"18,25", v, 18.25, ""},
		{"10", v, 10, ""}, // the range includes its ends
		{"40", v, 40, ""},
		{"9.99", v, 0, "outside 10 to 40"},
		{"40.01", v, 0, "outside"},
		{"-5", v, 0, "outside"},
		{"NaN", v, 0, "not a number"},
		{"inf", v, 0, "not a number"},
		{"1e400", v, 0, "not a number"},
		{"twenty", v, 0, "not a number"},
		{"", noDef, 0, "no default"},
		{"25", noDef, 25, ""},
	}
	for _, tc := range tests {
		got, msg := parseValue(tc.in, tc.v)
		if tc.refuse == "" {
			if msg != "" || got != tc.want {
				t.Errorf("parseValue(%q) = %g, %q; want %g accepted", tc.in, got, msg, tc.want)
			}
		} else if !strings.Contains(msg, tc.refuse) {
			t.Errorf("parseValue(%q): message %q, want one containing %q", tc.in, msg, tc.refuse)
		}
	}
}

func TestAskHonoursContext(t *testing.T) {
	r, w := io.Pipe()
	defer w.Close()
	p := New(r, io.Discard, Options{Clock: clock.NewManual(t0)})
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Millisecond)
	defer cancel()
	if _, err := p.Ask(ctx, panel.Prompt{}); !errors.Is(err, context.DeadlineExceeded) {
		t.Errorf("err = %v, want DeadlineExceeded", err)
	}
}

func TestDiscardTypeAhead(t *testing.T) {
	r, w := io.Pipe()
	defer w.Close()
	p := New(r, io.Discard, Options{Clock: clock.NewManual(t0), DiscardTypeAhead: true})
	// Start the reader and type Enter before any prompt is shown.
	p.discardTypeAhead()
	// io.Pipe's Write returns once the reader has taken the bytes; the
	// reader then only has to hand the line over.
	if _, err := w.Write([]byte("\n")); err != nil {
		t.Fatal(err)
	}
	time.Sleep(100 * time.Millisecond)
	done := make(chan panel.Response)
	go func() {
		resp, _ := p.Ask(context.Background(), panel.Prompt{Message: panel.Message{Text: "Door warning light on?"}})
		done <- resp
	}()
	select {
	case resp := <-done:
		t.Fatalf("a stray Enter answered the prompt: %+v", resp)
	case <-time.After(50 * time.Millisecond):
	}
	w.Write([]byte("r\n"))
	if resp := <-done; resp.Answer != panel.Retake {
		t.Errorf("got %q, want retake", resp.Answer)
	}
}

func TestProgress(t *testing.T) {
	tests := []struct {
		pr   panel.Prompt
		want string
	}{
		{panel.Prompt{}, ""},
		{panel.Prompt{Step: 5, Of: 31}, "step 5 of 31"},
		{panel.Prompt{Step: 5, Of: 31, Next: "lead disk"}, "step 5 of 31 — next: lead disk"},
	}
	for _, tc := range tests {
		if got := Progress(tc.pr); got != tc.want {
			t.Errorf("Progress(%+v) = %q, want %q", tc.pr, got, tc.want)
		}
	}
}
