// Package panel is where the operator meets kermalux: messages that are
// shown and spoken, prompts that wait for an acknowledgement (a foot-switch
// press, a key, a scripted answer), and the status indicators.
//
// The panel knows no physics. Prompts carry, besides their words, a
// machine-readable Action and Setup so that a simulated operator (the demo)
// or a test can do what a person would do.
//
// Implementations: GPIO (foot switch, LEDs, buzzer) with spoken prompts,
// terminal (keyboard and screen), scripted (tests).
package panel

import (
	"context"
	"errors"
	"fmt"
	"time"
)

// Level grades a message.
type Level string

const (
	Info  Level = "info"
	Good  Level = "good"  // a reading was accepted (one beep)
	Retry Level = "retry" // a retake is needed (three beeps)
	Warn  Level = "warn"  // needs attention (cumulative beam-on warning, certificate due)
	Alarm Level = "alarm" // stop now (five-minute beam-on alarm, kerma rate far out of range)
)

// Action tells a simulated operator what the words ask for.
type Action string

const (
	ActNone        Action = ""
	ActSetup       Action = "setup"       // arrange the bench as in Setup, then acknowledge
	ActCheck       Action = "check"       // a safety checklist line to acknowledge
	ActValue       Action = "value"       // enter (or confirm) a value
	ActBeamOn      Action = "beam_on"     // acknowledge, then switch the beam on
	ActBeamOff     Action = "beam_off"    // release the beam now
	ActAcknowledge Action = "acknowledge" // plain press to continue
	ActMenu        Action = "menu"        // the pause menu: press to go on, the pause gesture to stop, hold to skip the field mode
)

// Message is something to show and say; it does not wait.
type Message struct {
	Text   string
	Level  Level
	Action Action            // ActBeamOff on "release the beam"
	Setup  map[string]string // machine-readable bench state wanted, if any
}

// ValueRequest asks for a number: a value read off the console (kV, mA), the
// room's temperature and pressure, a lead disk's diameter. A hands-free
// panel offers Default and takes a press as "accept".
type ValueRequest struct {
	Name       string  // "temperature", "pressure", "tube_voltage", ...
	Unit       string  // the unit the value is asked in
	Default    float64 // from the bench file or the last session
	HasDefault bool    // Default is offered
	Min, Max   float64 // plausible range; outside is refused
}

// Prompt is a Message that waits for the operator.
type Prompt struct {
	Message
	Step, Of int    // progress: step Step of Of
	StepID   string // the step's id in the procedure
	Next     string // what comes next, for the progress line
	Value    *ValueRequest
	// Progress for the ear and the eye: the operator's own step Task of
	// Tasks (the steps that ask something; silent computations are not
	// counted), the part Part of Parts of a sequence with its title, and
	// for a checklist the line Line of Lines. Zero when not known.
	Task, Tasks int
	Part, Parts int
	PartTitle   string
	Line, Lines int
	// LineWords is the checklist line's number as the engineer's language
	// says it ("Zeile 2 von 4."), filled by the engine; empty: English.
	LineWords string
}

// Spoken is what a speaking panel says for the prompt: its words, after
// the line number of a checklist line ("Line 2 of 4. Door warning light
// on."), so a list heard line by line says where it stands.
func (p Prompt) Spoken() string {
	if p.Lines > 1 && p.Line > 0 {
		if p.LineWords != "" {
			return p.LineWords + " " + p.Text
		}
		return fmt.Sprintf("Line %d of %d. %s", p.Line, p.Lines, p.Text)
	}
	return p.Text
}

// Answer is how the operator answered a prompt.
type Answer string

const (
	Ack    Answer = "ack"    // short press / Enter
	Retake Answer = "retake" // long press / r: redo the last step
	Pause  Answer = "pause"
	Abort  Answer = "abort"
	// Repeat: say the last prompt (and what was said since the previous
	// answer) again, then wait for the answer as before.
	Repeat Answer = "repeat"
)

// Response is the operator's answer to a prompt.
type Response struct {
	Answer Answer
	Value  float64 // for value prompts
	// Entered: the operator entered Value (typed it, or read it off);
	// false for a plain press that accepts the offered default.
	Entered bool
	At      time.Time
}

// Indicator is the board's status shown on LEDs (and the terminal).
type Indicator string

const (
	Ready  Indicator = "ready"
	BeamOn Indicator = "beam_on"
	Fault  Indicator = "fault"
	Busy   Indicator = "busy"
)

// Panel is the operator's side of a session.
type Panel interface {
	// Say shows and speaks m and returns without waiting for the operator.
	Say(ctx context.Context, m Message) error
	// Ask shows and speaks p and waits for the operator's answer.
	Ask(ctx context.Context, p Prompt) (Response, error)
	// Indicate sets the status indicators.
	Indicate(ctx context.Context, on Indicator) error
	Close() error
}

// ErrNoHardware means the panel's hardware is not present on this machine
// (no GPIO chip, a pin name that does not exist).
var ErrNoHardware = errors.New("panel hardware not present")
