package speech

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"sync"
	"testing"
	"time"
)

func TestForEar(t *testing.T) {
	t.Parallel()
	// Unit names as spoken in English follow the SI Brochure (BIPM, 9th
	// edition, 2019), tables 2 and 4 (candela, gray, pascal, metre, degree
	// Celsius) and its prefixes (table 7: micro, milli, nano, kilo, hecto).
	tests := []struct{ in, want string }{
		{"Luminance 102 cd/m²", "Luminance 102 candelas per square metre"},
		{"Luminance 102 cd/m2.", "Luminance 102 candelas per square metre."},
		{"Kerma rate 0.87 µGy/s", "Kerma rate 0.87 micrograys per second"},
		{"Kerma rate 0.87 μGy/s", "Kerma rate 0.87 micrograys per second"}, // Greek mu
		{"Kerma rate 0.87 uGy/s", "Kerma rate 0.87 micrograys per second"},
		{"Dose 12 µGy", "Dose 12 micrograys"},
		{"Select the 32cm field.", "Select the 32 centimetre field."},
		{"Select the 32 cm field.", "Select the 32 centimetre field."},
		{"Set 70 kV, manual mode.", "Set 70 kilovolts, manual mode."},
		{"Room 21.5 °C, 101.3 kPa", "Room 21.5 degrees Celsius, 101.3 kilopascals"},
		{"Hang the 21 mm aluminium filter", "Hang the 21 millimetre aluminium filter"},
		{"90% of baseline", "90 percent of baseline"},
		// Plurals and full unit names (NIST SP 811 9.3, 9.7): after a
		// number other than 1, singular after 1, after "per" and before
		// the noun a unit qualifies.
		{"Set 1 kV more.", "Set 1 kilovolt more."},
		{"Hang the 21 mm Al filter.", "Hang the 21 millimetre aluminium filter."},
		{"RQA5: 70 kV, 21 mm Al.", "R Q A 5: 70 kilovolts, 21 millimetres of aluminium."},
		{"position 3 of 13: up 0.5 r.", "position 3 of 13: up 0.5 of the radius."},
		{"Input kerma rate: 0.455 µGy/s.", "Input kerma rate: 0.455 micrograys per second."},
		{"Conversion factor: 151 cd/m² per µGy/s.", "Conversion factor: 151 candelas per square metre per microgray per second."},
		{"151 cd·m⁻²/(µGy·s⁻¹)", "151 candelas per square metre per microgray per second"},
		{"0.72 µGy·s⁻¹", "0.72 micrograys per second"},
		{"Dosimeter printed 5.1 mR/s.", "Dosimeter printed 5.1 milliroentgens per second."},
		{"Photometer printed 30 fL.", "Photometer printed 30 foot-lamberts."},
		{"1 fL is 3.426 cd/m².", "1 foot-lambert is 3.426 candelas per square metre."},
		{"the 32cm field", "the 32 centimetre field"},
		{"Lead disk 32 mm.", "Lead disk 32 millimetres."},
		{"1.5 mA", "1.5 milliamperes"},
		{"90 deg", "90 degrees"},
		{"Beam on for 6 s.", "Beam on for 6 seconds."},
		{"after 4 min 30 s", "after 4 minutes 30 seconds"},
		{"step 5 of 31 — next: lead disk", "step 5 of 31, next: lead disk"},
		{"RQA5 beam, k_TP 1.012", "R Q A 5 beam, k T P 1.012"},
		{"152 ± 4", "152 plus or minus 4"},
		// Not units: letters inside words, symbols not after a number.
		{"This is the mm-wave test", "This is the mm-wave test"},
		{"press s to skip", "press s to skip"},
		{"Move the photometer", "Move the photometer"},
		{"The commissioning", "The commissioning"},
		{"line one\nline\ttwo\x07", "line one line two"},
	}
	for _, tc := range tests {
		if got := ForEar(tc.in); got != tc.want {
			t.Errorf("ForEar(%q)\n got %q\nwant %q", tc.in, got, tc.want)
		}
	}
}

// recorder is a Speaker that records what it was asked to say and holds
// each utterance until released.
type recorder struct {
	mu       sync.Mutex
	said     []string
	cut      []string // utterances stopped before they were released
	started  chan string
	release  chan struct{}
	failWith error
}

func newRecorder() *recorder {
	return &recorder{started: make(chan string, 16), release: make(chan struct{})}
}

func (r *recorder) Speak(ctx context.Context, text string) error {
	r.mu.Lock()
	r.said = append(r.said, text)
	r.mu.Unlock()
	r.started <- text
	select {
	case <-r.release:
		return r.failWith
	case <-ctx.Done():
		r.mu.Lock()
		r.cut = append(r.cut, text)
		r.mu.Unlock()
		return ctx.Err()
	}
}

func (r *recorder) snapshot() (said, cut []string) {
	r.mu.Lock()
	defer r.mu.Unlock()
	return append([]string(nil), r.said...), append([]string(nil), r.cut...)
}

func waitStart(t *testing.T, r *recorder, want string) {
	t.Helper()
	select {
	case got := <-r.started:
		if got != want {
			t.Fatalf("started %q, want %q", got, want)
		}
	case <-time.After(5 * time.Second):
		t.Fatalf("timed out waiting for %q to be spoken", want)
	}
}

func TestQueueOrderAndPreempt(t *testing.T) {
	t.Parallel()
	tests := []struct {
		name     string
		run      func(q *Queue, r *recorder)
		wantSaid []string
		wantCut  []string
	}{
		{
			name: "in order",
			run: func(q *Queue, r *recorder) {
				q.Say("one", false)
				q.Say("two", false)
				waitStart(t, r, "one")
				r.release <- struct{}{}
				waitStart(t, r, "two")
				r.release <- struct{}{}
			},
			wantSaid: []string{"one", "two"},
		},
		{
			name: "alarm drops queue and cuts current",
			run: func(q *Queue, r *recorder) {
				q.Say("set 70 kV", false)
				waitStart(t, r, "set 70 kV")
				q.Say("next field", false)
				q.Say("stop now", true)
				waitStart(t, r, "stop now")
				r.release <- struct{}{}
			},
			wantSaid: []string{"set 70 kV", "stop now"},
			wantCut:  []string{"set 70 kV"},
		},
		{
			name: "alarm is not cut by alarm",
			run: func(q *Queue, r *recorder) {
				q.Say("alarm one", true)
				waitStart(t, r, "alarm one")
				q.Say("ordinary", false)
				q.Say("alarm two", true)
				r.release <- struct{}{}
				waitStart(t, r, "alarm two")
				r.release <- struct{}{}
			},
			wantSaid: []string{"alarm one", "alarm two"},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := newRecorder()
			q := NewQueue(r, 0, nil)
			defer q.Close()
			tc.run(q, r)
			ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
			defer cancel()
			if err := q.Wait(ctx); err != nil {
				t.Fatal(err)
			}
			said, cut := r.snapshot()
			if !reflect.DeepEqual(said, tc.wantSaid) {
				t.Errorf("said %q, want %q", said, tc.wantSaid)
			}
			if !reflect.DeepEqual(cut, tc.wantCut) {
				t.Errorf("cut %q, want %q", cut, tc.wantCut)
			}
		})
	}
}

func TestQueueDropsOldestBeyondMax(t *testing.T) {
	t.Parallel()
	r := newRecorder()
	q := NewQueue(r, 2, nil)
	defer q.Close()
	q.Say("first", false)
	waitStart(t, r, "first")
	for _, s := range []string{"a", "b", "c"} {
		q.Say(s, false)
	}
	close(r.release) // let everything through
	if err := q.Wait(context.Background()); err != nil {
		t.Fatal(err)
	}
	said, _ := r.snapshot()
	if want := []string{"first", "b", "c"}; !reflect.DeepEqual(said, want) {
		t.Errorf("said %q, want %q", said, want)
	}
}

func TestQueueReportsFailure(t *testing.T) {
	t.Parallel()
	r := newRecorder()
	r.failWith = errors.New("no sound card")
	close(r.release)
	q := NewQueue(r, 0, nil)
	defer q.Close()
	q.Say("hello", false)
	<-r.started
	if err := q.Wait(context.Background()); err != nil {
		t.Fatal(err)
	}
	if err := q.Err(); err == nil {
		t.Error("Err() = nil after a failed utterance")
	}
}

func TestEspeakArgs(t *testing.T) {
	t.Parallel()
	tests := []struct {
		e    *Espeak
		text string
		wav  string
		want []string
	}{
		{&Espeak{}, "Ready.", "", []string{"Ready."}},
		{&Espeak{Voice: "en-gb", Rate: 150}, "Ready.", "/tmp/x.wav", []string{"-v", "en-gb", "-s", "150", "-w", "/tmp/x.wav", "Ready."}},
		// A leading dash must not become an option; a NUL cannot be passed.
		{&Espeak{}, "-w /etc/passwd", "", []string{" -w /etc/passwd"}},
		{&Espeak{}, "a\x00b; rm -rf /", "", []string{"ab; rm -rf /"}},
	}
	for _, tc := range tests {
		if got := tc.e.Args(tc.text, tc.wav); !reflect.DeepEqual(got, tc.want) {
			t.Errorf("Args(%q) = %q, want %q", tc.text, got, tc.want)
		}
	}
}

func TestEspeakWritesWAV(t *testing.T) {
	t.Parallel()
	if _, err := exec.LookPath("espeak-ng"); err != nil {
		t.Skip("espeak-ng not installed")
	}
	e, err := FindEspeak("", 0)
	if err != nil {
		t.Fatal(err)
	}
	e.WAVDir = t.TempDir()
	if err := e.Speak(context.Background(), ForEar("Select the 32cm field.")); err != nil {
		t.Fatal(err)
	}
	// A text that looks like an option is spoken, not obeyed: no file is
	// written where "-w" would point.
	trap := filepath.Join(e.WAVDir, "trap.wav")
	if err := e.Speak(context.Background(), "-w "+trap); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(trap); err == nil {
		t.Error("text beginning with -w was taken as an option")
	}
	for _, name := range []string{"utterance-001.wav", "utterance-002.wav"} {
		b, err := os.ReadFile(filepath.Join(e.WAVDir, name))
		if err != nil {
			t.Fatal(err)
		}
		// A WAV file starts "RIFF" .... "WAVE" (Microsoft RIFF format).
		if len(b) < 44 || string(b[0:4]) != "RIFF" || string(b[8:12]) != "WAVE" {
			t.Errorf("%s is not a WAV file: %d bytes, starts %q", name, len(b), b[:min(12, len(b))])
		}
	}
}

func TestEspeakStopsOnCancel(t *testing.T) {
	t.Parallel()
	if _, err := exec.LookPath("espeak-ng"); err != nil {
		t.Skip("espeak-ng not installed")
	}
	e, err := FindEspeak("", 0)
	if err != nil {
		t.Fatal(err)
	}
	e.WAVDir = t.TempDir()
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := e.Speak(ctx, "Never said."); !errors.Is(err, context.Canceled) {
		t.Errorf("err = %v, want context.Canceled", err)
	}
}

// nextWord reads the first word of what follows a unit, whatever follows
// it (strings.Fields' notion of space: unicode.IsSpace).
func TestNextWord(t *testing.T) {
	t.Parallel()
	for _, tc := range []struct{ in, want string }{
		{"", ""},
		{"   ", ""},
		{" field.", "field"},
		{"Field, then more words", "field"},
		{"\u00a0filter of 21 mm", "filter"},
		{"(disk) centre", "disk"},
		{"32cm", "cm"},
	} {
		if got := nextWord(tc.in); got != tc.want {
			t.Errorf("nextWord(%q) = %q, want %q", tc.in, got, tc.want)
		}
	}
}

// BenchmarkForEarLength: the cost of ForEar per byte of a short prompt and
// of one 100 times as long, in the same run; they are close when ForEar is
// linear in the text's length. Measured on 2 December 2026: 2.2 MB/s for
// both (420 and 42,000 bytes); before nextWord stopped at the first word,
// 2.5 MB/s and 0.05 MB/s (832 ms for the long text).
func BenchmarkForEarLength(b *testing.B) {
	for _, n := range []int{10, 1000} {
		text := strings.Repeat("Set 0.87 µGy/s in the 32cm field, 70 kV. ", n)
		b.Run(fmt.Sprintf("bytes=%d", len(text)), func(b *testing.B) {
			b.SetBytes(int64(len(text)))
			for i := 0; i < b.N; i++ {
				ForEar(text)
			}
		})
	}
}
