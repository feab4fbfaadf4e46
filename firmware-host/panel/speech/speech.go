// Package speech speaks the panel's prompts: a Speaker interface, an
// implementation that runs the espeak-ng command, a Queue so that speaking
// never holds up the caller for long (an urgent message pre-empts what is
// queued), and ForEar, which rewrites written text for the ear.
package speech

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"os/exec"
	"strconv"
	"strings"
	"sync"
)

// Speaker says one utterance and returns when it has been said, or when ctx
// ends (then it stops speaking at once).
type Speaker interface {
	Speak(ctx context.Context, text string) error
}

// ErrNotInstalled means the espeak-ng command was not found.
var ErrNotInstalled = errors.New("espeak-ng is not installed")

// Espeak speaks through the espeak-ng command. The text is passed as one
// argument to the program (never through a shell).
type Espeak struct {
	Path  string // the espeak-ng binary
	Voice string // espeak-ng voice, e.g. "en-gb"; empty for its default
	Rate  int    // words per minute; 0 for espeak-ng's default
	// WAVDir, when set, writes each utterance to a WAV file there instead of
	// the sound card (for tests and for checking wording without speakers).
	WAVDir string

	mu sync.Mutex
	n  int
}

// FindEspeak looks for espeak-ng on PATH. The error wraps ErrNotInstalled.
func FindEspeak(voice string, rate int) (*Espeak, error) {
	path, err := exec.LookPath("espeak-ng")
	if err != nil {
		return nil, fmt.Errorf("%w (looked on PATH: %w); install the espeak-ng package or run without speech", ErrNotInstalled, err)
	}
	return &Espeak{Path: path, Voice: voice, Rate: rate}, nil
}

// Args returns the command-line arguments for one utterance. A text that
// begins with '-' is prefixed by a space so espeak-ng cannot take it for an
// option.
func (e *Espeak) Args(text, wav string) []string {
	var args []string
	if e.Voice != "" {
		args = append(args, "-v", e.Voice)
	}
	if e.Rate > 0 {
		args = append(args, "-s", strconv.Itoa(e.Rate))
	}
	if wav != "" {
		args = append(args, "-w", wav)
	}
	text = strings.ReplaceAll(text, "\x00", "")
	if strings.HasPrefix(text, "-") {
		text = " " + text
	}
	return append(args, text)
}

// Speak runs espeak-ng once and waits for it.
func (e *Espeak) Speak(ctx context.Context, text string) error {
	wav := ""
	if e.WAVDir != "" {
		e.mu.Lock()
		e.n++
		wav = fmt.Sprintf("%s/utterance-%03d.wav", e.WAVDir, e.n)
		e.mu.Unlock()
	}
	cmd := exec.CommandContext(ctx, e.Path, e.Args(text, wav)...)
	out, err := cmd.CombinedOutput()
	if ctx.Err() != nil {
		return ctx.Err()
	}
	if err != nil {
		return fmt.Errorf("espeak-ng (%s): %w: %s", e.Path, err, strings.TrimSpace(string(out)))
	}
	return nil
}

type utterance struct {
	text   string
	urgent bool
}

// Queue speaks utterances one after another on its own goroutine, so Say
// returns at once. An urgent utterance (an alarm) drops everything queued
// and cuts short what is being said, unless that is urgent too. When more
// than Max ordinary utterances wait, the oldest is dropped: a stale prompt
// helps no one.
type Queue struct {
	sp  Speaker
	max int
	log *slog.Logger

	mu         sync.Mutex
	pending    []utterance
	speaking   bool
	curUrgent  bool
	cancelCur  context.CancelFunc
	lastErr    error
	closed     bool
	wake, idle chan struct{}
	done       chan struct{}
	stop       context.CancelFunc
}

// NewQueue starts a queue speaking through sp. max ≤ 0 means 16.
func NewQueue(sp Speaker, max int, log *slog.Logger) *Queue {
	if max <= 0 {
		max = 16
	}
	if log == nil {
		log = slog.Default()
	}
	ctx, stop := context.WithCancel(context.Background())
	q := &Queue{sp: sp, max: max, log: log, wake: make(chan struct{}, 1), done: make(chan struct{}), stop: stop}
	go q.run(ctx)
	return q
}

// Say queues text. Text is spoken as given; rewrite it with ForEar first.
func (q *Queue) Say(text string, urgent bool) {
	text = strings.TrimSpace(text)
	if text == "" {
		return
	}
	q.mu.Lock()
	if q.closed {
		q.mu.Unlock()
		return
	}
	if urgent {
		var keep []utterance
		for _, u := range q.pending {
			if u.urgent {
				keep = append(keep, u)
			}
		}
		q.pending = append(keep, utterance{text, true})
		if q.speaking && !q.curUrgent && q.cancelCur != nil {
			q.cancelCur()
		}
	} else {
		q.pending = append(q.pending, utterance{text, false})
		for q.countOrdinary() > q.max {
			q.dropOldestOrdinary()
		}
	}
	q.mu.Unlock()
	select {
	case q.wake <- struct{}{}:
	default:
	}
}

func (q *Queue) countOrdinary() int {
	n := 0
	for _, u := range q.pending {
		if !u.urgent {
			n++
		}
	}
	return n
}

func (q *Queue) dropOldestOrdinary() {
	for i, u := range q.pending {
		if !u.urgent {
			q.pending = append(q.pending[:i], q.pending[i+1:]...)
			return
		}
	}
}

func (q *Queue) run(ctx context.Context) {
	defer close(q.done)
	for {
		q.mu.Lock()
		if len(q.pending) == 0 {
			q.speaking = false
			if q.idle != nil {
				close(q.idle)
				q.idle = nil
			}
			q.mu.Unlock()
			select {
			case <-ctx.Done():
				return
			case <-q.wake:
				continue
			}
		}
		u := q.pending[0]
		q.pending = q.pending[1:]
		uctx, cancel := context.WithCancel(ctx)
		q.speaking, q.curUrgent, q.cancelCur = true, u.urgent, cancel
		q.mu.Unlock()

		err := q.sp.Speak(uctx, u.text)
		cut := uctx.Err() != nil
		cancel()
		q.mu.Lock()
		q.cancelCur = nil
		switch {
		case err == nil:
			q.lastErr = nil
		case cut: // pre-empted or closed: not a fault
		default:
			q.lastErr = err
			q.log.Warn("speech failed", "text", u.text, "err", err)
		}
		q.mu.Unlock()
		if ctx.Err() != nil {
			return
		}
	}
}

// Wait returns when nothing is queued or being said, or when ctx ends.
func (q *Queue) Wait(ctx context.Context) error {
	q.mu.Lock()
	if !q.speaking && len(q.pending) == 0 || q.closed {
		q.mu.Unlock()
		return nil
	}
	if q.idle == nil {
		q.idle = make(chan struct{})
	}
	idle := q.idle
	q.mu.Unlock()
	select {
	case <-idle:
		return nil
	case <-q.done:
		return nil
	case <-ctx.Done():
		return ctx.Err()
	}
}

// Err is the error of the last utterance if it failed (nil after a
// success): a panel uses it to fall back to beeps when speech is broken.
func (q *Queue) Err() error {
	q.mu.Lock()
	defer q.mu.Unlock()
	return q.lastErr
}

// Close stops speaking at once and drops whatever is queued.
func (q *Queue) Close() error {
	q.mu.Lock()
	if q.closed {
		q.mu.Unlock()
		return nil
	}
	q.closed = true
	q.pending = nil
	q.mu.Unlock()
	q.stop()
	<-q.done
	return nil
}
