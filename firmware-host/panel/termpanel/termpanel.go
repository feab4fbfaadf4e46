// Package termpanel is the panel for a bench with a screen and keyboard:
// messages are printed with their level and time, prompts show progress
// and the keys that answer them, and speech can be added.
//
// Keys at a prompt: Enter = done (acknowledge), r = retake, p = pause,
// q = abort (asked twice). A value prompt shows its unit, range and default
// and takes a typed number, or Enter for the default; a number outside the
// range is refused with a message and asked again.
package termpanel

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
	"sync"
	"unicode/utf8"

	"kermalux/drivers/clock"
	"kermalux/firmware-host/panel/speech"
	"kermalux/procedures/panel"
)

// Voice is what the panel needs from speech; *speech.Queue provides it.
type Voice interface {
	Say(text string, urgent bool)
	Close() error
}

// Options configure a terminal panel.
type Options struct {
	Clock clock.Clock // for the times printed; the real clock if nil
	Color bool        // ANSI colours (only for a terminal)
	// Echo writes each line read back to the output, so a dialogue of a
	// piped session (or a test) shows what was typed.
	Echo bool
	// DiscardTypeAhead drops lines typed before a prompt appeared, so a
	// stray Enter cannot acknowledge a safety check nobody has read. Set it
	// for a person at a keyboard, not for piped input.
	DiscardTypeAhead bool
	Voice            Voice // optional speech
	// Ear is the engineer's language: the panel's own texts (keys,
	// progress, status) from its catalog, numbers with its decimal
	// separator, and what the voice says in its words. nil: English.
	Ear *speech.Ear
}

// Panel is the terminal panel. Only one Ask may wait at a time.
type Panel struct {
	out io.Writer
	opt Options
	clk clock.Clock
	in  *input

	// tagWidth is the widest level tag in the panel's language; indent
	// puts a line under the text, past "15:04:05  info   ".
	tagWidth int
	indent   string

	mu        sync.Mutex
	indicator panel.Indicator
	closed    bool
	askMu     sync.Mutex
}

var _ panel.Panel = (*Panel)(nil)

// New returns a panel reading answers from in and writing to out.
func New(in io.Reader, out io.Writer, opt Options) *Panel {
	if opt.Clock == nil {
		opt.Clock = clock.NewReal()
	}
	p := &Panel{out: out, opt: opt, clk: opt.Clock, in: newInput(in)}
	for _, l := range label {
		p.tagWidth = max(p.tagWidth, utf8.RuneCountInString(p.tr(l.tag)))
	}
	for _, t := range []string{askTag, stateTag} {
		p.tagWidth = max(p.tagWidth, utf8.RuneCountInString(p.tr(t)))
	}
	p.indent = strings.Repeat(" ", len("15:04:05  ")+p.tagWidth+2)
	return p
}

// tr is the panel's own text src in its language.
func (p *Panel) tr(src string) string { return p.opt.Ear.Text(src) }

// tf formats a catalogued format in the panel's language.
func (p *Panel) tf(format string, a ...any) string { return fmt.Sprintf(p.tr(format), a...) }

// num writes x as the panel's language writes a number.
func (p *Panel) num(x float64) string { return p.opt.Ear.Number(fmtNum(x)) }

// NewStdio returns a panel on standard input and output, with colour when
// standard output is a terminal and NO_COLOR is not set, and echo when
// standard input is not a terminal.
func NewStdio(clk clock.Clock, voice Voice, ear *speech.Ear) *Panel {
	color := isTerminal(os.Stdout) && os.Getenv("NO_COLOR") == ""
	tty := isTerminal(os.Stdin)
	return New(os.Stdin, os.Stdout, Options{Clock: clk, Color: color, Echo: !tty, DiscardTypeAhead: tty, Voice: voice, Ear: ear})
}

func isTerminal(f *os.File) bool {
	st, err := f.Stat()
	return err == nil && st.Mode()&os.ModeCharDevice != 0
}

// ErrClosed is returned by calls after Close.
var ErrClosed = errors.New("terminal panel: closed")

// Limits of what the input holds while nobody asks: lines beyond
// maxQueued make the reader wait; a line longer than maxLine is cut (it
// is no key and no number anyway).
const (
	maxQueued = 256
	maxLine   = 4096
)

// input reads the keyboard in the background. Every chunk read is split
// into lines and queued under one lock, so a discard drops all of what
// has arrived, however it was split into reads.
type input struct {
	r     io.Reader
	start sync.Once

	mu      sync.Mutex
	lines   []string      // complete lines not yet taken
	partial []byte        // a line begun but not ended
	stale   bool          // partial was begun before the last discard
	err     error         // end of input, after the lines queued
	wake    chan struct{} // cap 1: lines or err changed
	room    chan struct{} // cap 1: lines were taken

	// afterRead, when set (by tests, before the first read), is called
	// with the number of bytes of each chunk once it is queued.
	afterRead func(n int)
}

func newInput(r io.Reader) *input {
	return &input{r: r, wake: make(chan struct{}, 1), room: make(chan struct{}, 1)}
}

func signal(c chan struct{}) {
	select {
	case c <- struct{}{}:
	default:
	}
}

// run reads until end of input, queueing complete lines.
func (in *input) run() {
	buf := make([]byte, 4096)
	for {
		n, err := in.r.Read(buf)
		in.mu.Lock()
		in.split(buf[:n])
		if err != nil {
			if len(in.partial) > 0 && !in.stale {
				in.lines = append(in.lines, strings.TrimRight(string(in.partial), "\r"))
			}
			in.partial = nil
			if errors.Is(err, io.EOF) {
				err = io.ErrUnexpectedEOF
			}
			in.err = err
		}
		queued := len(in.lines)
		in.mu.Unlock()
		signal(in.wake)
		if in.afterRead != nil {
			in.afterRead(n)
		}
		if err != nil {
			return
		}
		for full := queued >= maxQueued; full; {
			<-in.room
			in.mu.Lock()
			full = len(in.lines) >= maxQueued
			in.mu.Unlock()
		}
	}
}

// split queues the complete lines of data; in.mu is held.
func (in *input) split(data []byte) {
	for len(data) > 0 {
		i := bytes.IndexByte(data, '\n')
		if i < 0 {
			in.partial = appendCut(in.partial, data)
			return
		}
		line := appendCut(in.partial, data[:i])
		in.partial = in.partial[:0]
		data = data[i+1:]
		if in.stale {
			in.stale = false
			continue
		}
		in.lines = append(in.lines, strings.TrimRight(string(line), "\r"))
	}
}

func appendCut(b, more []byte) []byte {
	if room := maxLine - len(b); len(more) > room {
		more = more[:max(room, 0)]
	}
	return append(b, more...)
}

// discard drops every line that has arrived and not been taken, and the
// line being typed.
func (in *input) discard() {
	in.start.Do(func() { go in.run() })
	in.mu.Lock()
	in.lines = in.lines[:0]
	if len(in.partial) > 0 {
		in.stale = true
	}
	in.mu.Unlock()
	signal(in.room)
}

// next waits for one line or for ctx to end.
func (in *input) next(ctx context.Context) (string, error) {
	in.start.Do(func() { go in.run() })
	for {
		in.mu.Lock()
		if len(in.lines) > 0 {
			s := in.lines[0]
			in.lines = in.lines[1:]
			in.mu.Unlock()
			signal(in.room)
			return s, nil
		}
		err := in.err
		in.mu.Unlock()
		if err != nil {
			return "", fmt.Errorf("terminal panel: reading the keyboard: input closed: %w", err)
		}
		select {
		case <-ctx.Done():
			return "", ctx.Err()
		case <-in.wake:
		}
	}
}

// discardTypeAhead drops what was typed before a prompt appeared, when
// the panel is set to.
func (p *Panel) discardTypeAhead() {
	if p.opt.DiscardTypeAhead {
		p.in.discard()
	}
}

// readLine waits for one line of input or for ctx to end.
func (p *Panel) readLine(ctx context.Context) (string, error) {
	s, err := p.in.next(ctx)
	if err == nil && p.opt.Echo {
		fmt.Fprintf(p.out, "%s\n", s)
	}
	return s, err
}

const (
	ansiReset  = "\x1b[0m"
	ansiBold   = "\x1b[1m"
	ansiRed    = "\x1b[31m"
	ansiGreen  = "\x1b[32m"
	ansiYellow = "\x1b[33m"
	ansiCyan   = "\x1b[36m"
)

// label is the printed tag and colour of each level (its English text:
// the panel prints it in its language, padded to the widest).
var label = map[panel.Level]struct{ tag, color string }{
	panel.Info:  {"info", ""},
	panel.Good:  {"good", ansiGreen},
	panel.Retry: {"again", ansiYellow},
	panel.Warn:  {"WARN", ansiBold + ansiYellow},
	panel.Alarm: {"ALARM", ansiBold + ansiRed},
}

// askTag is the tag of a prompt, stateTag of the board's status.
const (
	askTag   = "ask"
	stateTag = "state"
)

func (p *Panel) paint(color, s string) string {
	if !p.opt.Color || color == "" {
		return s
	}
	return color + s + ansiReset
}

func (p *Panel) line(tag, color, text string) {
	tag = p.tr(tag)
	if n := utf8.RuneCountInString(tag); n < p.tagWidth {
		tag += strings.Repeat(" ", p.tagWidth-n)
	}
	fmt.Fprintf(p.out, "%s  %s  %s\n", p.clk.Now().Format("15:04:05"), p.paint(color, tag), p.paint(color, text))
}

// Say prints m with its level and time, and speaks it if there is a voice.
func (p *Panel) Say(ctx context.Context, m panel.Message) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if p.isClosed() {
		return ErrClosed
	}
	l, ok := label[m.Level]
	if !ok {
		l = label[panel.Info]
	}
	p.line(l.tag, l.color, m.Text)
	if p.opt.Voice != nil {
		p.opt.Voice.Say(p.opt.Ear.ForEar(m.Text), m.Level == panel.Alarm)
	}
	return nil
}

func (p *Panel) isClosed() bool {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.closed
}

// progressIn is the progress line in the ear's language.
func progressIn(ear *speech.Ear, pr panel.Prompt) string {
	tf := func(format string, a ...any) string { return fmt.Sprintf(ear.Text(format), a...) }
	step, of := pr.Step, pr.Of
	if pr.Tasks > 0 {
		step, of = pr.Task, pr.Tasks
	}
	if of <= 0 {
		return ""
	}
	s := tf("step %d of %d", step, of)
	if pr.Lines > 1 && pr.Line > 0 {
		s = tf("%s, line %d of %d", s, pr.Line, pr.Lines)
	}
	if pr.Parts > 1 && pr.Part > 0 {
		s = tf("part %d of %d, %s; %s", pr.Part, pr.Parts, pr.PartTitle, s)
	}
	if pr.Next != "" {
		s = tf("%s — next: %s", s, pr.Next)
	}
	return s
}

const keysLine = "Enter = done, a = again, r = retake, p = pause, q = abort"

// menuKeysLine is shown at the pause menu.
const menuKeysLine = "Enter = go on, p = stop here (resume later), r = skip this field mode, q = abort"

// Ask prints pr and waits for a key (or a value) on the input.
func (p *Panel) Ask(ctx context.Context, pr panel.Prompt) (panel.Response, error) {
	if p.isClosed() {
		return panel.Response{}, ErrClosed
	}
	p.askMu.Lock()
	defer p.askMu.Unlock()

	indent := p.indent
	if s := progressIn(p.opt.Ear, pr); s != "" {
		fmt.Fprintf(p.out, "%s%s\n", indent, p.paint(ansiCyan, "["+s+"]"))
	}
	l, ok := label[pr.Level]
	if !ok || pr.Level == panel.Info || pr.Level == "" {
		l = struct{ tag, color string }{askTag, ansiBold}
	}
	p.line(l.tag, l.color, pr.Text)
	if p.opt.Voice != nil {
		p.opt.Voice.Say(p.opt.Ear.PromptText(pr, false), pr.Level == panel.Alarm)
	}
	v := pr.Value
	switch {
	case pr.Action == panel.ActMenu:
		fmt.Fprintf(p.out, "%s%s\n", indent, p.tr(menuKeysLine))
	case v == nil:
		fmt.Fprintf(p.out, "%s%s\n", indent, p.tr(keysLine))
	default:
		def := p.tr("no default: type a number")
		if v.HasDefault {
			def = p.tf("Enter = %s", p.num(v.Default))
		}
		fmt.Fprintf(p.out, "%s%s\n", indent, p.tf("%s in %s, %s to %s; %s; a = again, r = retake, p = pause, q = abort",
			p.tr(v.Name), v.Unit, p.num(v.Min), p.num(v.Max), def))
	}
	// Whatever was typed before the prompt was on the screen answers
	// nothing.
	p.discardTypeAhead()

	for {
		fmt.Fprint(p.out, "> ")
		s, err := p.readLine(ctx)
		if err != nil {
			fmt.Fprintln(p.out)
			return panel.Response{}, fmt.Errorf("terminal panel: waiting for an answer to %q: %w", pr.Text, err)
		}
		key := strings.ToLower(strings.TrimSpace(s))
		switch key {
		case "r":
			return p.answer(panel.Retake, 0), nil
		case "p":
			return p.answer(panel.Pause, 0), nil
		case "a":
			return p.answer(panel.Repeat, 0), nil
		case "q":
			fmt.Fprintf(p.out, "%s%s\n", indent, p.tr("Abort the session? Type q again to abort, Enter to carry on."))
			p.discardTypeAhead()
			fmt.Fprint(p.out, "> ")
			s, err := p.readLine(ctx)
			if err != nil {
				fmt.Fprintln(p.out)
				return panel.Response{}, fmt.Errorf("terminal panel: waiting for the abort to be confirmed: %w", err)
			}
			if strings.ToLower(strings.TrimSpace(s)) == "q" {
				return p.answer(panel.Abort, 0), nil
			}
			fmt.Fprintf(p.out, "%s%s\n", indent, p.tr("Carrying on."))
			continue
		}
		if v == nil {
			if key == "" {
				return p.answer(panel.Ack, 0), nil
			}
			fmt.Fprintf(p.out, "%s%s\n", indent, p.tf("%q is not a key here. %s.", s, p.tr(keysLine)))
			continue
		}
		x, msg := p.parseValue(key, v)
		if msg != "" {
			fmt.Fprintf(p.out, "%s%s\n", indent, msg)
			continue
		}
		r := p.answer(panel.Ack, x)
		r.Entered = key != "" // Enter alone accepts the default
		return r, nil
	}
}

// parseValue reads a typed value (a comma is taken as the decimal point);
// msg is why it was refused.
func (p *Panel) parseValue(s string, v *panel.ValueRequest) (x float64, msg string) {
	if s == "" {
		if v.HasDefault {
			return v.Default, ""
		}
		return 0, p.tf("There is no default for %s: type a number from %s to %s %s.", p.tr(v.Name), p.num(v.Min), p.num(v.Max), v.Unit)
	}
	x, err := strconv.ParseFloat(strings.ReplaceAll(s, ",", "."), 64)
	if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
		return 0, p.tf("%q is not a number. Type %s in %s, or Enter for the default.", s, p.tr(v.Name), v.Unit)
	}
	if x < v.Min || x > v.Max {
		return 0, p.tf("%s %s is outside %s to %s %s; type a value in that range.", p.num(x), v.Unit, p.num(v.Min), p.num(v.Max), v.Unit)
	}
	return x, ""
}

func fmtNum(x float64) string { return strconv.FormatFloat(x, 'g', -1, 64) }

func (p *Panel) answer(a panel.Answer, x float64) panel.Response {
	return panel.Response{Answer: a, Value: x, At: p.clk.Now()}
}

// indicatorWords is how each indicator is printed.
var indicatorWords = map[panel.Indicator]struct{ text, color string }{
	panel.Ready:  {"ready", ansiGreen},
	panel.BeamOn: {"BEAM ON", ansiBold + ansiRed},
	panel.Fault:  {"FAULT", ansiBold + ansiRed},
	panel.Busy:   {"busy", ""},
}

// Indicate prints the status when it changes.
func (p *Panel) Indicate(ctx context.Context, on panel.Indicator) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	w, ok := indicatorWords[on]
	if !ok {
		return fmt.Errorf("terminal panel: unknown indicator %q", on)
	}
	p.mu.Lock()
	if p.closed {
		p.mu.Unlock()
		return ErrClosed
	}
	changed := p.indicator != on
	p.indicator = on
	p.mu.Unlock()
	if changed {
		p.line(stateTag, w.color, p.tr(w.text))
	}
	return nil
}

// Close stops speech. The input is left open (it is usually stdin).
func (p *Panel) Close() error {
	p.mu.Lock()
	if p.closed {
		p.mu.Unlock()
		return nil
	}
	p.closed = true
	p.mu.Unlock()
	if p.opt.Voice != nil {
		return p.opt.Voice.Close()
	}
	return nil
}
