package engine

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"strconv"
	"strings"
	"time"

	"kermalux/calib"
	"kermalux/drivers/units"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// Event names the engine journals (entry.Event.Name).
const (
	evBeamOn      = "beam_on"
	evBeamOff     = "beam_off"
	evMeterLost   = "meter_lost"
	evMeterBack   = "meter_back"
	evBeamWarning = "beam_warning"
	evBeamAlarm   = "beam_alarm"
	evBeamTime    = "beam_time"
	// evBeamCount: the running beam-on timer, journalled every
	// beamCheckpoint of beam-on so that a power cut loses little of it.
	evBeamCount   = "beam_count"
	evKermaRange  = "kerma_out_of_range"
	evDiscarded   = "samples_discarded"
	evPaused      = "paused"
	evAborted     = "aborted"
	evRefused     = "beam_refused"
	evMeasured    = "measurement_done"
	evReadError   = "reading_error"
	evCertificate = "certificate_problem"
	// evSettingWarning: a local setting less safe than the default.
	evSettingWarning = "setting_warning"
	evDiskSize       = "lead_disk_size"
)

// errRetakePrev: the operator asked to redo the last step.
var errRetakePrev = errors.New("retake the previous step")

// errSkip: the step could not be done and is skipped (its results are missing).
type skipError struct{ reason string }

func (s *skipError) Error() string { return "step skipped: " + s.reason }

func (e *Engine) run(ctx context.Context) (Summary, error) {
	cfg := &e.cfg
	steps := cfg.Procedure.Steps
	n := len(steps)
	sum := Summary{Of: n, Outcome: "aborted"}

	var st *state
	var info resumeInfo
	var err error
	if cfg.Resume != "" {
		st, info, err = e.rebuild(ctx, cfg.Resume)
		if err != nil {
			return sum, err
		}
	} else {
		st = newState(cfg.Settings)
		sess := cfg.Session
		if sess.Procedure == "" {
			sess.Procedure = cfg.Procedure.Name
		}
		if sess.ProcedureHash == "" {
			sess.ProcedureHash = cfg.Procedure.Hash
		}
		if sess.Started.IsZero() {
			sess.Started = cfg.Clock.Now()
		}
		id, err := cfg.Journal.Begin(ctx, sess)
		if err != nil {
			return sum, fmt.Errorf("start session: %w", err)
		}
		st.session = id
	}
	e.st = st
	sum.Session = st.session
	for k, v := range cfg.Values {
		if _, ok := st.values[k]; !ok {
			st.values[k] = v
		}
	}

	var recheck string
	if st.resumed {
		if recheck, err = e.recheckChecklist(ctx, info); err != nil {
			return e.finish(ctx, sum, err)
		}
	}
	first := 0
	for first < n && st.done[first+1] {
		first++
	}
	title := cfg.Procedure.Title
	if title == "" {
		title = cfg.Procedure.Name
	}
	if st.resumed {
		where := strings.TrimSpace(cfg.Session.Room)
		if where == "" {
			where = e.text(title)
		}
		if first < n {
			_ = e.journal(ctx, entry.KindStep, entry.Step{Index: first + 1, Of: n, ID: steps[first].ID, Kind: string(steps[first].Kind), FieldMode: steps[first].FieldMode, State: entry.StepResumed})
		}
		text := e.t("Resuming %s at step %d of %d.", where, e.prog.taskAt(first), e.prog.tasks)
		if recheck != "" {
			text += " " + recheck
		}
		if err := e.say(ctx, first+1, panel.Message{Text: text, Level: panel.Info}); err != nil {
			return e.finish(ctx, sum, err)
		}
	} else {
		if err := e.say(ctx, 0, panel.Message{Text: e.opening(title), Level: panel.Info}); err != nil {
			return e.finish(ctx, sum, err)
		}
	}
	for _, w := range cfg.Warnings {
		_ = e.journal(ctx, entry.KindEvent, entry.Event{Name: evSettingWarning, Detail: w, BeamOn: st.beamOn.Seconds()})
		if err := e.say(ctx, 0, panel.Message{Text: w, Level: panel.Warn}); err != nil {
			return e.finish(ctx, sum, err)
		}
	}
	// Who is on each link, and whether its certificate is its own: said
	// before the first exposure (calibration.go).
	problems, err := e.identify(ctx)
	if err != nil {
		return e.finish(ctx, sum, err)
	}
	for _, p := range problems {
		if err := e.say(ctx, 0, panel.Message{Text: p, Level: panel.Warn}); err != nil {
			return e.finish(ctx, sum, err)
		}
	}
	for _, p := range cfg.CertProblems {
		_ = e.journal(ctx, entry.KindEvent, entry.Event{Name: evCertificate, Detail: p, BeamOn: st.beamOn.Seconds()})
		if err := e.say(ctx, 0, panel.Message{Text: e.text(p) + " " + e.t("Results will be flagged as not calibrated."), Level: panel.Warn}); err != nil {
			return e.finish(ctx, sum, err)
		}
	}
	_ = cfg.Panel.Indicate(ctx, panel.Ready)

	// Each part of a sequence is introduced once, at its first step
	// (not again after a retake into it, nor when resumed inside it).
	introduced := map[int]bool{}
	i := first
	for i < n {
		if st.done[i+1] {
			i++
			continue
		}
		step := steps[i]
		idx := i + 1
		if k := e.prog.part[i]; k > 0 && !introduced[k] && (i == 0 || e.prog.part[i-1] != k) {
			introduced[k] = true
			if err := e.say(ctx, idx, panel.Message{Text: e.partIntro(i), Level: panel.Info}); err != nil {
				return e.finish(ctx, sum, err)
			}
		}
		rec := entry.Step{Index: idx, Of: n, ID: step.ID, Kind: string(step.Kind), FieldMode: step.FieldMode, State: entry.StepStarted}
		if err := e.journal(ctx, entry.KindStep, rec); err != nil {
			return e.finish(ctx, sum, err)
		}
		err := e.doStep(ctx, idx, step)
		if e.journalErr != nil && ctx.Err() == nil {
			// A record that could not be written: nothing more can be
			// kept, so the session stops here (the beam was released by
			// the measurement that found it).
			_ = e.cfg.Panel.Indicate(ctx, panel.Fault)
			_ = e.say(ctx, idx, panel.Message{Text: "Stop. The journal cannot be written. The session is stopped. What was recorded is kept.", Level: panel.Alarm})
			return e.finish(ctx, sum, errors.Join(e.journalErr, err))
		}
		var skip *skipError
		var skipMode *errSkipMode
		switch {
		case err == nil:
			rec.State = entry.StepDone
		case errors.As(err, &skip):
			rec.State = entry.StepSkipped
			rec.Reason = skip.reason
		case errors.As(err, &skipMode):
			// The rest of this field mode's steps are skipped, each
			// journalled with the reason; the sequence goes on after them.
			j := i
			for j < n && steps[j].FieldMode == step.FieldMode && steps[j].Part == step.Part && steps[j].Procedure == step.Procedure {
				if !st.done[j+1] {
					s := steps[j]
					if err := e.journal(ctx, entry.KindStep, entry.Step{Index: j + 1, Of: n, ID: s.ID, Kind: string(s.Kind), FieldMode: s.FieldMode, State: entry.StepSkipped, Reason: skipMode.Error()}); err != nil {
						return e.finish(ctx, sum, err)
					}
					st.done[j+1] = true
				}
				j++
			}
			sum.Skipped = appendUnique(sum.Skipped, step.FieldMode)
			if err := e.say(ctx, idx, panel.Message{Text: fmt.Sprintf("Skipping the %s field.", step.FieldMode), Level: panel.Info}); err != nil {
				return e.finish(ctx, sum, err)
			}
			i = j
			continue
		case errors.Is(err, errRetakePrev):
			j := e.previousRetakable(i)
			if j < 0 {
				_ = e.say(ctx, idx, panel.Message{Text: "There is no earlier step to retake.", Level: panel.Info})
				continue
			}
			for k := j; k <= i; k++ {
				s := steps[k]
				if k == j || st.done[k+1] {
					st.done[k+1] = false
					delete(st.meas, s.ID)
					if err := e.journal(ctx, entry.KindStep, entry.Step{Index: k + 1, Of: n, ID: s.ID, Kind: string(s.Kind), FieldMode: s.FieldMode, State: entry.StepRetake, Reason: "operator asked to retake"}); err != nil {
						return e.finish(ctx, sum, err)
					}
				}
			}
			_ = e.say(ctx, j+1, panel.Message{Text: e.t("Retaking step %d of %d.", e.prog.taskAt(j), e.prog.tasks), Level: panel.Retry})
			i = j
			continue
		default:
			if errors.Is(err, ErrPaused) {
				sum.Outcome = "paused"
			} else {
				rec.State = entry.StepAborted
				rec.Reason = err.Error()
				_ = e.journal(ctx, entry.KindStep, rec)
			}
			return e.finish(ctx, sum, err)
		}
		if err := e.journal(ctx, entry.KindStep, rec); err != nil {
			return e.finish(ctx, sum, err)
		}
		st.done[idx] = true
		if step.Safety && rec.State == entry.StepDone {
			st.checklist = true
		}
		i++
	}
	sum.Outcome = "complete"
	return e.finish(ctx, sum, nil)
}

// recheckChecklist un-does, on a resume, every pre-exposure checklist that
// must be asked again: one whose done record lacks the acknowledgement of
// a line, and all of them when the board restarted or the session was
// idle (recheckReason). Each is journalled as a retake with its reason; the
// words returned say why, for the resume announcement.
func (e *Engine) recheckChecklist(ctx context.Context, info resumeInfo) (string, error) {
	st, steps := e.st, e.cfg.Procedure.Steps
	var said []string
	for i, s := range steps {
		idx := i + 1
		if missing, ok := info.unacked[idx]; ok {
			reason := fmt.Sprintf("the journal holds no acknowledgement of %d of its %d lines (first: %q)", len(missing), len(s.Items), missing[0])
			if err := e.journal(ctx, entry.KindStep, entry.Step{Index: idx, Of: len(steps), ID: s.ID, Kind: string(s.Kind), State: entry.StepRetake, Reason: reason}); err != nil {
				return "", err
			}
			said = append(said, e.t("The safety checklist was not fully acknowledged: it is asked again."))
		}
	}
	why := e.recheckReason(info)
	if why == "" || !st.checklist {
		return strings.Join(said, " "), nil
	}
	for i, s := range steps {
		idx := i + 1
		if s.Safety && st.done[idx] {
			st.done[idx] = false
			if err := e.journal(ctx, entry.KindStep, entry.Step{Index: idx, Of: len(steps), ID: s.ID, Kind: string(s.Kind), State: entry.StepRetake, Reason: why + ": confirm the pre-exposure checklist again"}); err != nil {
				return "", err
			}
		}
	}
	st.checklist = false
	said = append(said, e.t("Since %s, confirm the safety checklist again.", e.text(why)))
	return strings.Join(said, " "), nil
}

// previousRetakable is the last step before i that a retake can redo.
func (e *Engine) previousRetakable(i int) int {
	for j := i - 1; j >= 0; j-- {
		switch e.cfg.Procedure.Steps[j].Kind {
		case Say, Compute, Judge:
			continue
		}
		return j
	}
	return -1
}

// finish closes the session (unless paused or cut short by ctx), fills
// the summary and speaks the outcome.
func (e *Engine) finish(ctx context.Context, sum Summary, runErr error) (Summary, error) {
	st := e.st
	if st == nil {
		return sum, runErr
	}
	// Readings still queued are kept, whatever ended the session.
	_ = e.flushReadings(ctx)
	sum.BeamOn = st.beamOn
	for _, id := range st.order {
		r := st.results[id]
		sum.Results = append(sum.Results, r)
		if needsReview(r) {
			sum.Review++
		}
	}
	for _, d := range st.done {
		if d {
			sum.Steps++
		}
	}
	if ctx.Err() != nil {
		// Power cut or kill: leave the session unfinished for a resume.
		sum.Outcome = "interrupted"
		return sum, errors.Join(runErr, ctx.Err())
	}
	if errors.Is(runErr, ErrPaused) {
		_ = e.say(ctx, 0, panel.Message{Text: "Paused. Run again to resume where you left off.", Level: panel.Info})
		return sum, runErr
	}
	// The closing summary is said, and journalled, before the session's
	// end record: the journal takes nothing after it.
	if runErr == nil {
		_ = e.say(ctx, 0, panel.Message{Text: e.closingSummary(sum, st.beamOn), Level: panel.Info})
	}
	end := entry.SessionEnd{Finished: e.cfg.Clock.Now(), BeamOn: st.beamOn.Seconds(), Steps: sum.Steps, Outcome: sum.Outcome, Review: sum.Review}
	if sum.Outcome != "complete" {
		end.Outcome = "aborted"
	}
	if err := e.journal(ctx, entry.KindSessionEnd, end); err != nil {
		return sum, errors.Join(runErr, err)
	}
	if runErr != nil {
		_ = e.cfg.Panel.Indicate(ctx, panel.Fault)
		return sum, runErr
	}
	_ = e.cfg.Panel.Indicate(ctx, panel.Ready)
	return sum, nil
}

// closingSummary is what is said at the end of a complete session: each
// fail and the limit that decided it, how many other results need review
// and why, and the total beam-on time.
func (e *Engine) closingSummary(sum Summary, beamOn time.Duration) string {
	var fails, why []string
	for _, r := range sum.Results {
		switch {
		case r.Verdict == "fail":
			w := e.text(spokenQuantity(r.Quantity))
			if r.FieldMode != "" {
				w = e.t("%s, %s field", w, r.FieldMode)
			}
			if r.DecidedBy != "" {
				w += ", " + e.text(r.DecidedBy)
			}
			fails = append(fails, w)
		case r.Verdict == string(calib.NotMeasurable):
			why = appendUnique(why, e.t("not measurable"))
		case needsReview(r):
			why = appendUnique(why, e.t("not calibrated"))
		}
	}
	others := sum.Review - len(fails)
	text := e.t("All steps done.")
	switch len(fails) {
	case 0:
	case 1:
		text += " " + e.t("One fail: %s.", fails[0])
	default:
		text += " " + e.t("%s fails: %s.", e.text(spellCount(len(fails))), strings.Join(fails, "; "))
	}
	other := ""
	if len(fails) > 0 {
		other = "other "
	}
	switch {
	case others <= 0 && len(fails) == 0:
		text += " " + e.t("No results need review.")
	case others == 1:
		text += " " + e.t("One "+other+"result needs review: %s.", strings.Join(why, ", "))
	case others > 1:
		text += " " + e.t("%s "+other+"results need review: %s.", e.text(spellCount(others)), strings.Join(why, ", "))
	}
	for _, m := range sum.Skipped {
		text += " " + e.t("Skipped: the %s field.", m)
	}
	return text + " " + e.t("Beam-on time %s.", e.duration(beamOn))
}

func needsReview(r entry.Result) bool {
	return r.Verdict == string(calib.Fail) || r.Verdict == string(calib.NotMeasurable) || !r.Calibrated
}

func spellCount(n int) string {
	words := []string{"Zero", "One", "Two", "Three", "Four", "Five", "Six", "Seven", "Eight", "Nine", "Ten"}
	if n >= 0 && n < len(words) {
		return words[n]
	}
	return fmt.Sprint(n)
}

// spokenDuration says a duration the way a person would, in English
// (the journal's words; what is said goes through Engine.duration).
func spokenDuration(d time.Duration) string { return (&Engine{}).duration(d) }

// journal appends a record to the session.
func (e *Engine) journal(ctx context.Context, kind entry.Kind, payload any) error {
	_, err := e.appendSeq(ctx, kind, payload)
	return err
}

// maxPending bounds the readings the engine holds before journalling
// them (see flushReadings).
const maxPending = 256

// queueReading journals a reading at the next flushReadings: before the
// engine waits for a meter, before any other record, or when maxPending
// are waiting. A burst of readings (a streaming meter's backlog) then
// costs one durable write, not one each: at one write per reading a board
// that fell behind a 10 Hz meter for a moment could not catch up. What a
// power cut can lose is the readings of the burst being read, as it loses
// the lines still in the serial buffer.
func (e *Engine) queueReading(ctx context.Context, rec entry.Reading) error {
	e.pending = append(e.pending, entry.Item{Kind: entry.KindReading, Payload: rec})
	if len(e.pending) >= maxPending {
		return e.flushReadings(ctx)
	}
	return e.journalErr
}

// flushReadings journals the queued readings in one write.
func (e *Engine) flushReadings(ctx context.Context) error {
	if len(e.pending) == 0 {
		return nil
	}
	items := e.pending
	e.pending = nil
	if _, err := e.cfg.Journal.AppendAll(ctx, e.st.session, items); err != nil {
		return e.journalFailed(ctx, fmt.Errorf("journal %d readings: %w", len(items), err))
	}
	return nil
}

// journalFailed keeps a failed write other than a cancelled context in
// journalErr and returns err.
func (e *Engine) journalFailed(ctx context.Context, err error) error {
	if ctx.Err() == nil && e.journalErr == nil {
		e.journalErr = fmt.Errorf("%w: %w", ErrJournal, err)
	}
	return err
}

// appendSeq appends a record and returns its sequence number. A failed
// write other than a cancelled context (a power cut, a kill) is kept in
// journalErr: the engine stops measuring at its next reading, has the beam
// released and ends the session, whatever the caller did with the error
// (see journalFailed).
func (e *Engine) appendSeq(ctx context.Context, kind entry.Kind, payload any) (int64, error) {
	// Readings that came before this record go first.
	ferr := e.flushReadings(ctx)
	seq, err := e.cfg.Journal.Append(ctx, e.st.session, kind, payload)
	if err != nil {
		return 0, e.journalFailed(ctx, fmt.Errorf("journal %s record: %w", kind, err))
	}
	return seq, ferr
}

// say shows and speaks m, and journals it. It is spoken even when the
// journal cannot take it (a "release the beam" must be heard whatever the
// storage does); the journal's error is returned after.
func (e *Engine) say(ctx context.Context, step int, m panel.Message) error {
	m.Text = e.text(m.Text)
	e.sinceAsk = append(e.sinceAsk, m)
	jerr := e.journal(ctx, entry.KindPrompt, entry.Prompt{Step: step, Level: string(m.Level), Action: string(m.Action), Text: m.Text})
	if jerr != nil && ctx.Err() != nil {
		return jerr
	}
	if err := e.cfg.Panel.Say(ctx, m); err != nil {
		if ctx.Err() != nil {
			return ctx.Err()
		}
		slog.Warn("panel could not say a message", "text", m.Text, "err", err)
	}
	return jerr
}

// ask asks p and journals the prompt and the answer. Pause, abort and
// retake come back as ErrPaused, ErrAborted and errRetakePrev.
func (e *Engine) ask(ctx context.Context, p panel.Prompt) (panel.Response, error) {
	if p.Of == 0 {
		p.Of = len(e.cfg.Procedure.Steps)
	}
	e.withProgress(&p)
	if p.Next == "" {
		p.Next = e.nextText(p.Step)
	}
	for {
		r, err := e.askOnce(ctx, p)
		if err != nil {
			return r, err
		}
		switch r.Answer {
		case panel.Repeat:
			// Say again what was said since the last answer, then ask again.
			if err := e.sayAgain(ctx, p.Step); err != nil {
				return r, err
			}
			continue
		case panel.Pause:
			again, err := e.pauseMenu(ctx, p)
			if err != nil || !again {
				return r, err
			}
			continue
		case panel.Abort:
			_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: p.Step, Name: evAborted, BeamOn: e.st.beamOn.Seconds()})
			return r, ErrAborted
		case panel.Retake:
			return r, errRetakePrev
		}
		e.sinceAsk = nil
		return r, nil
	}
}

// askOnce asks p once and journals the prompt and the answer.
func (e *Engine) askOnce(ctx context.Context, p panel.Prompt) (panel.Response, error) {
	p.Text = e.text(p.Text)
	seq, err := e.appendSeq(ctx, entry.KindPrompt, entry.Prompt{Step: p.Step, Level: string(p.Level), Action: string(p.Action), Text: p.Text, Asked: true, Setup: p.Setup})
	if err != nil {
		return panel.Response{}, err
	}
	r, err := e.cfg.Panel.Ask(ctx, p)
	if err != nil {
		return r, fmt.Errorf("panel: %w", err)
	}
	at := r.At
	if at.IsZero() {
		at = e.cfg.Clock.Now()
	}
	if err := e.journal(ctx, entry.KindAck, entry.Ack{Step: p.Step, PromptSeq: seq, Answer: string(r.Answer), Text: p.Text, At: at}); err != nil {
		return r, err
	}
	return r, nil
}

// sayAgain repeats the messages said since the last answered prompt (a
// result, a warning), for an operator who asked to hear them again.
func (e *Engine) sayAgain(ctx context.Context, step int) error {
	again := e.sinceAsk
	e.sinceAsk = nil
	for _, m := range again {
		m.Action = panel.ActNone // a "release the beam" said again is not a new one
		if err := e.say(ctx, step, m); err != nil {
			return err
		}
	}
	return nil
}

// errSkipMode: the operator chose to skip the field mode of the step at a
// pause.
type errSkipMode struct{ mode string }

func (e *errSkipMode) Error() string {
	return "the " + e.mode + " field mode was skipped by the operator"
}

// pauseMenu is asked after a pause gesture: go on (a press), stop here to
// resume later (the pause gesture again), or, in a field mode of a
// per-field-mode block, skip the rest of that mode (a long press). It
// reports whether p is to be asked again.
func (e *Engine) pauseMenu(ctx context.Context, p panel.Prompt) (bool, error) {
	mode := ""
	if i := p.Step - 1; i >= 0 && i < len(e.cfg.Procedure.Steps) {
		mode = e.cfg.Procedure.Steps[i].FieldMode
	}
	text := e.t("Paused. Press to go on. Double press again to stop here; run again to resume.")
	if mode != "" {
		text = e.t("Paused. Press to go on. Hold to skip the %s field. Double press again to stop here; run again to resume.", mode)
	}
	menu := panel.Prompt{Message: panel.Message{Text: text, Level: panel.Info, Action: panel.ActMenu}, Step: p.Step, Of: p.Of, StepID: p.StepID}
	e.withProgress(&menu)
	for {
		r, err := e.askOnce(ctx, menu)
		if err != nil {
			return false, err
		}
		switch r.Answer {
		case panel.Repeat:
			continue
		case panel.Pause:
			_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: p.Step, Name: evPaused, BeamOn: e.st.beamOn.Seconds()})
			return false, ErrPaused
		case panel.Abort:
			_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: p.Step, Name: evAborted, BeamOn: e.st.beamOn.Seconds()})
			return false, ErrAborted
		case panel.Retake:
			if mode != "" {
				return false, &errSkipMode{mode: mode}
			}
		}
		return true, nil
	}
}

// nextText is the progress line: what comes after step idx, and the
// beam-on time so far.
func (e *Engine) nextText(idx int) string {
	steps := e.cfg.Procedure.Steps
	next := e.t("the end")
	if idx >= 0 && idx < len(steps) {
		next = firstSentence(e.text(steps[idx].Text))
		if next == "" {
			next = e.t(strings.ReplaceAll(string(steps[idx].Kind), "_", " "))
		}
	}
	return e.t("%s (beam-on so far %s)", next, e.duration(e.st.beamOn))
}

func firstSentence(s string) string {
	s = strings.TrimSpace(s)
	if i := strings.IndexAny(s, ".\n"); i > 0 {
		return s[:i]
	}
	return s
}

// resolveSetup copies a setup with "largest"/"smallest" field modes named.
func (e *Engine) resolveSetup(m map[string]string) map[string]string {
	if v, ok := m["field_mode"]; !ok || (v != "largest" && v != "smallest") {
		return m
	}
	out := make(map[string]string, len(m))
	for k, v := range m {
		out[k] = v
	}
	out["field_mode"] = resolveMode(e.cfg.FieldModes, out["field_mode"])
	return out
}

// doStep runs one step.
func (e *Engine) doStep(ctx context.Context, idx int, s Step) error {
	n := len(e.cfg.Procedure.Steps)
	base := panel.Prompt{Step: idx, Of: n, StepID: s.ID}
	switch s.Kind {
	case Say:
		return e.say(ctx, idx, panel.Message{Text: s.Text, Level: panel.Info, Setup: s.Setup})
	case Prepare:
		p := base
		p.Message = panel.Message{Text: s.Text, Level: panel.Info, Action: panel.ActAcknowledge, Setup: e.resolveSetup(s.Setup)}
		if len(s.Setup) > 0 {
			p.Action = panel.ActSetup
		}
		_, err := e.ask(ctx, p)
		return err
	case Checklist:
		if s.Text != "" {
			if err := e.say(ctx, idx, panel.Message{Text: s.Text, Level: panel.Info}); err != nil {
				return err
			}
		}
		for k, item := range s.Items {
			p := base
			p.Message = panel.Message{Text: item, Level: panel.Info, Action: panel.ActCheck}
			p.Line, p.Lines = k+1, len(s.Items)
			if e.cfg.Messages != nil {
				p.LineWords = e.t("Line %d of %d.", k+1, len(s.Items))
			}
			if s.Safety {
				p.Message.Setup = map[string]string{"checklist": "pre-exposure", "item": fmt.Sprint(k + 1)}
			}
			if _, err := e.ask(ctx, p); err != nil {
				return err
			}
		}
		return nil
	case Enter:
		return e.enter(ctx, idx, s, base)
	case Measure:
		return e.measure(ctx, idx, s)
	case Compute:
		return e.compute(ctx, idx, s)
	case Judge:
		return e.judge(ctx, idx, s)
	}
	return fmt.Errorf("step %d (%s): unknown kind %q", idx, s.ID, s.Kind)
}

func (e *Engine) enter(ctx context.Context, idx int, s Step, base panel.Prompt) error {
	v := s.Value
	if v == nil {
		return fmt.Errorf("step %d (%s): enter step without a value", idx, s.ID)
	}
	if done, err := e.enterFromSensor(ctx, idx, s); done || err != nil {
		return err
	}
	req := &panel.ValueRequest{Name: v.Name, Unit: v.Unit, Default: v.Default, HasDefault: v.HasDefault, Min: v.Min, Max: v.Max}
	offered := "procedure default"
	q, qerr := units.QuantityOf(v.Unit)
	if d, ok := e.cfg.Values[v.Name]; ok {
		// Bench defaults are canonical; offer them in the unit asked.
		if qerr == nil {
			if x, err := units.FromCanonical(q, d, v.Unit); err == nil {
				d = x
			}
		}
		req.Default, req.HasDefault = d, true
		offered = "bench default"
	}
	// A value read off the console is confirmed only when someone enters
	// it; a press that accepts the offered default is recorded as such.
	readOff := v.Source == "" || v.Source == "operator"
	for attempt := 0; ; attempt++ {
		p := base
		text := s.Text
		if text == "" {
			text = e.t("Enter the %s in %s.", e.text(strings.ReplaceAll(v.Name, "_", " ")), v.Unit)
		}
		p.Message = panel.Message{Text: text, Level: panel.Info, Action: panel.ActValue}
		p.Value = req
		r, err := e.ask(ctx, p)
		if err != nil {
			return err
		}
		val := r.Value
		source := "operator"
		accepted := !r.Entered && req.HasDefault && (val == req.Default || (val == 0 && (req.Min > 0 || req.Max < 0)))
		if accepted {
			val, source = req.Default, offered // a plain press accepts the default
		}
		if (req.Min != 0 || req.Max != 0) && (val < req.Min || val > req.Max) {
			if err := e.say(ctx, idx, panel.Message{Text: e.t("%s %s is outside %s to %s %s. Please enter it again.", e.num(val), v.Unit, e.num(req.Min), e.num(req.Max), v.Unit), Level: panel.Retry}); err != nil {
				return err
			}
			if attempt >= 5 {
				return fmt.Errorf("step %d (%s): no plausible %s entered", idx, s.ID, v.Name)
			}
			continue
		}
		unconfirmed := accepted && readOff
		if unconfirmed {
			source += ", not read off"
		}
		// Kept canonical (°C, kPa, kV, mm) for the corrections.
		canon := val
		if qerr == nil {
			if x, err := units.ToCanonical(q, val, v.Unit); err == nil {
				canon = x
			}
		}
		e.st.values[v.Name] = canon
		e.st.setUnc(v.Name, 0)
		e.st.origins[v.Name] = valueOrigin{step: idx, mode: s.FieldMode, text: fmtNum(val) + " " + v.Unit + ", " + source, unconfirmed: unconfirmed}
		if err := e.journal(ctx, entry.KindValue, entry.Value{Step: idx, Name: v.Name, Value: val, Unit: v.Unit, Source: source, Unconfirmed: unconfirmed, FieldMode: s.FieldMode}); err != nil {
			return err
		}
		if v.Name == "lead_disk_diameter" {
			return e.checkDisk(ctx, idx, s, canon)
		}
		return nil
	}
}

// checkDisk says at once when the lead disk entered is far from a tenth of
// the input field it will be used in (the largest, unless the step is in a
// field mode), rather than only in the contrast ratio's notes.
func (e *Engine) checkDisk(ctx context.Context, idx int, s Step, disk float64) error {
	mode := s.FieldMode
	if mode == "" {
		mode = "largest"
	}
	field := e.cfg.FieldModes[resolveMode(e.cfg.FieldModes, mode)]
	if _, wrong := calib.LeadDiskNote(disk, field); !wrong {
		return nil
	}
	g := func(v float64) string { return e.decimal(strconv.FormatFloat(v, 'g', -1, 64)) }
	text := e.t("Check the lead disk. %s mm is %s %% of the %s mm field. The contrast ratio needs a disk of %s mm, a tenth of the field. A result with this disk carries a note.",
		g(disk), fmt.Sprintf("%.0f", 100*disk/field), g(field), g(math.Round(field/10)))
	_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: idx, Name: evDiskSize, Detail: fmt.Sprintf("lead disk %g mm for a %g mm field", disk, field), BeamOn: e.st.beamOn.Seconds()})
	return e.say(ctx, idx, panel.Message{Text: text, Level: panel.Warn})
}

// valueOrigin is where an entered value came from, for the notes of the
// corrections that use it.
type valueOrigin struct {
	step        int
	mode        string
	text        string // "70 kV, bench default, not read off"
	unconfirmed bool
}
