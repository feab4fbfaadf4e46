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
	"kermalux/firmware-host/panel/speech"
	"kermalux/procedures/catalog"
	"kermalux/procedures/panel"
)

// Progress is the progress line of a prompt: "step 5 of 31 — next: lead
// disk", or "" when the prompt carries no progress.
//
// The step counted is the operator's own (silent computations are not
// counted) when the prompt carries it, with the part of a sequence and the
// line of a checklist: "part 4 of 7, Conversion factor in each field mode;
// step 12 of 41 — next: ...", "step 2 of 41, line 3 of 4".
func Progress(pr panel.Prompt) string { return progressIn(nil, pr) }

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
	return &panel.ValueRequest{Name: "temperature", Unit: "°C", Default: 21.5, HasDefault: true, Min: 10, Max: 40}
}

// TestDialogue runs a short session through the panel and compares the
// screen with a golden dialogue.
func TestDialogue(t *testing.T) {
	t.Parallel()
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
	t.Parallel()
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
	t.Parallel()
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
		got, msg := (&Panel{}).parseValue(tc.in, tc.v)
		if tc.refuse == "" {
			if msg != "" || got != tc.want {
				t.Errorf("(&Panel{}).parseValue(%q) = %g, %q; want %g accepted", tc.in, got, msg, tc.want)
			}
		} else if !strings.Contains(msg, tc.refuse) {
			t.Errorf("(&Panel{}).parseValue(%q): message %q, want one containing %q", tc.in, msg, tc.refuse)
		}
	}
}

// prompts is an output that reports each "> " the panel prints, the
// moment it waits for a line.
type prompts struct{ c chan struct{} }

func newPrompts() prompts { return prompts{c: make(chan struct{}, 16)} }

func (w prompts) Write(b []byte) (int, error) {
	if string(b) == "> " {
		w.c <- struct{}{}
	}
	return len(b), nil
}

// wait blocks until the panel shows its next "> ".
func (w prompts) wait(t *testing.T) {
	t.Helper()
	select {
	case <-w.c:
	case <-time.After(10 * time.Second):
		t.Fatal("the panel never showed its prompt")
	}
}

func TestAskHonoursContext(t *testing.T) {
	t.Parallel()
	r, w := io.Pipe()
	defer w.Close()
	out := newPrompts()
	p := New(r, out, Options{Clock: clock.NewManual(t0)})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	go func() {
		<-out.c
		cancel()
	}()
	if _, err := p.Ask(ctx, panel.Prompt{}); !errors.Is(err, context.Canceled) {
		t.Errorf("err = %v, want Canceled", err)
	}
}

// TestDiscardTypeAhead: lines typed before a prompt is on the screen
// answer nothing, however the input split them into reads, and a line
// being typed when the prompt appeared is dropped when it ends. Each
// case waits until the panel has read every byte typed ahead (not for a
// while), then until the prompt is shown, then types the real answer:
// the answer Ask returns tells whether anything typed ahead got through.
// Piped input (no discarding) is the control: there the first line typed
// ahead is the answer.
func TestDiscardTypeAhead(t *testing.T) {
	t.Parallel()
	tests := []struct {
		name    string
		ahead   []string // writes before the prompt, each read on its own
		after   string   // typed once the prompt shows
		discard bool
		want    panel.Answer
	}{
		{"one Enter", []string{"\n"}, "r\n", true, panel.Retake},
		{"three Enters in one read", []string{"\n\n\n"}, "r\n", true, panel.Retake},
		{"three Enters in three reads", []string{"\n", "\n", "\n"}, "r\n", true, panel.Retake},
		{"keys and CRLF", []string{"p\r\n", "q\r\nq\r\n"}, "r\r\n", true, panel.Retake},
		{"a line begun before the prompt", []string{"\n", "pau"}, "se\nr\n", true, panel.Retake},
		{"many lines in one read", []string{strings.Repeat("\n", 300)}, "r\n", true, panel.Retake},
		{"piped input keeps them", []string{"\n"}, "r\n", false, panel.Ack},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			t.Parallel()
			r, w := io.Pipe()
			defer w.Close()
			out := newPrompts()
			p := New(r, out, Options{Clock: clock.NewManual(t0), DiscardTypeAhead: tc.discard})
			read := make(chan int, 64)
			p.in.afterRead = func(n int) { read <- n }
			p.in.start.Do(func() { go p.in.run() })
			for _, s := range tc.ahead {
				// Write returns once the reader holds the bytes; afterRead
				// says they are queued.
				go func() { _, _ = w.Write([]byte(s)) }()
				for got := 0; got < len(s); {
					select {
					case n := <-read:
						got += n
					case <-time.After(10 * time.Second):
						t.Fatalf("the panel read %d of %d bytes typed ahead", got, len(s))
					}
				}
			}
			ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
			defer cancel()
			done := make(chan panel.Response, 1)
			errc := make(chan error, 1)
			go func() {
				resp, err := p.Ask(ctx, panel.Prompt{Message: panel.Message{Text: "Door warning light on?"}})
				done <- resp
				errc <- err
			}()
			out.wait(t)
			go func() { _, _ = w.Write([]byte(tc.after)) }()
			resp := <-done
			if err := <-errc; err != nil {
				t.Fatalf("Ask: %v (the answer typed after the prompt was lost)", err)
			}
			if resp.Answer != tc.want {
				t.Errorf("answer %q, want %q", resp.Answer, tc.want)
			}
		})
	}
}

// TestAbortConfirmationIgnoresTypeAhead: "q" typed twice in a row before
// the confirmation is shown does not abort; the second q was typed
// before anyone read the question.
func TestAbortConfirmationIgnoresTypeAhead(t *testing.T) {
	t.Parallel()
	r, w := io.Pipe()
	defer w.Close()
	out := newPrompts()
	p := New(r, out, Options{Clock: clock.NewManual(t0), DiscardTypeAhead: true})
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	done := make(chan panel.Answer, 1)
	go func() {
		resp, err := p.Ask(ctx, panel.Prompt{Message: panel.Message{Text: "Select the 17 cm field."}})
		if err != nil {
			t.Error(err)
		}
		done <- resp.Answer
	}()
	out.wait(t)
	go func() { _, _ = w.Write([]byte("q\nq\n")) }() // one read: both lines arrive together
	out.wait(t)                                      // the confirmation
	go func() { _, _ = w.Write([]byte("\n")) }()     // carry on
	out.wait(t)                                      // asked again
	go func() { _, _ = w.Write([]byte("r\n")) }()
	if got := <-done; got != panel.Retake {
		t.Errorf("answer %q, want retake (the q typed ahead must not confirm the abort)", got)
	}
}

func TestProgress(t *testing.T) {
	t.Parallel()
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

// A German panel shows its own texts in German (keys, progress, status,
// refusals, level tags aligned to the widest), numbers with a decimal
// comma, and says the messages with German unit words. The expected lines
// are written by hand (the German of procedures/catalog/lang/de/panel.yaml;
// a typed comma or point is read as the decimal separator either way).
func TestDialogueInGerman(t *testing.T) {
	t.Parallel()
	c, err := catalog.Builtin("de")
	if err != nil {
		t.Fatal(err)
	}
	input := "x\n55\n\nz\n"
	var out bytes.Buffer
	clk := clock.NewManual(t0)
	voice := &voiceLog{}
	p := New(strings.NewReader(input), &out, Options{Clock: clk, Voice: voice, Ear: speech.NewEar(c)})
	ctx := context.Background()
	if err := p.Indicate(ctx, panel.BeamOn); err != nil {
		t.Fatal(err)
	}
	if err := p.Say(ctx, panel.Message{Text: "Strahlung seit 4 min 30 s.", Level: panel.Warn}); err != nil {
		t.Fatal(err)
	}
	r, err := p.Ask(ctx, panel.Prompt{Message: panel.Message{Text: "Raumtemperatur."}, Step: 2, Of: 31, Next: "Luftdruck", Value: temperature()})
	if err != nil || r.Value != 21.5 {
		t.Fatalf("value prompt: %+v, %v", r, err)
	}
	if _, err := p.Ask(ctx, panel.Prompt{Message: panel.Message{Text: "Schürze an?"}, Task: 3, Tasks: 31, Line: 2, Lines: 4}); err == nil {
		t.Fatal("want the end of input")
	}
	got := out.String()
	for _, want := range []string{
		"09:00:00  Status   STRAHLUNG EIN\n",
		"09:00:00  WARNUNG  Strahlung seit 4 min 30 s.\n",
		"                   [Schritt 2 von 31 — als Nächstes: Luftdruck]\n",
		"09:00:00  Frage    Raumtemperatur.\n",
		"                   Temperatur in °C, 10 bis 40; Enter = 21,5; a = noch einmal, r = wiederholen, p = Pause, q = abbrechen\n",
		`"x" ist keine Zahl. Temperatur in °C eingeben, oder Enter für den Vorgabewert.`,
		"55 °C liegt außerhalb von 10 bis 40 °C; einen Wert in diesem Bereich eingeben.",
		"[Schritt 3 von 31, Zeile 2 von 4]",
		`"z" ist hier keine gültige Taste. Enter = erledigt, a = noch einmal, r = wiederholen, p = Pause, q = abbrechen.`,
	} {
		if !strings.Contains(got, want) {
			t.Errorf("screen lacks %q; shown:\n%s", want, got)
		}
	}
	if said := strings.Join(voice.said, "\n"); !strings.Contains(said, "Strahlung seit 4 Minuten 30 Sekunden.") {
		t.Errorf("speech lacks the German unit words; said:\n%s", said)
	}
}
