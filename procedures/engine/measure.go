package engine

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"strings"
	"time"

	"kermalux/calib"
	"kermalux/drivers"
	"kermalux/drivers/units"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
	"kermalux/procedures/script"
)

// retryError ends an attempt that must be taken again; reason is said.
type retryError struct {
	reason    string
	uncounted bool // does not count against the attempts (timer reset, meter back)
	// rangeOrSettle: the signal itself is the problem (over or under
	// range, never settling, a meter that does not see the beam), which
	// taking it again the same way is unlikely to change.
	rangeOrSettle bool
	// final: taking it again cannot help (the same bench would give the
	// same readings): the position is not measurable at once.
	final bool
}

func (r *retryError) Error() string { return "retake: " + r.reason }

// lostError: a meter's link is down.
type lostError struct {
	role string
	err  error
}

func (l *lostError) Error() string { return l.role + " lost: " + l.err.Error() }

// errIgnore: the reading was journalled (not used) and is otherwise ignored.
var errIgnore = errors.New("reading set aside")

// errBeamAlarm: the five-minute alarm ended the attempt.
var errBeamAlarm = errors.New("five-minute beam-on alarm")

// unconfirmedReading is a reading kept back until its attempt is accepted or discarded.
type unconfirmedReading struct {
	role string
	r    drivers.Reading
	c    Corrected
}

// attempt is one try at one position of a measure step.
type attempt struct {
	idx    int
	step   Step
	spec   *MeasureSpec
	posIdx int
	pos    Position
	label  string
	roles  []string // meters read, in turn
	inStep map[string]bool
	signal string // the meter the beam is detected with
	errs   map[string]int
	phase  phase
	tracks map[string]*track // by role, every meter the attempt reads (attempt.go)
	beamOn bool              // some meter has risen and not every risen one has fallen
	// prompted: the beam prompt was answered, so a failure must have the
	// beam released whatever the meters show.
	prompted bool
	lastSig  time.Duration // time of the latest reading counted by the beam-on timer
	onAt     time.Duration // when the exposure began (first meter's rise)
	onBase   time.Duration // the cumulative beam-on when it began
	exposed  time.Duration // the exposure's beam-on time, once off
	allowed  time.Duration // beam-on this attempt may use (what is left of the position's limit)
	settled  time.Duration // -1 until settled
	// candidate is when the signal first looked settled (-1: not yet);
	// readings from then on are held, and become the samples if a second
	// look confirms it (settled = candidate), so the confirmation costs
	// no beam time of its own.
	candidate   time.Duration
	series      map[string][]timedValue
	unconfirmed []unconfirmedReading
	flags       []string
	calib       bool
	typeB       map[string]float64 // relative type B of one reading, by role (the latest correction's)
	modes       map[string]float64
	overCeiling int // consecutive dosimeter readings above the kerma ceiling
}

func roleName(role string) string {
	if role == "" {
		return "meter"
	}
	return strings.ToUpper(role[:1]) + role[1:]
}

// measure runs a measure step: every position not yet accepted.
func (e *Engine) measure(ctx context.Context, idx int, s Step) error {
	m := s.Measure
	if m == nil {
		return fmt.Errorf("step %d (%s): measure step without a description", idx, s.ID)
	}
	if m.Beam && !e.st.checklist {
		// The engine refuses on its own, whatever the checker said.
		_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: idx, Name: evRefused, Detail: "beam step before the pre-exposure checklist", BeamOn: e.st.beamOn.Seconds()})
		_ = e.say(ctx, idx, panel.Message{Text: "Stop. The pre-exposure safety checklist has not been acknowledged. No exposure will be asked for.", Level: panel.Alarm})
		return fmt.Errorf("step %d (%s): %w", idx, s.ID, ErrNoChecklist)
	}
	positions := m.Positions
	if len(positions) == 0 {
		positions = []Position{{}}
	}
	for pi, pos := range positions {
		if e.st.havePos(s.ID, pi) {
			continue
		}
		if err := e.measurePosition(ctx, idx, s, pi, pos, len(m.Positions)); err != nil {
			return err
		}
	}
	return nil
}

func (e *Engine) measurePosition(ctx context.Context, idx int, s Step, pi int, pos Position, npos int) error {
	l := e.cfg.Settings
	m := s.Measure
	maxOn := m.MaxBeam
	if maxOn == 0 {
		maxOn = l.MaxBeam
	}
	// used is the beam-on of this position's attempts, their releases
	// included: together they may not pass the position's limit, nor what
	// its pools have left (poolLeft), which is what the procedure checker
	// proves against the beam budget.
	var used time.Duration
	failures, signalFails := 0, 0
	for {
		allowed, _ := e.beamLeft(idx, s, pi, used, maxOn)
		if m.Beam && used == 0 && allowed < minAttempt {
			return e.notMeasurable(ctx, idx, s, pi, pos, npos, "the procedure's beam-on budget has none left for it", used)
		}
		a := e.newAttempt(idx, s, pi, pos, npos)
		a.allowed = allowed
		before := e.st.beamOn
		p, err := e.runAttempt(ctx, a)
		used += e.st.beamOn - before
		if err == nil {
			p.UsedS = used.Seconds()
			p.finite()
			e.st.putPos(p)
			b, err := json.Marshal(p)
			if err != nil {
				return fmt.Errorf("step %d (%s): record measurement: %w", idx, s.ID, err)
			}
			return e.journal(ctx, entry.KindEvent, entry.Event{Step: idx, Name: evMeasured, Detail: string(b), BeamOn: e.st.beamOn.Seconds()})
		}
		var re *retryError
		if !errors.As(err, &re) {
			return err
		}
		if !re.uncounted {
			failures++
			if re.rangeOrSettle {
				signalFails++
			}
		}
		if err := e.journal(ctx, entry.KindStep, entry.Step{Index: idx, Of: len(e.cfg.Procedure.Steps), ID: s.ID, Kind: string(s.Kind), FieldMode: s.FieldMode, State: entry.StepRetake, Reason: re.reason}); err != nil {
			return err
		}
		// Bounded: the same signal problem Retries times, any problem
		// twice as often, or the position's beam-on limit (or what its
		// pools have left) used up, and the position is not measurable;
		// the sequence goes on.
		left, limit := e.beamLeft(idx, s, pi, used, maxOn)
		switch {
		case re.final:
			return e.notMeasurable(ctx, idx, s, pi, pos, npos, re.reason, used)
		case m.Beam && left < minAttempt:
			return e.notMeasurable(ctx, idx, s, pi, pos, npos, fmt.Sprintf("%s, and %s is used up", re.reason, limit), used)
		case signalFails >= l.Retries, failures >= 2*l.Retries:
			return e.notMeasurable(ctx, idx, s, pi, pos, npos, fmt.Sprintf("%s, %s times", re.reason, strings.ToLower(spellCount(failures))), used)
		}
		if failures > 0 && failures%l.Retries == 0 && !re.uncounted {
			text := fmt.Sprintf("This reading failed %d times: %s. Press the switch to try again, or long press to go back.", failures, re.reason)
			if !m.Beam {
				text = fmt.Sprintf("This reading failed %d times: %s. Press the switch to try again.", failures, re.reason)
			}
			if _, err := e.ask(ctx, panel.Prompt{Message: panel.Message{Text: text, Level: panel.Warn, Action: panel.ActAcknowledge}, Step: idx, StepID: s.ID}); err != nil {
				return err
			}
			continue
		}
		if err := e.say(ctx, idx, panel.Message{Text: "Retake: " + re.reason + ".", Level: panel.Retry}); err != nil {
			return err
		}
	}
}

// minAttempt is the least beam-on worth an exposure: less than a second
// is not enough for any meter to rise, settle and be sampled (common
// practice), so a reading with less left is not measurable without one.
const minAttempt = time.Second

// beamLeft is the beam-on the next attempt of a reading may use, its
// release not counted (the attempt says "Release" when it is used up):
// what is left of the reading's own limit after used, or less where a
// pool of the step has less left, and which of the two limits it is.
func (e *Engine) beamLeft(idx int, s Step, pi int, used, maxOn time.Duration) (time.Duration, string) {
	left, limit := maxOn-used, "the reading's beam-on limit of "+spokenDuration(maxOn)
	for _, pl := range s.Pools {
		if l := e.poolLeft(pl, idx, pi, used); l < left {
			left, limit = l, "the beam-on budget left for this reading"
		}
	}
	return left, limit
}

// poolLeft is what pool pl leaves the attempt at position pi of step idx
// (1-based, as journalled) after used: its budget less what its readings have used (for the whole
// run the beam-on timer, which survives a power cut; for an included
// procedure its readings' beam-on), less this reading's release, less
// the reserves of its readings still to come (script.FlatStep.Reserve),
// so every one of them keeps what the checker promised it.
func (e *Engine) poolLeft(pl BeamPool, idx, pi int, used time.Duration) time.Duration {
	var spent, reserve time.Duration
	if pl.ID == "" {
		spent = e.st.beamOn
	} else {
		spent = used
	}
	cur := idx - 1
	for j, st := range e.cfg.Procedure.Steps {
		if st.Measure == nil || !st.Measure.Beam || !slices.ContainsFunc(st.Pools, func(p BeamPool) bool { return p.ID == pl.ID }) {
			continue
		}
		n := max(len(st.Measure.Positions), 1)
		for k := range n {
			switch {
			case j == cur && k == pi:
			case e.st.havePos(st.ID, k):
				if pl.ID != "" {
					spent += time.Duration(e.st.meas[st.ID][k].UsedS * float64(time.Second))
				}
			case j > cur || (j == cur && k > pi):
				reserve += st.Measure.reserve(e.cfg.Settings) + script.ReleaseTime
			}
		}
	}
	return pl.Budget - spent - reserve - script.ReleaseTime
}

// reserve is what one position of the step keeps in its pools, its
// release not counted: MinBeam, else its whole limit.
func (m *MeasureSpec) reserve(l Settings) time.Duration {
	switch {
	case m.MinBeam > 0:
		return m.MinBeam
	case m.MaxBeam > 0:
		return m.MaxBeam
	}
	return l.MaxBeam
}

// notMeasurable records a position that could not be measured, with its
// reason, and says so; the figures that use it are not measurable. used
// is the beam-on its attempts took.
func (e *Engine) notMeasurable(ctx context.Context, idx int, s Step, pi int, pos Position, npos int, reason string, used time.Duration) error {
	p := positionStats{Step: s.ID, Index: pi, Mode: s.FieldMode, Unmeasurable: reason, Dark: !s.Measure.Beam, UsedS: used.Seconds()}
	what := "This reading"
	if npos > 0 {
		p.Label, p.Radius, p.Angle = pos.Label, pos.Radius, pos.Angle
		what = "Position " + pos.Label
	}
	e.st.putPos(p)
	b, err := json.Marshal(p)
	if err != nil {
		return fmt.Errorf("step %d (%s): record measurement: %w", idx, s.ID, err)
	}
	if err := e.journal(ctx, entry.KindEvent, entry.Event{Step: idx, Name: evMeasured, Detail: string(b), BeamOn: e.st.beamOn.Seconds()}); err != nil {
		return err
	}
	return e.say(ctx, idx, panel.Message{Text: what + " is not measurable: " + reason + ". The sequence goes on.", Level: panel.Warn})
}

func (e *Engine) newAttempt(idx int, s Step, pi int, pos Position, npos int) *attempt {
	m := s.Measure
	a := &attempt{idx: idx, step: s, spec: m, posIdx: pi, pos: pos, inStep: map[string]bool{},
		errs: map[string]int{}, typeB: map[string]float64{}, settled: -1, candidate: -1, series: map[string][]timedValue{}, calib: true, modes: e.cfg.FieldModes}
	for _, r := range m.Meters {
		a.inStep[r] = true
	}
	a.roles = slices.Clone(m.Meters)
	// The dosimeter is always read when present: it sees the beam, times
	// it and guards against a kerma rate far out of range.
	if e.cfg.Meters[Dosimeter] != nil && !a.inStep[Dosimeter] {
		a.roles = append([]string{Dosimeter}, a.roles...)
	}
	slices.SortStableFunc(a.roles, func(x, y string) int {
		if x == Dosimeter {
			return -1
		}
		if y == Dosimeter {
			return 1
		}
		return 0
	})
	// The beam is detected with a meter the step reads (the dosimeter
	// first); a dosimeter outside the step (perhaps taken out of the
	// beam) only guards against a kerma rate far out of range.
	a.signal = m.Meters[0]
	if a.inStep[Dosimeter] {
		a.signal = Dosimeter
	}
	if npos > 0 {
		a.label = pos.Label
	}
	return a
}

// runAttempt takes one reading position: dark level, beam prompt, then
// the beam attempt's phases (attempt.go): waiting, rising, settling,
// sampling to the type A target, releasing, off.
func (e *Engine) runAttempt(ctx context.Context, a *attempt) (positionStats, error) {
	if !a.spec.Beam {
		return e.darkAttempt(ctx, a)
	}
	l := e.cfg.Settings
	e.freshen(a)
	// Each meter's dark level and noise, for its beam threshold, before
	// the prompt.
	dark, steps, err := e.readFor(ctx, a, l.DarkTime, 5)
	if err != nil {
		return positionStats{}, e.attemptFailed(ctx, a, err)
	}
	a.tracks = map[string]*track{}
	for _, role := range a.roles {
		a.tracks[role] = e.newTrack(role, dark[role], steps[role])
	}
	if t := a.tracks[Dosimeter]; t != nil && t.dark > 5*l.BeamFloor {
		// The beam is already on (a pedal held through a restart): have it
		// released before taking the dark level again.
		t.thresh = 5 * l.BeamFloor
		t.risen, t.overThreshold = true, true
		a.beamOn, a.prompted = true, true
		a.lastSig = e.cfg.Clock.Mono()
		a.onAt, a.onBase = a.lastSig, e.st.beamOn
		if err := e.release(ctx, a, panel.Warn, "The beam is on. Release the beam."); err != nil {
			return positionStats{}, err
		}
		return positionStats{}, &retryError{reason: "the beam was on before the prompt", uncounted: true}
	}

	p := panel.Prompt{Step: a.idx, StepID: a.step.ID}
	p.Text = a.step.Text
	if a.label != "" {
		p.Text = fmt.Sprintf("Move the photometer to position %d of %d: %s. %s", a.posIdx+1, len(a.spec.Positions), a.label, a.step.Text)
		if a.posIdx > 0 {
			// The step's own words were said at the first position.
			p.Text = fmt.Sprintf("Move the photometer to position %d of %d: %s. Press the switch, then step on the pedal.", a.posIdx+1, len(a.spec.Positions), a.label)
		}
	}
	if !strings.Contains(strings.ToLower(p.Text), "pedal") && !strings.Contains(strings.ToLower(p.Text), "beam") {
		p.Text = strings.TrimSpace(p.Text + " Press the switch, then switch the beam on.")
	}
	p.Level = panel.Info
	p.Action = panel.ActBeamOn
	p.Setup = a.setup()
	if _, err := e.ask(ctx, p); err != nil {
		return positionStats{}, err
	}
	a.prompted = true
	e.freshen(a) // lines queued while the operator was at the prompt are old
	e.enterPhase(ctx, a, phWaiting, "")
	deadline := e.cfg.Clock.Mono() + l.BeamWait
	for !a.beamOn {
		if e.cfg.Clock.Mono() > deadline {
			return positionStats{}, e.attemptFailed(ctx, a, &retryError{reason: "no beam was seen"})
		}
		if err := e.cycle(ctx, a); err != nil {
			return positionStats{}, e.attemptFailed(ctx, a, err)
		}
	}
	_ = e.cfg.Panel.Indicate(ctx, panel.BeamOn)
	// Rise, settle, then sample until precise enough, within what is left
	// of the position's beam-on limit.
	var stat positionStats
	var short string
	lastCheck := -24 * time.Hour // judged at the first reading
	alarmed := false
	for done := false; !done; {
		if err := e.cycle(ctx, a); err != nil {
			if errors.Is(err, errBeamAlarm) && a.phase == phSampling {
				// The five-minute alarm while sampling: what was taken is
				// kept when it is enough for a result (flagged), rather
				// than thrown away and taken again with more beam.
				if st, _ := e.precise(a); st.enough(e.cfg.Settings.MinPairs) {
					stat, alarmed = st, true
					short = "stopped by the five-minute beam-on alarm before the precision target"
					break
				}
			}
			return positionStats{}, e.attemptFailed(ctx, a, err)
		}
		onFor := a.lastSig - a.onAt
		switch a.phase {
		case phRising:
			if a.risenAll() {
				e.enterPhase(ctx, a, phSettling, "")
			} else if onFor >= riseMax {
				names, under := a.notRisen()
				reason := "the " + strings.Join(names, " and the ") + " does not see the beam"
				if under {
					reason = "the " + strings.Join(names, " and the ") + " reads under range with the beam on"
				}
				return positionStats{}, e.attemptFailed(ctx, a, &retryError{reason: reason, rangeOrSettle: true})
			}
		case phSettling:
			if a.lastSig-lastCheck >= settleEvery {
				lastCheck = a.lastSig
				// Settled once, then confirmed by a second look after a
				// quarter of the time it took (at least half a second), so a signal
				// that was flat at a turning point (the lagging peak of an
				// overshoot) shows its decay. The readings in between are
				// held: confirmed, they are the first samples; not
				// confirmed, they are journalled as not used.
				switch {
				case a.candidate < 0:
					if e.isSettled(a) {
						a.candidate = a.lastSig
					}
				case a.lastSig-a.candidate >= max(500*time.Millisecond, (a.candidate-a.onAt)/4):
					if e.isSettled(a) {
						a.settled = a.candidate
						e.enterPhase(ctx, a, phSampling, "")
					} else {
						a.candidate = -1
						if err := e.flush(ctx, a, false); err != nil {
							return positionStats{}, err
						}
					}
				}
				if a.settled < 0 && onFor >= l.SettleMax {
					return positionStats{}, e.attemptFailed(ctx, a, &retryError{reason: "the reading is still drifting", rangeOrSettle: true})
				}
			}
		case phSampling:
			stat, done = e.precise(a)
			if a.spec.Duration > 0 {
				done = a.lastSig-a.settled >= a.spec.Duration
			}
			if !done && a.lastSig-lastCheck >= driftEvery {
				lastCheck = a.lastSig
				if who, ok := e.drifting(a); ok {
					n := len(a.unconfirmed)
					if err := e.flush(ctx, a, false); err != nil {
						return positionStats{}, err
					}
					_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evDiscarded, Detail: fmt.Sprintf("%d readings not used: %s drifting after settling", n, who), BeamOn: e.st.beamOn.Seconds()})
					a.settled, a.candidate = -1, -1
					e.enterPhase(ctx, a, phSettling, who+" drifting")
				}
			}
		}
		if !done && onFor >= a.allowed {
			if a.phase == phSampling && stat.enough(e.cfg.Settings.MinPairs) {
				short = "precision target not reached in the maximum beam-on time"
				break
			}
			reason := "the reading did not settle within its beam-on limit"
			if a.phase == phRising {
				names, _ := a.notRisen()
				reason = "the " + strings.Join(names, " and the ") + " does not see the beam"
			}
			return positionStats{}, e.attemptFailed(ctx, a, &retryError{reason: reason, rangeOrSettle: true})
		}
	}
	if !alarmed {
		if err := e.lockedToPulses(a); err != nil {
			return positionStats{}, e.attemptFailed(ctx, a, err)
		}
	}
	if short != "" {
		stat.Flags = append(stat.Flags, short)
	}
	e.finishStat(&stat, a)
	a.settleResiduals(&stat)
	// Accept: release the beam at once, then keep the held readings as
	// used (journalling them first would add the journal's write time to
	// every exposure, and more of it on a slow board).
	if err := e.release(ctx, a, panel.Good, "Release the beam."); err != nil {
		_ = e.flush(ctx, a, true)
		return positionStats{}, err
	}
	stat.BeamOnS = a.exposed.Seconds()
	if err := e.flush(ctx, a, true); err != nil {
		return positionStats{}, err
	}
	if alarmed {
		if _, err := e.ask(ctx, panel.Prompt{Message: panel.Message{Text: "Press the switch to reset the beam-on alarm and go on.", Level: panel.Alarm, Action: panel.ActAcknowledge}, Step: a.idx, StepID: a.step.ID}); err != nil {
			return positionStats{}, err
		}
	}
	return stat, nil
}

// lockedToPulses refuses an attempt whose sampled readings, of any meter
// of the step, repeat a pattern every few readings (phaseLocked): a
// pulsed beam read at a fixed phase of its pulses, whose mean no number of
// readings would bring to the mean rate. Another exposure would read the
// same way, so the position is not measurable, with what to change.
func (e *Engine) lockedToPulses(a *attempt) error {
	for _, role := range a.spec.Meters {
		xs := values(after(a.series[role], a.settled))
		if r, ok := phaseLocked(xs, e.target(a)/4); ok {
			return &retryError{final: true, reason: fmt.Sprintf("the %s's readings repeat every %d readings, their groups %.0f %% apart: a pulsed beam read at a fixed phase of its pulses, whose mean is not the mean rate; measure in continuous fluoroscopy, or set the meter to integrate over whole pulses", role, r.Every, 100*r.Dev)}
		}
	}
	return nil
}

// riseMax is how long after the first meter saw the beam every meter of
// the step must see it; settleEvery and driftEvery are how often (in
// signal time) settling and drift are judged, each a fit over the series.
const (
	riseMax     = 5 * time.Second
	settleEvery = 200 * time.Millisecond
	driftEvery  = 500 * time.Millisecond
)

// resolveMode turns "largest" and "smallest" into a field mode's name.
func (a *attempt) resolveMode(v string) string {
	return resolveMode(a.modes, v)
}

func resolveMode(modes map[string]float64, v string) string {
	if v != "largest" && v != "smallest" || len(modes) == 0 {
		return v
	}
	best, bd := "", 0.0
	for name, d := range modes {
		if best == "" || (v == "largest" && d > bd) || (v == "smallest" && d < bd) || (d == bd && name < best) {
			best, bd = name, d
		}
	}
	return best
}

// setup is the bench state the attempt wants, for the simulated operator.
func (a *attempt) setup() map[string]string {
	m := map[string]string{}
	for k, v := range a.step.Setup {
		m[k] = v
	}
	if v, ok := m["field_mode"]; ok {
		m["field_mode"] = a.resolveMode(v)
	}
	if a.label != "" {
		m["photometer_radius"] = fmt.Sprintf("%g r", a.pos.Radius)
		m["photometer_angle"] = fmt.Sprintf("%g deg", a.pos.Angle)
		m["position"] = a.label
	}
	if a.step.FieldMode != "" {
		if _, ok := m["field_mode"]; !ok {
			m["field_mode"] = a.step.FieldMode
		}
	}
	if len(m) == 0 {
		return nil
	}
	return m
}

// freshen drops what streaming meters queued while the engine was busy
// elsewhere (at a prompt, in a step that read only the other meter), so the
// readings that follow are stamped when the meter sent them, not when the
// engine got round to them (drivers.Freshener).
func (e *Engine) freshen(a *attempt) {
	for _, role := range a.spec.Meters {
		if f, ok := e.cfg.Meters[role].(drivers.Freshener); ok {
			f.Discard()
		}
	}
}

// after returns the readings of xs at or after t.
func after(xs []timedValue, t time.Duration) []timedValue {
	i := 0
	for i < len(xs) && xs[i].t < t {
		i++
	}
	return xs[i:]
}

// precise computes the statistics of the samples taken since settling and
// applies the sequential stopping rule: done when the relative expanded
// uncertainty of repeatability (the type A of the mean, with the Student t
// coverage factor at its degrees of freedom, calib.ExpandedRel) has
// reached the target. The target is for the type A part only: the
// meters' calibration cannot be reduced by sampling longer, and enters U
// in the figure's budget (ENGINE.md, "Stopping rule").
func (e *Engine) precise(a *attempt) (positionStats, bool) {
	l := e.cfg.Settings
	target := e.target(a)
	p := positionStats{Step: a.step.ID, Index: a.posIdx, Label: a.label, Radius: a.pos.Radius, Angle: a.pos.Angle, Mode: a.step.FieldMode, Calib: a.calib, Flags: slices.Clone(a.flags)}
	// Each meter of the step, by role: its mean and the type A of the
	// mean (JCGM 100:2008 4.2.3, autocorrelated readings allowed for).
	p.Meters = map[string]meterStat{}
	var rels, dofs []float64
	for _, role := range a.spec.Meters {
		xs := after(a.series[role], a.settled)
		if len(xs) == 0 {
			continue
		}
		v := values(xs)
		mean, _ := meanSD(v)
		rel, n := relTypeA(v)
		p.Meters[role] = meterStat{Mean: mean, U: rel * math.Abs(mean), B: a.typeB[role], N: len(v), Span: covered(xs).Seconds()}
		if len(v) < 2 {
			return p, false
		}
		rels, dofs = append(rels, rel), append(dofs, n-1)
	}
	if len(rels) == 0 {
		return p, false
	}
	if p.ratio() {
		g := pairs(after(a.series[Photometer], a.settled), after(a.series[Dosimeter], a.settled))
		if len(g) < 2 {
			return p, false
		}
		p.HasG = true
		p.G, _ = meanSD(g)
		ug, _ := relTypeA(g)
		p.GU = ug * math.Abs(p.G)
		p.NG = len(g)
	}
	// The figure is a product or ratio of the meters' means (for two,
	// calib.ConversionFactor), so its repeatability is that of each:
	// relative variances add (JCGM 100:2008 5.1.6), degrees of freedom by
	// Welch–Satterthwaite (G.2b); for one meter, its own.
	var ss float64
	for _, r := range rels {
		ss += r * r
	}
	uA := math.Sqrt(ss)
	neff := 1 + calib.WelchSatterthwaite(rels, dofs)
	if !p.enough(l.MinPairs) || math.IsInf(uA, 1) {
		return p, false
	}
	U, _, _ := expandedRel(uA, neff)
	return p, U <= target
}

// count is the number of readings the position's result rests on, for
// the minimum-count rule: with both meters, the fewest of either meter's
// readings and their time-aligned pairs (none before there are pairs), so
// that a ratio is never taken from hundreds of photometer readings beside
// one or two of the dosimeter (each is interpolated at the other's times,
// which makes many pairs of few dosimeter readings); else the one meter's.
func (p positionStats) count() int {
	n := -1
	for _, m := range p.Meters {
		if n < 0 || m.N < n {
			n = m.N
		}
	}
	if p.ratio() {
		n = min(n, p.NG)
	}
	return max(n, 0)
}

// ratio reports whether the position's figure is the ratio of the
// photometer's mean to the dosimeter's (both were read in the step).
func (p positionStats) ratio() bool {
	_, l := p.Meters[Photometer]
	_, k := p.Meters[Dosimeter]
	return l && k
}

// darkAttempt takes a beam-off reading for a fixed time (dark level,
// stability).
func (e *Engine) darkAttempt(ctx context.Context, a *attempt) (positionStats, error) {
	l := e.cfg.Settings
	d := a.spec.Duration
	if d == 0 {
		d = l.DarkTime
	}
	if _, err := e.ask(ctx, panel.Prompt{Message: panel.Message{Text: darkPrompt(a.step.Text, d), Level: panel.Info, Action: panel.ActSetup, Setup: a.setup()}, Step: a.idx, StepID: a.step.ID}); err != nil {
		return positionStats{}, err
	}
	e.freshen(a)
	// First let the meters come down from any earlier exposure (the
	// photometer's response is slower than the dosimeter's): no trend
	// over the settling window, as for a beam reading.
	begin := e.cfg.Clock.Mono()
	for {
		if err := e.cycle(ctx, a); err != nil {
			return positionStats{}, e.attemptFailed(ctx, a, err)
		}
		ok := true
		for _, role := range a.spec.Meters {
			ok = ok && steady(a.series[role], l.SettleWindow, l.SettleSlope, 5)
		}
		if ok || e.cfg.Clock.Mono()-begin > l.SettleMax {
			break
		}
	}
	if err := e.flush(ctx, a, false); err != nil {
		return positionStats{}, err
	}
	a.series = map[string][]timedValue{}
	a.settled = 0
	start := e.cfg.Clock.Mono()
	a.onAt = start
	marks := countdownMarks(d)
	if len(marks) > 0 {
		if err := e.say(ctx, a.idx, panel.Message{Text: "Dark reading started: " + spokenDuration(d) + ". Keep the beam off.", Level: panel.Info}); err != nil {
			return positionStats{}, err
		}
	}
	for e.cfg.Clock.Mono()-start < d {
		if err := e.cycle(ctx, a); err != nil {
			return positionStats{}, e.attemptFailed(ctx, a, err)
		}
		if left := d - (e.cfg.Clock.Mono() - start); len(marks) > 0 && left <= marks[0] && left > 0 {
			for len(marks) > 0 && left <= marks[0] {
				marks = marks[1:]
			}
			if err := e.say(ctx, a.idx, panel.Message{Text: spokenDuration(left.Round(5*time.Second)) + " left.", Level: panel.Info}); err != nil {
				return positionStats{}, err
			}
		}
	}
	p, _ := e.precise(a)
	p.Dark = true
	// Drift over a fixed-duration reading: relative change of the trend
	// line across the reading, for each meter.
	for _, role := range a.spec.Meters {
		if rel, _, ok := trend(a.series[role]); ok {
			dr := math.Abs(rel * d.Seconds())
			if p.Drifts == nil {
				p.Drifts = map[string]float64{}
			}
			p.Drifts[role] = dr
			p.Drift = math.Max(p.Drift, dr)
		}
	}
	e.finishStat(&p, a)
	if err := e.flush(ctx, a, true); err != nil {
		return positionStats{}, err
	}
	if d >= countdownFrom {
		// One beep: the fixed-time reading is over.
		if err := e.say(ctx, a.idx, panel.Message{Text: "Dark reading done.", Level: panel.Good}); err != nil {
			return positionStats{}, err
		}
	}
	return p, nil
}

// spanAdjective says a duration before a noun: "one-minute", "30-second".
func spanAdjective(d time.Duration) string {
	if d%time.Minute == 0 && d >= time.Minute {
		return strings.ToLower(spellCount(int(d/time.Minute))) + "-minute"
	}
	return fmt.Sprintf("%d-second", int(d.Round(time.Second)/time.Second))
}

// countdownFrom is the shortest fixed-duration reading that is counted
// down aloud; shorter ones pass before a countdown would help.
const countdownFrom = 20 * time.Second

// countdownMarks are the times left at which a fixed-duration reading of d
// says how long is left: every 15 s under a minute (30 and 15 s of a
// one-minute reading too), every minute above.
func countdownMarks(d time.Duration) []time.Duration {
	if d < countdownFrom {
		return nil
	}
	var out []time.Duration
	for m := (d - time.Second) / time.Minute * time.Minute; m >= time.Minute; m -= time.Minute {
		out = append(out, m)
	}
	for _, s := range []time.Duration{30 * time.Second, 15 * time.Second} {
		if s < d-5*time.Second {
			out = append(out, s)
		}
	}
	return out
}

// darkPrompt is what a beam-off reading asks: the step's words, and,
// unless they say it, that a press starts the reading and how long it
// takes. A dark reading waits for the press; it never says "wait".
func darkPrompt(text string, d time.Duration) string {
	text = strings.TrimSpace(text)
	if strings.Contains(strings.ToLower(text), "press") {
		return text
	}
	start := "Press to start the dark reading."
	if d >= countdownFrom {
		start = "Press to start the " + spanAdjective(d) + " dark reading."
	}
	if text == "" {
		return "Keep the beam off. " + start
	}
	return text + " " + start
}

// readFor reads every meter of the attempt in turn for d (at least minN
// readings of each), journalling the readings as not used, and returns
// the corrected values per role (an under-range reading as 0: the meter
// shows nothing) and each meter's display step in the corrected scale
// (the certificate's resolution, else the finest printed step; 0 when
// neither is known).
func (e *Engine) readFor(ctx context.Context, a *attempt, d time.Duration, minN int) (map[string][]float64, map[string]float64, error) {
	out := map[string][]float64{}
	steps := map[string]float64{}
	start := e.cfg.Clock.Mono()
	enough := func() bool {
		for _, role := range a.roles {
			if len(out[role]) < minN {
				return false
			}
		}
		return true
	}
	for e.cfg.Clock.Mono()-start < d || !enough() {
		for _, role := range a.roles {
			for n := e.takes(role); n > 0; n-- {
				r, c, err := e.readOne(ctx, a, role)
				if err != nil {
					return nil, nil, err
				}
				if err := e.guard(ctx, a, role, r, c); errors.Is(err, errIgnore) {
					continue
				} else if err != nil {
					return nil, nil, err
				}
				v := c.Value
				if r.Status == drivers.StatusUnderRange {
					v = 0
				}
				step := c.Resolution * c.Scale
				if step <= 0 {
					step = printedStep(r)
				}
				if step > 0 && (steps[role] == 0 || step < steps[role]) {
					steps[role] = step
				}
				out[role] = append(out[role], v)
				if err := e.record(ctx, a, role, r, c, false); err != nil {
					return nil, nil, err
				}
			}
		}
	}
	return out, steps, nil
}

// cycle reads each meter of the attempt once (a streaming meter: every
// reading that has arrived, see takes) and updates the beam state.
func (e *Engine) cycle(ctx context.Context, a *attempt) error {
	if e.journalErr != nil {
		return e.journalErr
	}
	for _, role := range a.roles {
		for n := e.takes(role); n > 0; n-- {
			r, c, err := e.readOne(ctx, a, role)
			if err != nil {
				return err
			}
			if err := e.guard(ctx, a, role, r, c); errors.Is(err, errIgnore) {
				continue
			} else if err != nil {
				return err
			}
			if err := e.observe(ctx, a, role, r, c); err != nil {
				return err
			}
		}
	}
	return nil
}

// takes is how many readings to take from role's meter in one turn: one,
// plus those a streaming meter has already received (drivers.Queued), so
// that its readings, stamped on arrival, are neither left to pile up nor
// paired with another meter's readings from later (at most 64 a turn).
func (e *Engine) takes(role string) int {
	if q, ok := e.cfg.Meters[role].(drivers.Queued); ok {
		return 1 + min(q.Pending(), 63)
	}
	return 1
}

// readOne reads one meter and corrects the reading. Single timeouts and
// garbled lines are journalled and skipped; three in a row end the
// attempt. A lost link comes back as a lostError.
func (e *Engine) readOne(ctx context.Context, a *attempt, role string) (drivers.Reading, Corrected, error) {
	for {
		r, err := e.next(ctx, role)
		if err != nil {
			if ctx.Err() != nil {
				return r, Corrected{}, ctx.Err()
			}
			if ch := isMeterChanged(role, err); ch != nil {
				return r, Corrected{}, ch
			}
			if errors.Is(err, drivers.ErrLinkDown) {
				return r, Corrected{}, &lostError{role: role, err: err}
			}
			a.errs[role]++
			_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evReadError, Detail: fmt.Sprintf("%s: %v", role, err), BeamOn: e.st.beamOn.Seconds()})
			if a.errs[role] >= 3 {
				what := "is not answering"
				if errors.Is(err, drivers.ErrGarbled) {
					what = "sends readings that are not understood"
				} else if errors.Is(err, drivers.ErrUnit) {
					what = "reports an unexpected unit"
				}
				return r, Corrected{}, &retryError{reason: "the " + role + " " + what}
			}
			if errors.Is(err, drivers.ErrTimeout) {
				continue
			}
			// Do not spin on a meter that fails at once.
			if err := e.cfg.Clock.Sleep(ctx, 50*time.Millisecond); err != nil {
				return r, Corrected{}, err
			}
			continue
		}
		a.errs[role] = 0
		c := e.correct(a, role, r)
		if r.AfterReconnect {
			_ = e.record(ctx, a, role, r, c, false)
			return r, c, &retryError{reason: "the " + role + " reconnected", uncounted: true}
		}
		return r, c, nil
	}
}

// correct applies the meter's calibration, with the session's conditions.
func (e *Engine) correct(a *attempt, role string, r drivers.Reading) Corrected {
	cond := Conditions{Values: e.st.values, Unc: e.st.valueUnc, BeamQuality: a.spec.BeamQuality, FieldMode: a.step.FieldMode}
	if d, ok := e.st.darkFor(role, a.label); ok && a.spec.Beam {
		cond.Dark = &d
	}
	var c Corrected
	if cr := e.cfg.Correctors[role]; cr != nil {
		c = cr.Correct(r, cond)
	} else {
		c = Corrected{Value: r.Value, Flags: []string{"no calibration certificate"}}
		if cond.Dark != nil && role == Photometer {
			c.Value -= cond.Dark.Mean
			c.Corrections = append(c.Corrections, entry.Correction{Name: "dark", Factor: 1, Offset: -cond.Dark.Mean})
		}
	}
	if role == Dosimeter && a.spec.BeamQuality == "" {
		// The coefficient is taken at the tube voltage entered: say where
		// that value came from when nobody read it off for this reading.
		if note := e.kvNote(a); note != "" {
			c.Flags = append(c.Flags, note)
		}
	}
	if a.inStep[role] {
		if !c.Calibrated {
			a.calib = false
		}
		for _, f := range c.Flags {
			if !slices.Contains(a.flags, f) {
				a.flags = append(a.flags, f)
			}
		}
		a.typeB[role] = c.RelStdUncB
	}
	return c
}

// kvNote is the note a dosimeter reading carries when its coefficient is
// interpolated at a tube voltage nobody read off for it: a bench default
// accepted with a press, a default never asked for, or a value entered for
// another field mode or earlier part. Empty when the tube voltage was read
// off in this reading's field mode, or is not used.
func (e *Engine) kvNote(a *attempt) string {
	if _, ok := e.st.values["tube_voltage"]; !ok {
		return ""
	}
	o, ok := e.st.origins["tube_voltage"]
	switch {
	case !ok:
		return fmt.Sprintf("dosimeter coefficient taken at the bench's default tube voltage, %s kV, not read off", fmtNum(e.st.values["tube_voltage"]))
	case o.unconfirmed:
		return "dosimeter coefficient taken at a tube voltage nobody read off: " + o.text
	case o.mode != a.step.FieldMode || !samePart(e.cfg.Procedure.Steps, o.step, a.idx):
		return fmt.Sprintf("dosimeter coefficient taken at the tube voltage entered at step %d (%s), not read off for this reading", o.step, o.text)
	}
	return ""
}

// samePart reports whether steps i and j (1-based) were written in the same
// procedure.
func samePart(steps []Step, i, j int) bool {
	if i < 1 || j < 1 || i > len(steps) || j > len(steps) {
		return false
	}
	return steps[i-1].Procedure == steps[j-1].Procedure
}

// guard applies the safety stop and the status checks to a reading.
func (e *Engine) guard(ctx context.Context, a *attempt, role string, r drivers.Reading, c Corrected) error {
	if role == Dosimeter {
		ceil := e.cfg.Settings.KermaCeiling
		for _, x := range a.spec.Expect {
			if (x.Quantity == string(units.AirKermaRate)) && x.Max > 0 && x.Max < ceil {
				ceil = x.Max
			}
		}
		v := c.Value
		if r.Status == drivers.StatusOverRange && r.Value > v {
			v = r.Value
		}
		if (r.Usable() || r.Status == drivers.StatusOverRange) && v > ceil {
			// Two readings in a row: a single corrupted value does not
			// end a session; 0.1 to 0.2 s more beam does not matter.
			a.overCeiling++
			if a.overCeiling >= 2 {
				_ = e.record(ctx, a, role, r, c, false)
				return e.kermaStop(ctx, a, v, ceil)
			}
			_ = e.record(ctx, a, role, r, c, false)
			return errIgnore
		}
		a.overCeiling = 0
	}
	switch r.Status {
	case drivers.StatusOK:
		return nil
	case drivers.StatusUnderRange:
		return nil // below range: no beam seen by this meter
	case drivers.StatusOverRange:
		if t := a.tracks[role]; t != nil {
			t.over++
		}
		_ = e.record(ctx, a, role, r, c, false)
		return &retryError{reason: "the " + role + " is over range", rangeOrSettle: true}
	default:
		_ = e.record(ctx, a, role, r, c, false)
		return &retryError{reason: "the " + role + " reports a fault"}
	}
}

// kermaStop is the safety stop for a kerma rate far out of range.
func (e *Engine) kermaStop(ctx context.Context, a *attempt, v, ceil float64) error {
	_ = e.cfg.Panel.Indicate(ctx, panel.Fault)
	_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evKermaRange, Detail: fmt.Sprintf("%.4g µGy/s at the chamber, above %.4g µGy/s", v, ceil), BeamOn: e.st.beamOn.Seconds()})
	msg := fmt.Sprintf("Release the beam now. The kerma rate at the chamber is %s µGy/s, far above what an intensifier input sees. Check that the chamber is not in the direct beam. The session is stopped.", fmtNum(v))
	_ = e.say(ctx, a.idx, panel.Message{Text: msg, Level: panel.Alarm, Action: panel.ActBeamOff})
	a.beamOn = a.beamOn || true
	if a.lastSig == 0 {
		a.lastSig = e.cfg.Clock.Mono()
	}
	_ = e.waitOff(ctx, a, panel.Alarm, "Release the beam now.")
	return fmt.Errorf("step %d (%s): %.4g µGy/s: %w", a.idx, a.step.ID, v, ErrKermaOutOfRange)
}

// observe updates the meters' tracks, the beam state, the beam-on timer
// and the series with one reading, and journals or holds it.
func (e *Engine) observe(ctx context.Context, a *attempt, role string, r drivers.Reading, c Corrected) error {
	v := c.Value
	usable := r.Usable()
	if t := a.tracks[role]; t != nil {
		if r.Status == drivers.StatusUnderRange {
			t.under++
		}
		rose, fell := t.seeStatus(r.Mono, v, usable, r.Status == drivers.StatusOverRange)
		if rose {
			if !a.beamOn {
				a.beamOn = true
				on, _ := t.riseTime()
				a.onAt, a.lastSig, a.onBase = on, on, e.st.beamOn
				_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evBeamOn, Detail: describeRise(t, v), BeamOn: e.st.beamOn.Seconds()})
				e.enterPhase(ctx, a, phRising, role)
			}
			if a.inStep[role] {
				// Readings before this one belong to the rise: the
				// meter's series starts afresh.
				a.series[role] = nil
			}
		}
		if a.beamOn {
			if err := e.tick(ctx, a, r.Mono); err != nil {
				_ = e.record(ctx, a, role, r, c, false)
				if !fell || !errors.Is(err, errBeamAlarm) {
					return err
				}
			}
		}
		if fell {
			_ = e.record(ctx, a, role, r, c, false)
			if !a.anyAbove() {
				e.beamOff(ctx, a)
			}
			if r.Status == drivers.StatusUnderRange {
				return &retryError{reason: "the " + role + " went under range", rangeOrSettle: true}
			}
			return &retryError{reason: "the beam dropped"}
		}
	}
	live := a.beamOn || !a.spec.Beam
	switch {
	case live && a.inStep[role] && usable:
		a.series[role] = append(a.series[role], timedValue{r.Mono, v})
	case !a.spec.Beam && a.inStep[role] && r.Status == drivers.StatusUnderRange:
		// A dark under range: the meter shows nothing (finishStat counts
		// it, and the range floor bounds the level).
		a.series[role] = append(a.series[role], timedValue{r.Mono, 0})
	}
	sampling := live && a.inStep[role] && (a.settled >= 0 || a.candidate >= 0 || !a.spec.Beam)
	if sampling && (usable || !a.spec.Beam) {
		a.unconfirmed = append(a.unconfirmed, unconfirmedReading{role, r, c})
		return nil
	}
	return e.record(ctx, a, role, r, c, false)
}

// beamOff ends the exposure once every meter that rose has fallen: the
// beam-on timer is set to what it was when the exposure began plus the
// exposure's time from the meters' edges (attempt.exposure), which takes
// out both the late detection of a rising signal and the meters' slow
// fall; the live count stands when the edges cannot tell.
func (e *Engine) beamOff(ctx context.Context, a *attempt) {
	a.beamOn = false
	d, ok := a.exposure()
	live := a.lastSig - a.onAt
	if !ok {
		d = live
	}
	a.exposed = d
	e.st.beamOn = a.onBase + d
	_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evBeamOff, Detail: fmt.Sprintf("exposure %.2f s from the meters' edges (%.2f s between threshold crossings)", d.Seconds(), live.Seconds()), BeamOn: e.st.beamOn.Seconds()})
	e.enterPhase(ctx, a, phOff, "")
	_ = e.cfg.Panel.Indicate(ctx, panel.Ready)
}

// beamCheckpoint is how much beam-on passes between two journalled
// values of the running timer (evBeamCount). The readings of an exposure
// being sampled are held until it ends, so without these a power cut lost
// the exposure's beam-on so far; now it loses at most this and one reading
// period. One write a second of beam costs little beside the readings'.
const beamCheckpoint = time.Second

// tick advances the cumulative beam-on timer to t and speaks its marks:
// the time every SpeakEvery, a warning at BeamWarn and the alarm every
// BeamAlarm of cumulative beam-on (21 CFR 1020.32(h)).
func (e *Engine) tick(ctx context.Context, a *attempt, t time.Duration) error {
	l := e.cfg.Settings
	st := e.st
	// Readings of two meters arrive out of order (a streaming meter's
	// backlog is read after a polled meter's answer): the timer and the
	// attempt's clock only move forward, or each step back would be
	// counted again.
	if t <= a.lastSig {
		return nil
	}
	st.beamOn += t - a.lastSig
	a.lastSig = t
	if st.beamOn >= st.nextCount && a.phase != phReleasing {
		// Queued, not written now: it goes with the next write, at the
		// latest before the next wait for a meter (one reading period).
		// Not while the beam is released: the live count then runs on
		// through the meters' fall, which the exposure's edges take out
		// at beam_off (its readings, journalled, time it for a resume).
		st.nextCount = st.beamOn + beamCheckpoint
		e.pending = append(e.pending, entry.Item{Kind: entry.KindEvent, Payload: entry.Event{Step: a.idx, Name: evBeamCount, BeamOn: st.beamOn.Seconds()}})
	}
	if st.beamOn >= st.nextAlarm {
		st.setBeamOn(st.beamOn, l)
		_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evBeamAlarm, Detail: "cumulative beam-on " + spokenDuration(st.beamOn), BeamOn: st.beamOn.Seconds()})
		_ = e.say(ctx, a.idx, panel.Message{Text: fmt.Sprintf("Alarm: %s of beam-on. Release the beam.", spokenDuration(st.beamOn)), Level: panel.Alarm, Action: panel.ActBeamOff})
		return errBeamAlarm
	}
	if st.beamOn >= st.nextWarn {
		st.nextWarn += l.BeamAlarm
		_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evBeamWarning, Detail: "cumulative beam-on " + spokenDuration(st.beamOn), BeamOn: st.beamOn.Seconds()})
		_ = e.say(ctx, a.idx, panel.Message{Text: fmt.Sprintf("Warning: %s of beam-on. The alarm sounds at %s.", spokenDuration(st.beamOn), spokenDuration(st.nextAlarm)), Level: panel.Warn})
	}
	if st.beamOn >= st.nextSpeak {
		for st.nextSpeak <= st.beamOn {
			st.nextSpeak += l.SpeakEvery
		}
		_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evBeamTime, BeamOn: st.beamOn.Seconds()})
		_ = e.say(ctx, a.idx, panel.Message{Text: "Beam-on " + spokenDuration(st.beamOn) + ".", Level: panel.Info})
	}
	return nil
}

// attemptFailed cleans up after an attempt that cannot go on: held
// samples are discarded (journalled as not used, with an event), a lost
// meter is waited for, the beam is released; the error says what to do
// next.
func (e *Engine) attemptFailed(ctx context.Context, a *attempt, err error) error {
	if ctx.Err() != nil {
		return ctx.Err()
	}
	if len(a.unconfirmed) > 0 {
		n := len(a.unconfirmed)
		if ferr := e.flush(ctx, a, false); ferr != nil && e.journalErr == nil {
			return ferr
		}
		_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evDiscarded, Detail: fmt.Sprintf("%d readings not used: %v", n, err), BeamOn: e.st.beamOn.Seconds()})
	}
	var lost *lostError
	var re *retryError
	var ch *changedError
	switch {
	case errors.As(err, &ch):
		return e.meterChanged(ctx, a, ch)
	case errors.As(err, &lost):
		if rerr := e.waitMeter(ctx, a, lost); rerr != nil {
			return rerr
		}
		if a.beamOn {
			if werr := e.release(ctx, a, panel.Retry, "Release the beam."); werr != nil {
				return werr
			}
		}
		return &retryError{reason: "the " + lost.role + " was lost", uncounted: true}
	case errors.Is(err, errBeamAlarm):
		if werr := e.waitOff(ctx, a, panel.Alarm, "Release the beam."); werr != nil {
			return werr
		}
		if _, aerr := e.ask(ctx, panel.Prompt{Message: panel.Message{Text: "Press the switch to reset the beam-on alarm and go on.", Level: panel.Alarm, Action: panel.ActAcknowledge}, Step: a.idx, StepID: a.step.ID}); aerr != nil {
			return aerr
		}
		return &retryError{reason: "the beam-on alarm was reset", uncounted: true}
	case errors.As(err, &re):
		if werr := e.releaseAfter(ctx, a, panel.Retry); werr != nil {
			return werr
		}
		e.enterPhase(ctx, a, phFailed, re.reason)
		return re
	}
	// Anything else (a journal that cannot be written, a fault) ends the
	// session: the beam is released first.
	if werr := e.releaseAfter(ctx, a, panel.Warn); werr != nil && !errors.Is(werr, ErrJournal) {
		return errors.Join(err, werr)
	}
	e.enterPhase(ctx, a, phFailed, err.Error())
	return err
}

// releaseAfter has the beam released after a failed attempt: said and
// waited for while a meter sees the beam, said anyway once the beam was
// asked for (a beam no meter saw, a dim light under every threshold, is
// still a beam).
func (e *Engine) releaseAfter(ctx context.Context, a *attempt, lv panel.Level) error {
	switch {
	case a.beamOn:
		return e.release(ctx, a, lv, "Release the beam.")
	case a.prompted:
		return e.say(ctx, a.idx, panel.Message{Text: "Release the beam.", Level: lv, Action: panel.ActBeamOff})
	}
	return nil
}

// waitMeter says a meter is lost and waits for it to come back.
func (e *Engine) waitMeter(ctx context.Context, a *attempt, lost *lostError) error {
	l := e.cfg.Settings
	name := roleName(lost.role)
	_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evMeterLost, Detail: lost.err.Error(), BeamOn: e.st.beamOn.Seconds()})
	text := name + " lost. Check its cable."
	if a.beamOn {
		text = name + " lost. Release the beam. Check its cable."
	}
	if err := e.say(ctx, a.idx, panel.Message{Text: text, Level: panel.Warn, Action: actIf(a.beamOn)}); err != nil {
		return err
	}
	_ = e.cfg.Panel.Indicate(ctx, panel.Fault)
	start := e.cfg.Clock.Mono()
	for {
		if err := e.cfg.Clock.Sleep(ctx, l.LinkRetry); err != nil {
			return err
		}
		r, err := e.next(ctx, lost.role)
		if ch := isMeterChanged(lost.role, err); ch != nil {
			return e.meterChanged(ctx, a, ch)
		}
		if err == nil {
			c := e.correct(a, lost.role, r)
			_ = e.record(ctx, a, lost.role, r, c, false)
			break
		}
		if ctx.Err() != nil {
			return ctx.Err()
		}
		if l.LinkGiveUp > 0 && e.cfg.Clock.Mono()-start > l.LinkGiveUp {
			return fmt.Errorf("step %d (%s): %s did not come back in %s: %w", a.idx, a.step.ID, lost.role, l.LinkGiveUp, lost.err)
		}
	}
	_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evMeterBack, BeamOn: e.st.beamOn.Seconds()})
	_ = e.cfg.Panel.Indicate(ctx, panel.Ready)
	return e.say(ctx, a.idx, panel.Message{Text: name + " back.", Level: panel.Info})
}

func actIf(beam bool) panel.Action {
	if beam {
		return panel.ActBeamOff
	}
	return panel.ActNone
}

// release says "release the beam" and waits until the signal shows it off.
// A journal that cannot take the message does not stop the wait.
func (e *Engine) release(ctx context.Context, a *attempt, lv panel.Level, text string) error {
	err := e.say(ctx, a.idx, panel.Message{Text: text, Level: lv, Action: panel.ActBeamOff})
	if err != nil && (ctx.Err() != nil || e.journalErr == nil) {
		return err
	}
	return errors.Join(err, e.waitOff(ctx, a, lv, text))
}

// waitOff reads until every meter that rose has fallen (the beam is off),
// repeating text every 10 s. Without tracks (a safety stop before the
// beam prompt) the dosimeter is watched against five times its beam
// floor. A journal that fails meanwhile does not stop the wait: the beam
// must be seen off first.
func (e *Engine) waitOff(ctx context.Context, a *attempt, lv panel.Level, text string) error {
	if a.beamOn && (a.tracks == nil || !a.anyAbove()) {
		a.tracks = map[string]*track{}
		if slices.Contains(a.roles, Dosimeter) {
			a.tracks[Dosimeter] = &track{role: Dosimeter, thresh: 5 * e.cfg.Settings.BeamFloor, risen: true, overThreshold: true}
		} else {
			a.beamOn = false
		}
	}
	e.enterPhase(ctx, a, phReleasing, "")
	again := e.cfg.Clock.Mono() + 10*time.Second
	for a.beamOn {
		for _, role := range a.roles {
			r, c, err := e.readOne(ctx, a, role)
			if err != nil {
				var lost *lostError
				if errors.As(err, &lost) || ctx.Err() != nil {
					return err
				}
				if t := a.tracks[role]; t != nil && t.overThreshold && a.beamOn {
					// The meter no longer gives readings (three errors in a
					// row): it cannot show the beam off. The other meters
					// decide; with none left, the engineer does.
					_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evReadError, Detail: fmt.Sprintf("%s cannot show the beam off: %v", role, err), BeamOn: e.st.beamOn.Seconds()})
					t.overThreshold, t.risen = false, false
					if err := e.offByHand(ctx, a); err != nil {
						return err
					}
				}
				continue
			}
			if t := a.tracks[role]; t != nil && a.beamOn {
				t.seeStatus(r.Mono, c.Value, r.Usable(), r.Status == drivers.StatusOverRange)
				if err := e.tick(ctx, a, r.Mono); err != nil && !errors.Is(err, errBeamAlarm) {
					return err
				}
				if !a.anyAbove() {
					e.beamOff(ctx, a)
				}
			}
			if err := e.record(ctx, a, role, r, c, false); err != nil && e.journalErr == nil {
				return err
			}
		}
		if a.beamOn && e.cfg.Clock.Mono() > again {
			again = e.cfg.Clock.Mono() + 10*time.Second
			_ = e.say(ctx, a.idx, panel.Message{Text: text, Level: lv, Action: panel.ActBeamOff})
		}
	}
	_ = e.cfg.Panel.Indicate(ctx, panel.Ready)
	return nil
}

// offByHand ends the exposure when no meter that can still read has seen
// the beam: the engineer says when it is off (a press). With another meter
// still seeing the beam, its fall decides.
func (e *Engine) offByHand(ctx context.Context, a *attempt) error {
	for _, t := range a.tracks {
		if t.risen {
			if !a.anyAbove() {
				e.beamOff(ctx, a)
			}
			return nil
		}
	}
	if _, err := e.ask(ctx, panel.Prompt{Message: panel.Message{Text: "Press the switch when the beam is off.", Level: panel.Warn, Action: panel.ActAcknowledge}, Step: a.idx, StepID: a.step.ID}); err != nil {
		return err
	}
	e.beamOff(ctx, a)
	return nil
}

// record journals one reading.
func (e *Engine) record(ctx context.Context, a *attempt, role string, r drivers.Reading, c Corrected, used bool) error {
	q := string(r.Quantity)
	unit := r.Unit
	if unit == "" {
		unit = units.Canonical(r.Quantity)
	}
	name := r.Meter
	if name == "" {
		name = role
	}
	rec := entry.Reading{
		Step: a.idx, StepID: a.step.ID, FieldMode: a.step.FieldMode, Position: a.label,
		Meter: name, Quantity: q, Raw: r.Raw, RawValue: r.RawValue, RawUnit: r.RawUnit,
		Value: c.Value, Unit: unit, Status: string(r.Status), Corrections: c.Corrections,
		Certificate: c.Certificate, Calibrated: c.Calibrated, Flags: c.Flags,
		Mono: r.Mono, Wall: r.Wall, BootID: e.cfg.BootID, Used: used && a.inStep[role],
	}
	return e.queueReading(ctx, rec)
}

// flush journals the held readings as used or not, in one write.
func (e *Engine) flush(ctx context.Context, a *attempt, used bool) error {
	for _, h := range a.unconfirmed {
		if err := e.record(ctx, a, h.role, h.r, h.c, used); err != nil {
			return err
		}
	}
	a.unconfirmed = a.unconfirmed[:0]
	return e.flushReadings(ctx)
}
