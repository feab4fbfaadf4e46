package gpiopanel

import (
	"context"
	"time"

	"periph.io/x/conn/v3/gpio"

	"kermalux/drivers/clock"
	"kermalux/procedures/panel"
)

// footSwitch reads presses from one input pin by sampling it every poll
// period on the clock. Sampling (rather than waiting for an edge) lets every
// wait honour its context and run on a virtual clock in tests; at the
// default 5 ms it costs a few hundred wake-ups a second, and only while a
// prompt waits.
type footSwitch struct {
	pin        gpio.PinIn
	activeHigh bool
	clk        clock.Clock
	debounce   time.Duration
	long       time.Duration
	double     time.Duration
	poll       time.Duration
}

func (s *footSwitch) pressed() bool {
	return (s.pin.Read() == gpio.High) == s.activeHigh
}

// settle waits until the switch has been steadily pressed (want true) or
// released (want false) for the debounce time, and returns the clock's
// monotonic time at which that steady run began. With a deadline > 0 it
// gives up (ok false) once the deadline passes with no run under way that
// began at or before it. A run shorter than the debounce time is a bounce
// and is forgotten.
func (s *footSwitch) settle(ctx context.Context, want bool, deadline time.Duration) (start time.Duration, ok bool, err error) {
	const none = time.Duration(-1)
	run := none
	for {
		now := s.clk.Mono()
		if s.pressed() == want {
			if run == none {
				run = now
			}
			if now-run >= s.debounce {
				return run, true, nil
			}
		} else {
			run = none
		}
		if deadline > 0 && now > deadline && (run == none || run > deadline) {
			return 0, false, nil
		}
		if err := s.clk.Sleep(ctx, s.poll); err != nil {
			return 0, false, err
		}
	}
}

// press waits for one gesture and says what it meant: a short press is
// Ack, a press held for the long-press time is Retake (reported as soon as
// the time is reached, so the operator hears it while still pressing), two
// short presses close together are Pause, and three are Repeat (say it
// again). Pause and Repeat need the double-press gap set. A switch already held when
// press is called must be released first, so a stuck or resting foot
// cannot acknowledge a string of prompts; whileStuck is called once if that
// takes longer than the long-press time.
func (s *footSwitch) press(ctx context.Context, whileStuck func()) (panel.Answer, error) {
	if s.pressed() {
		warned := false
		deadline := s.clk.Mono() + 2*s.long
		for {
			_, ok, err := s.settle(ctx, false, deadline)
			if err != nil {
				return "", err
			}
			if ok {
				break
			}
			if !warned && whileStuck != nil {
				whileStuck()
				warned = true
			}
			deadline = 0
		}
	} else if _, _, err := s.settle(ctx, false, 0); err != nil {
		return "", err
	}
	down, _, err := s.settle(ctx, true, 0)
	if err != nil {
		return "", err
	}
	up, ok, err := s.settle(ctx, false, down+s.long)
	if err != nil {
		return "", err
	}
	if !ok {
		return panel.Retake, nil
	}
	if s.double <= 0 {
		return panel.Ack, nil
	}
	down2, ok, err := s.settle(ctx, true, up+s.double)
	if err != nil {
		return "", err
	} else if !ok {
		return panel.Ack, nil
	}
	// A third short press within the same gap: say the prompt again.
	up2, ok, err := s.settle(ctx, false, down2+s.long)
	if err != nil {
		return "", err
	}
	if !ok {
		return panel.Pause, nil // the second press held: a pause all the same
	}
	if _, ok, err = s.settle(ctx, true, up2+s.double); err != nil {
		return "", err
	} else if !ok {
		return panel.Pause, nil
	}
	if _, _, err := s.settle(ctx, false, 0); err != nil {
		return "", err
	}
	return panel.Repeat, nil
}
