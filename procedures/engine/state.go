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
)

// posStat is the outcome of one accepted reading position of a measurement.
// It is journalled (as the detail of a "measurement_done" event) so that a
// resumed session can compute results from measurements taken before a
// power cut without repeating them.
type posStat struct {
	Step    string   `json:"step"`  // step ID
	Index   int      `json:"index"` // position index (0 without positions)
	Label   string   `json:"label,omitempty"`
	R       float64  `json:"r,omitempty"`
	Angle   float64  `json:"angle,omitempty"`
	HasL    bool     `json:"has_l,omitempty"`
	L       float64  `json:"l,omitempty"`   // mean luminance, cd/m²
	LU      float64  `json:"l_u,omitempty"` // standard uncertainty of the mean (type A), cd/m²
	BL      float64  `json:"l_b,omitempty"` // relative standard uncertainty, type B
	NL      int      `json:"n_l,omitempty"`
	HasK    bool     `json:"has_k,omitempty"`
	K       float64  `json:"k,omitempty"`   // mean kerma rate, µGy/s
	KU      float64  `json:"k_u,omitempty"` // type A of the mean
	BK      float64  `json:"k_b,omitempty"`
	NK      int      `json:"n_k,omitempty"`
	HasG    bool     `json:"has_g,omitempty"`
	G       float64  `json:"g,omitempty"`   // mean of time-aligned L/K pairs
	GU      float64  `json:"g_u,omitempty"` // type A of that mean (autocorrelation allowed for)
	NG      int      `json:"n_g,omitempty"`
	Drift   float64  `json:"drift,omitempty"` // relative change over a fixed-duration reading
	Calib   bool     `json:"calibrated"`
	Flags   []string `json:"flags,omitempty"`
	Dark    bool     `json:"dark,omitempty"`
	Mode    string   `json:"field_mode,omitempty"`
	BeamOnS float64  `json:"beam_on_s,omitempty"` // beam-on time of the accepted attempt
}

// state is what the engine knows; it is rebuilt from the journal on resume.
type state struct {
	session   string
	done      map[int]bool
	checklist bool // a pre-exposure safety checklist was acknowledged
	values    map[string]float64
	meas      map[string][]posStat    // by measure step ID, per position
	results   map[string]entry.Result // by compute step ID
	order     []string                // compute step IDs in order of computation
	darks     map[string]float64      // role → latest dark mean
	beamOn    time.Duration
	nextSpeak time.Duration
	nextWarn  time.Duration
	nextAlarm time.Duration
	resumed   bool
}

func newState(l Limits) *state {
	return &state{
		done: map[int]bool{}, values: map[string]float64{}, meas: map[string][]posStat{},
		results: map[string]entry.Result{}, darks: map[string]float64{},
		nextSpeak: l.SpeakEvery, nextWarn: l.BeamWarn, nextAlarm: l.BeamAlarm,
	}
}

// setBeamOn sets the cumulative beam-on time and the next timer marks.
func (st *state) setBeamOn(d time.Duration, l Limits) {
	st.beamOn = d
	st.nextSpeak = (d/l.SpeakEvery + 1) * l.SpeakEvery
	st.nextAlarm = (d/l.BeamAlarm + 1) * l.BeamAlarm
	st.nextWarn = st.nextAlarm - l.BeamAlarm + l.BeamWarn
	if st.nextWarn <= d {
		st.nextWarn = st.nextAlarm + l.BeamWarn
	}
}

// rebuild reconstructs the state of session id from its journal records.
func (e *Engine) rebuild(ctx context.Context, id string) (*state, error) {
	envs, err := e.cfg.Journal.Envelopes(ctx, id)
	if err != nil {
		return nil, fmt.Errorf("resume session %s: %w", id, err)
	}
	if len(envs) == 0 {
		return nil, fmt.Errorf("resume session %s: the journal has no records of it", id)
	}
	st := newState(e.cfg.Limits)
	st.session = id
	st.resumed = true
	steps := e.cfg.Procedure.Steps
	var beam float64
	for _, env := range envs {
		switch env.Kind {
		case entry.KindSessionEnd:
			return nil, fmt.Errorf("resume session %s: it has already ended", id)
		case entry.KindSession:
			var s entry.Session
			if err := json.Unmarshal(env.Payload, &s); err == nil && e.cfg.Procedure.Hash != "" && s.ProcedureHash != "" && s.ProcedureHash != e.cfg.Procedure.Hash {
				return nil, fmt.Errorf("resume session %s: it ran procedure %s with a different text (hash %.12s, now %.12s)", id, s.Procedure, s.ProcedureHash, e.cfg.Procedure.Hash)
			}
		case entry.KindStep:
			var s entry.Step
			if err := json.Unmarshal(env.Payload, &s); err != nil {
				return nil, fmt.Errorf("resume session %s: record %d: %w", id, env.Seq, err)
			}
			if s.Index < 1 || s.Index > len(steps) || steps[s.Index-1].ID != s.ID {
				return nil, fmt.Errorf("resume session %s: record %d names step %d %q, which is not in this procedure", id, env.Seq, s.Index, s.ID)
			}
			switch s.State {
			case entry.StepDone, entry.StepSkipped:
				st.done[s.Index] = true
				if steps[s.Index-1].Safety && s.State == entry.StepDone {
					st.checklist = true
				}
			case entry.StepRetake:
				st.done[s.Index] = false
				delete(st.meas, s.ID)
			}
		case entry.KindValue:
			var v entry.Value
			if err := json.Unmarshal(env.Payload, &v); err == nil {
				val := v.Value
				if q, err := units.QuantityOf(v.Unit); err == nil {
					if x, err := units.ToCanonical(q, val, v.Unit); err == nil {
						val = x
					}
				}
				st.values[v.Name] = val
			}
		case entry.KindEvent:
			var ev entry.Event
			if err := json.Unmarshal(env.Payload, &ev); err != nil {
				continue
			}
			if ev.BeamOn > beam {
				beam = ev.BeamOn
			}
			if ev.Name == evMeasured {
				var p posStat
				if err := json.Unmarshal([]byte(ev.Detail), &p); err != nil {
					return nil, fmt.Errorf("resume session %s: record %d: measurement not readable: %w", id, env.Seq, err)
				}
				st.putPos(p)
			}
		case entry.KindResult:
			var r entry.Result
			if err := json.Unmarshal(env.Payload, &r); err == nil && r.Step >= 1 && r.Step <= len(steps) {
				sid := steps[r.Step-1].ID
				if _, ok := st.results[sid]; !ok {
					st.order = append(st.order, sid)
				}
				st.results[sid] = r
			}
		}
	}
	st.setBeamOn(time.Duration(beam*float64(time.Second)), e.cfg.Limits)
	return st, nil
}

// putPos stores an accepted position, replacing an earlier one of the same index.
func (st *state) putPos(p posStat) {
	ps := st.meas[p.Step]
	for len(ps) <= p.Index {
		ps = append(ps, posStat{Index: -1})
	}
	ps[p.Index] = p
	st.meas[p.Step] = ps
	if p.Dark {
		if p.HasL {
			st.darks[Photometer] = p.L
		}
		if p.HasK {
			st.darks[Dosimeter] = p.K
		}
	}
}

// havePos reports whether position i of step id was accepted already.
func (st *state) havePos(id string, i int) bool {
	ps := st.meas[id]
	return i < len(ps) && ps[i].Index == i
}

// finite replaces values JSON cannot carry (an infinite type A from a
// single reading) with 0 and flags it.
func (p *posStat) finite() {
	for _, v := range []*float64{&p.L, &p.LU, &p.K, &p.KU, &p.G, &p.GU, &p.Drift, &p.BL, &p.BK} {
		if math.IsInf(*v, 0) || math.IsNaN(*v) {
			*v = 0
			const flag = "no type A uncertainty: too few readings, or a mean of zero (a meter below its range)"
			if !slices.Contains(p.Flags, flag) {
				p.Flags = append(p.Flags, flag)
			}
		}
	}
}
