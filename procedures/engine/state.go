package engine

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"time"

	"kermalux/drivers/units"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// positionStats is the outcome of one accepted reading position of a measurement.
// It is journalled (as the detail of a "measurement_done" event) so that a
// resumed session can compute results from measurements taken before a
// power cut without repeating them.
type positionStats struct {
	Step   string  `json:"step"`  // step ID
	Index  int     `json:"index"` // position index (0 without positions)
	Label  string  `json:"label,omitempty"`
	Radius float64 `json:"r,omitempty"`
	Angle  float64 `json:"angle,omitempty"`
	// Meters are the statistics of each meter the step reads, by role
	// (Photometer, Dosimeter, or any other the bench names): a third
	// sensor joins without a field of its own.
	Meters map[string]meterStat `json:"meters,omitempty"`
	HasG   bool                 `json:"has_g,omitempty"`
	G      float64              `json:"g,omitempty"`   // mean of time-aligned L/K pairs
	GU     float64              `json:"g_u,omitempty"` // type A of that mean (autocorrelation allowed for)
	NG     int                  `json:"n_g,omitempty"`
	Drift  float64              `json:"drift,omitempty"` // relative change over a fixed-duration reading (the largest of Drifts)
	// Drifts is the relative change of each meter (by role) over a
	// fixed-duration reading of several meters.
	Drifts  map[string]float64 `json:"drifts,omitempty"`
	Calib   bool               `json:"calibrated"`
	Flags   []string           `json:"flags,omitempty"`
	Dark    bool               `json:"dark,omitempty"`
	Mode    string             `json:"field_mode,omitempty"`
	BeamOnS float64            `json:"beam_on_s,omitempty"` // beam-on time of the accepted attempt
	// UsedS is the beam-on of all the position's attempts, their releases
	// included: what it took from its pools (0 in journals of earlier
	// releases).
	UsedS float64 `json:"used_s,omitempty"`
	// Settle is each meter's residual settling (by role, and "ratio" for
	// the two meters' ratio): the relative half-width of a rectangular
	// distribution, from the attempt's data (residualSettling). Nil in
	// journals of earlier releases.
	Settle map[string]float64 `json:"settle,omitempty"`
	// Unmeasurable says why the position could not be measured (over
	// range, never settled, its beam-on limit used up); its figures are
	// then not measurable.
	Unmeasurable string `json:"not_measurable,omitempty"`
	calibStat           // raw readings, type B parts, dark used (calibration.go)
	// lkFields are how journals before Meters recorded the two meters;
	// read only, by migrate.
	lkFields
}

// meterStat is one meter's statistics at a position: the mean of its
// accepted readings (corrected, in its canonical unit), the type A
// standard uncertainty of that mean (JCGM 100:2008 4.2.3), the relative
// type B standard uncertainty of one reading, the count and the time
// they cover.
type meterStat struct {
	Mean float64 `json:"mean"`
	U    float64 `json:"u"`
	B    float64 `json:"b,omitempty"`
	N    int     `json:"n"`
	// Span is the time the readings cover, seconds (covered).
	Span float64 `json:"span_s,omitempty"`
}

// lkFields are the fixed luminance and kerma fields of journals written
// before the statistics were kept by role.
type lkFields struct {
	HasL bool    `json:"has_l,omitempty"`
	L    float64 `json:"l,omitempty"`
	LU   float64 `json:"l_u,omitempty"`
	BL   float64 `json:"l_b,omitempty"`
	NL   int     `json:"n_l,omitempty"`
	HasK bool    `json:"has_k,omitempty"`
	K    float64 `json:"k,omitempty"`
	KU   float64 `json:"k_u,omitempty"`
	BK   float64 `json:"k_b,omitempty"`
	NK   int     `json:"n_k,omitempty"`
}

// migrate moves an older journal's luminance and kerma fields into
// Meters, so that everything after reads one shape.
func (p *positionStats) migrate() {
	old := p.lkFields
	p.lkFields = lkFields{}
	if p.Meters != nil || (!old.HasL && !old.HasK) {
		return
	}
	p.Meters = map[string]meterStat{}
	if old.HasL {
		p.Meters[Photometer] = meterStat{Mean: old.L, U: old.LU, B: old.BL, N: old.NL}
	}
	if old.HasK {
		p.Meters[Dosimeter] = meterStat{Mean: old.K, U: old.KU, B: old.BK, N: old.NK}
	}
}

// meter is role's statistics, if the position has them.
func (p positionStats) meter(role string) (meterStat, bool) {
	m, ok := p.Meters[role]
	return m, ok
}

// state is what the engine knows; it is rebuilt from the journal on resume.
type state struct {
	session   string
	done      map[int]bool
	checklist bool // a pre-exposure safety checklist was acknowledged
	values    map[string]float64
	origins   map[string]valueOrigin     // how each entered value was obtained
	valueUnc  map[string]float64         // standard uncertainties of values read by a sensor (roomair.go)
	meas      map[string][]positionStats // by measure step ID, per position
	results   map[string]entry.Result    // by compute step ID
	order     []string                   // compute step IDs in order of computation
	darks     map[string]DarkLevel       // role, and role@position, → latest dark level (raw scale)
	beamOn    time.Duration
	nextSpeak time.Duration
	nextWarn  time.Duration
	nextAlarm time.Duration
	nextCount time.Duration // beam-on at which the timer is next journalled (evBeamCount)
	resumed   bool
}

func newState(l Settings) *state {
	return &state{
		done: map[int]bool{}, values: map[string]float64{}, origins: map[string]valueOrigin{}, meas: map[string][]positionStats{},
		results: map[string]entry.Result{}, darks: map[string]DarkLevel{},
		nextSpeak: l.SpeakEvery, nextWarn: l.BeamWarn, nextAlarm: l.BeamAlarm, nextCount: beamCheckpoint,
	}
}

// setBeamOn sets the cumulative beam-on time and the next timer marks.
func (st *state) setBeamOn(d time.Duration, l Settings) {
	st.beamOn = d
	st.nextSpeak = (d/l.SpeakEvery + 1) * l.SpeakEvery
	st.nextAlarm = (d/l.BeamAlarm + 1) * l.BeamAlarm
	st.nextCount = d + beamCheckpoint
	st.nextWarn = st.nextAlarm - l.BeamAlarm + l.BeamWarn
	if st.nextWarn <= d {
		st.nextWarn = st.nextAlarm + l.BeamWarn
	}
}

// resumeInfo is what a resume learned about the session besides its state:
// safety checklists whose done record lacks an acknowledgement of every
// line, and the boot and wall time of the session's last record.
type resumeInfo struct {
	unacked  map[int][]string // safety step index → lines without an acknowledgement record
	lastBoot string
	lastWall time.Time
}

// rebuild verifies session id (hash chain, signatures, signed head) and
// reconstructs its state from its records. A session that does not verify
// is refused, naming the record: nothing in it can be trusted. A safety
// checklist counts as acknowledged only when the journal holds, after the
// step last started, an "ack" answer to the "check" prompt of each of its
// lines; otherwise it is asked again.
func (e *Engine) rebuild(ctx context.Context, id string) (*state, resumeInfo, error) {
	info := resumeInfo{unacked: map[int][]string{}}
	if err := e.cfg.Journal.VerifySession(ctx, id); err != nil {
		return nil, info, fmt.Errorf("resume session %s: refused: %w", id, err)
	}
	envs, err := e.cfg.Journal.Envelopes(ctx, id)
	if err != nil {
		return nil, info, fmt.Errorf("resume session %s: %w", id, err)
	}
	if len(envs) == 0 {
		return nil, info, fmt.Errorf("resume session %s: the journal has no records of it", id)
	}
	st := newState(e.cfg.Settings)
	st.session = id
	st.resumed = true
	steps := e.cfg.Procedure.Steps
	var beam float64
	// An exposure the journal saw begin (beam_on) and not end: a power
	// cut came during it. Its beam-on counts up to its last journalled
	// reading, of the same boot (the monotonic clock starts again at a
	// boot), besides the timer checkpoints (evBeamCount) the events give.
	var open struct {
		on         bool
		base       float64 // cumulative beam-on at beam_on, s
		mono, last time.Duration
		boot       string
	}
	checks := map[int64]entry.Prompt{} // "check" prompts by seq
	acked := map[int]map[string]bool{} // step index → lines acknowledged since it started
	safeDone := map[int]bool{}         // safety steps done with every line acknowledged
	for _, env := range envs {
		// A record that verified but cannot be read is not skipped: the
		// state rebuilt without it could ask for an exposure already made
		// or lose an answer (the session is refused, naming the record).
		unreadable := func(env entry.Envelope, err error) error {
			return fmt.Errorf("resume session %s: record %d (%s) cannot be read: %w", id, env.Seq, env.Kind, err)
		}
		switch env.Kind {
		case entry.KindSessionEnd:
			return nil, info, fmt.Errorf("resume session %s: it has already ended", id)
		case entry.KindSession:
			var s entry.Session
			if err := json.Unmarshal(env.Payload, &s); err != nil {
				return nil, info, unreadable(env, err)
			}
			if e.cfg.Procedure.Hash != "" && s.ProcedureHash != "" && s.ProcedureHash != e.cfg.Procedure.Hash {
				return nil, info, fmt.Errorf("resume session %s: it ran procedure %s with a different text (hash %.12s, now %.12s)", id, s.Procedure, s.ProcedureHash, e.cfg.Procedure.Hash)
			}
		case entry.KindPrompt:
			var p entry.Prompt
			if err := json.Unmarshal(env.Payload, &p); err != nil {
				return nil, info, unreadable(env, err)
			}
			if p.Asked && p.Action == string(panel.ActCheck) {
				checks[env.Seq] = p
			}
		case entry.KindAck:
			var a entry.Ack
			if err := json.Unmarshal(env.Payload, &a); err != nil {
				return nil, info, unreadable(env, err)
			}
			if p, ok := checks[a.PromptSeq]; ok && p.Step == a.Step && a.Answer == string(panel.Ack) && a.PromptSeq < env.Seq {
				if acked[a.Step] == nil {
					acked[a.Step] = map[string]bool{}
				}
				acked[a.Step][p.Text] = true
			}
		case entry.KindStep:
			var s entry.Step
			if err := json.Unmarshal(env.Payload, &s); err != nil {
				return nil, info, fmt.Errorf("resume session %s: record %d: %w", id, env.Seq, err)
			}
			if s.Index < 1 || s.Index > len(steps) || steps[s.Index-1].ID != s.ID {
				return nil, info, fmt.Errorf("resume session %s: record %d names step %d %q, which is not in this procedure", id, env.Seq, s.Index, s.ID)
			}
			step := steps[s.Index-1]
			switch s.State {
			case entry.StepStarted:
				delete(acked, s.Index)
			case entry.StepDone, entry.StepSkipped:
				st.done[s.Index] = true
				if step.Safety && s.State == entry.StepDone {
					var missing []string
					for _, item := range step.Items {
						if !acked[s.Index][item] {
							missing = append(missing, item)
						}
					}
					if len(missing) > 0 {
						// Done without the answers: ask it again.
						st.done[s.Index] = false
						info.unacked[s.Index] = missing
					} else {
						safeDone[s.Index] = true
						delete(info.unacked, s.Index)
					}
				}
			case entry.StepRetake:
				st.done[s.Index] = false
				delete(safeDone, s.Index)
				delete(acked, s.Index)
				delete(st.meas, s.ID)
			}
		case entry.KindValue:
			var v entry.Value
			if err := json.Unmarshal(env.Payload, &v); err != nil {
				return nil, info, unreadable(env, err)
			}
			{
				val := v.Value
				if q, err := units.QuantityOf(v.Unit); err == nil {
					if x, err := units.ToCanonical(q, val, v.Unit); err == nil {
						val = x
					}
				}
				st.values[v.Name] = val
				st.origins[v.Name] = valueOrigin{step: v.Step, mode: v.FieldMode, text: fmtNum(v.Value) + " " + v.Unit + ", " + v.Source, unconfirmed: v.Unconfirmed}
				st.noteUnc(v)
			}
		case entry.KindEvent:
			var ev entry.Event
			if err := json.Unmarshal(env.Payload, &ev); err != nil {
				return nil, info, unreadable(env, err)
			}
			if ev.BeamOn > beam {
				beam = ev.BeamOn
			}
			switch {
			case ev.Name == evBeamOn:
				open.on, open.base, open.mono, open.last, open.boot = true, ev.BeamOn, env.Mono, env.Mono, env.BootID
			case ev.Name == evBeamOff:
				// The exposure timed from its edges: the live count
				// before it, which ran through the meters' fall, is
				// superseded.
				beam, open.on = ev.BeamOn, false
			case ev.Name == evPhase && (ev.Detail == string(phOff) || ev.Detail == string(phWaiting)):
				open.on = false
			}
			if ev.Name == evMeasured {
				var p positionStats
				if err := json.Unmarshal([]byte(ev.Detail), &p); err != nil {
					return nil, info, fmt.Errorf("resume session %s: record %d: measurement not readable: %w", id, env.Seq, err)
				}
				p.migrate()
				st.putPos(p)
			}
		case entry.KindReading:
			if open.on && env.BootID == open.boot {
				var r entry.Reading
				if err := json.Unmarshal(env.Payload, &r); err != nil {
					return nil, info, unreadable(env, err)
				}
				open.last = max(open.last, r.Mono)
			}
		case entry.KindResult:
			var r entry.Result
			if err := json.Unmarshal(env.Payload, &r); err != nil {
				return nil, info, unreadable(env, err)
			}
			if r.Step < 1 || r.Step > len(steps) {
				return nil, info, fmt.Errorf("resume session %s: record %d is a result of step %d, which is not in this procedure", id, env.Seq, r.Step)
			}
			{
				sid := steps[r.Step-1].ID
				if _, ok := st.results[sid]; !ok {
					st.order = append(st.order, sid)
				}
				st.results[sid] = r
			}
		}
	}
	if open.on {
		beam = max(beam, open.base+(open.last-open.mono).Seconds())
	}
	st.checklist = len(safeDone) > 0
	last := envs[len(envs)-1]
	info.lastBoot, info.lastWall = last.BootID, last.Wall
	st.setBeamOn(time.Duration(beam*float64(time.Second)), e.cfg.Settings)
	return st, info, nil
}

// recheckReason says why a resumed session must confirm its pre-exposure
// checklist again ("" if it need not): the board booted since the
// session's last record (a power cut), or the session was idle longer
// than Settings.RecheckAfter. An unknown boot id on either side decides
// nothing; the idle time still does.
func (e *Engine) recheckReason(info resumeInfo) string {
	now := e.cfg.BootID
	if known(info.lastBoot) && known(now) && info.lastBoot != now {
		return "the board was restarted"
	}
	if !info.lastWall.IsZero() {
		if idle := e.cfg.Clock.Now().Sub(info.lastWall); idle > e.cfg.Settings.RecheckAfter {
			return fmt.Sprintf("the session was idle for %s", spokenDuration(idle))
		}
	}
	return ""
}

func known(boot string) bool { return boot != "" && boot != "unknown" }

// putPos stores an accepted position, replacing an earlier one of the same index.
func (st *state) putPos(p positionStats) {
	ps := st.meas[p.Step]
	for len(ps) <= p.Index {
		ps = append(ps, positionStats{Index: -1})
	}
	ps[p.Index] = p
	st.meas[p.Step] = ps
	if p.Dark {
		st.putDark(p)
	}
}

// havePos reports whether position i of step id was accepted already.
func (st *state) havePos(id string, i int) bool {
	ps := st.meas[id]
	return i < len(ps) && ps[i].Index == i
}

// finite replaces values JSON cannot carry (an infinite type A from a
// single reading) with 0 and flags it.
func (p *positionStats) finite() {
	for k, v := range p.Settle {
		if math.IsInf(v, 0) || math.IsNaN(v) {
			p.Settle[k] = 0
		}
	}
	bad := func(v *float64) {
		if math.IsInf(*v, 0) || math.IsNaN(*v) {
			*v = 0
			const flag = "no type A uncertainty: too few readings, or a mean of zero (a meter below its range)"
			if !slices.Contains(p.Flags, flag) {
				p.Flags = append(p.Flags, flag)
			}
		}
	}
	for role, m := range p.Meters {
		bad(&m.Mean)
		bad(&m.U)
		bad(&m.B)
		p.Meters[role] = m
	}
	for _, v := range []*float64{&p.G, &p.GU, &p.Drift} {
		bad(v)
	}
}
