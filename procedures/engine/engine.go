package engine

import (
	"context"
	"errors"
	"fmt"

	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// Errors Run returns (wrapped); test with errors.Is.
var (
	// ErrNoChecklist: a beam step came before the pre-exposure checklist was acknowledged.
	ErrNoChecklist = errors.New("pre-exposure safety checklist not acknowledged")
	// ErrKermaOutOfRange: the kerma rate at the chamber was far above an intensifier input's.
	ErrKermaOutOfRange = errors.New("kerma rate far outside the expected range")
	// ErrAborted: the operator aborted the session.
	ErrAborted = errors.New("session aborted by the operator")
	// ErrPaused: the operator paused; the session can be resumed.
	ErrPaused = errors.New("session paused")
	// ErrStepFailed: a measurement could not be completed in its attempts.
	ErrStepFailed = errors.New("step could not be completed")
	// ErrJournal: a record could not be written; the session was ended
	// safely (beam released, what was recorded kept).
	ErrJournal = errors.New("journal write failed")
)

// Engine runs one session.
type Engine struct {
	cfg  Config
	st   *state
	prog progress
	// sinceAsk are the messages said since the last answered prompt, for
	// an operator who asks to hear them again.
	sinceAsk []panel.Message
	// journalErr is the first failed journal write (ErrJournal); once set,
	// no further reading is taken.
	journalErr error
	// pending are readings not yet journalled (queueReading).
	pending []entry.Item
}

// New checks cfg and returns an engine ready to Run.
func New(cfg Config) (*Engine, error) {
	if cfg.Panel == nil {
		return nil, fmt.Errorf("engine: no panel")
	}
	if cfg.Journal == nil {
		return nil, fmt.Errorf("engine: no journal")
	}
	if cfg.Clock == nil {
		return nil, fmt.Errorf("engine: no clock")
	}
	if len(cfg.Procedure.Steps) == 0 {
		return nil, fmt.Errorf("engine: procedure %q has no steps", cfg.Procedure.Name)
	}
	for i, s := range cfg.Procedure.Steps {
		if s.Kind == Measure {
			if s.Measure == nil {
				return nil, fmt.Errorf("engine: step %d (%s) is a measurement without a description", i+1, s.ID)
			}
			if len(s.Measure.Meters) == 0 {
				return nil, fmt.Errorf("engine: step %d (%s) reads no meter", i+1, s.ID)
			}
			for _, role := range s.Measure.Meters {
				if cfg.Meters[role] == nil {
					return nil, fmt.Errorf("engine: step %d (%s) needs the %s, which the bench does not have", i+1, s.ID, role)
				}
			}
		}
	}
	fillSettings(&cfg.Settings)
	steps := make([]Step, len(cfg.Procedure.Steps))
	copy(steps, cfg.Procedure.Steps)
	for i := range steps {
		steps[i].FieldMode = resolveMode(cfg.FieldModes, steps[i].FieldMode)
	}
	cfg.Procedure.Steps = steps
	return &Engine{cfg: cfg, prog: newProgress(cfg.Procedure, cfg.Settings)}, nil
}

// Run walks the procedure until it is done, aborted, paused or stopped
// for safety. The Summary is valid whatever the error.
func (e *Engine) Run(ctx context.Context) (Summary, error) {
	return e.run(ctx)
}
