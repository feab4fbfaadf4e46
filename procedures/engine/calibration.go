package engine

import (
	"context"
	"errors"
	"fmt"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"

	"kermalux/calib"
	"kermalux/drivers"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// evIdentified is the event that records what a meter said about itself.
const evIdentified = "meter_identified"

// evMeterChanged: a reconnected link carried another meter.
const evMeterChanged = "meter_changed"

// IdentityBinder is a Corrector whose calibration belongs to one meter.
// At the start of a session (and of a resumed one) the engine asks each
// meter who it is and hands the answer to its corrector, which returns the
// corrector to use from then on and, when its certificate is not that
// meter's, the sentence that says so (spoken before the first exposure).
type IdentityBinder interface {
	BindIdentity(id *drivers.Identity) (Corrector, string)
}

// DarkLevel is a meter's beam-off level as the meter read it: the mean,
// the experimental standard deviation and the count of its readings before
// any correction, with its display resolution in the same scale.
type DarkLevel struct {
	Mean, SD   float64
	N          int
	Resolution float64 // 0: not known
	Note       string  // where it was taken ("at position up 0.9 r")
	// Unknown: the meter read under range and its range floor is not
	// known, so the dark cannot be subtracted.
	Unknown bool
}

// identify asks every meter who it is, journals the answer (maker, model,
// serial, firmware) and binds each corrector to it. Problems (a meter that
// does not answer, a certificate of another meter) are returned as
// sentences to say before the first exposure. A journal write that fails
// is returned: the session must not go on without its record of who was
// measured.
func (e *Engine) identify(ctx context.Context) ([]string, error) {
	roles := make([]string, 0, len(e.cfg.Meters))
	for role, m := range e.cfg.Meters {
		if m != nil {
			roles = append(roles, role)
		}
	}
	sort.Strings(roles)
	bound := make(map[string]Corrector, len(e.cfg.Correctors))
	for k, v := range e.cfg.Correctors {
		bound[k] = v
	}
	var problems []string
	for _, role := range roles {
		rec := entry.MeterIdentity{Role: role}
		var id *drivers.Identity
		if idf, ok := e.cfg.Meters[role].(drivers.Identifier); ok {
			got, err := idf.Identify(ctx)
			if err != nil {
				rec.Error = err.Error()
				problems = append(problems, fmt.Sprintf("The %s did not say who it is: %v.", role, err))
			} else {
				id = &got
				rec.Maker, rec.Model, rec.Serial, rec.Firmware, rec.Raw = got.Maker, got.Model, got.Serial, got.Firmware, got.Raw
			}
		} else {
			rec.Error = "this meter cannot identify itself"
		}
		if b, ok := bound[role].(IdentityBinder); ok {
			c, problem := b.BindIdentity(id)
			bound[role] = c
			rec.CertificateApplies = problem == ""
			if problem != "" {
				rec.Reason = problem
				problems = append(problems, problem)
			}
		}
		if err := e.journal(ctx, entry.KindEvent, entry.Event{Name: evIdentified, Detail: identityWords(role, rec), Meter: &rec, BeamOn: e.st.beamOn.Seconds()}); err != nil {
			return nil, fmt.Errorf("record the %s's identity: %w", role, err)
		}
	}
	e.cfg.Correctors = bound
	return problems, nil
}

func identityWords(role string, r entry.MeterIdentity) string {
	if r.Error != "" {
		return role + ": not identified: " + r.Error
	}
	return fmt.Sprintf("%s: %s %s, serial %s, firmware %s", role, r.Maker, r.Model, r.Serial, r.Firmware)
}

// BindIdentity implements IdentityBinder: the certificate applies only
// when the meter reported the model and serial it names
// (calib.Certificate.AppliesTo); otherwise every reading is flagged not
// calibrated with the reason, which is also returned to be spoken.
func (cc CalibCorrector) BindIdentity(id *drivers.Identity) (Corrector, string) {
	cc.Meter = id
	if cc.Cert == nil {
		return cc, ""
	}
	var why error
	if id == nil {
		why = fmt.Errorf("the meter was not identified, so certificate %s cannot be confirmed as its own", cc.Cert.Number)
	} else {
		why = cc.Cert.AppliesTo(*id)
	}
	if why == nil {
		return cc, ""
	}
	return cc, fmt.Sprintf("The %s certificate does not apply: %v. Its readings will not be calibrated.", quantityMeter(cc.Cert), why)
}

func quantityMeter(c *calib.Certificate) string {
	if c.ForDosimeter() {
		return Dosimeter
	}
	return Photometer
}

// changedError: the meter on a role's link is not the one identified at
// the start (drivers.ErrMeterChanged).
type changedError struct {
	role string
	err  error
}

func (c *changedError) Error() string { return c.role + ": " + c.err.Error() }
func (c *changedError) Unwrap() error { return c.err }

// meterChanged stops the step when another meter came up on a role's link:
// the beam is released first (waiting for the other meter to show it
// off, or for a press when the changed meter was the beam's signal), the
// reason is journalled and said, and the session stops so that nothing is
// read under the first meter's identity or certificate. A resumed session
// identifies the meters again.
func (e *Engine) meterChanged(ctx context.Context, a *attempt, ch *changedError) error {
	_ = e.journal(ctx, entry.KindEvent, entry.Event{Step: a.idx, Name: evMeterChanged, Detail: ch.Error(), BeamOn: e.st.beamOn.Seconds()})
	_ = e.cfg.Panel.Indicate(ctx, panel.Fault)
	name := roleName(ch.role)
	// The changed meter no longer tells when the beam is off.
	delete(a.tracks, ch.role)
	a.roles = slices.DeleteFunc(slices.Clone(a.roles), func(r string) bool { return r == ch.role })
	if a.beamOn || a.prompted {
		if a.anyAbove() {
			if err := e.release(ctx, a, panel.Warn, "Release the beam."); err != nil {
				return err
			}
		} else {
			if err := e.say(ctx, a.idx, panel.Message{Text: "Release the beam now.", Level: panel.Warn, Action: panel.ActBeamOff}); err != nil {
				return err
			}
			if _, err := e.ask(ctx, panel.Prompt{Message: panel.Message{Text: "Press the switch when the beam is off.", Level: panel.Warn, Action: panel.ActAcknowledge}, Step: a.idx, StepID: a.step.ID}); err != nil {
				return err
			}
			a.beamOn = false
		}
	}
	msg := fmt.Sprintf("%s changed: the meter on its cable is not the one identified at the start. The step is stopped. Reconnect the first meter and resume the session.", name)
	if err := e.say(ctx, a.idx, panel.Message{Text: msg, Level: panel.Alarm}); err != nil {
		return err
	}
	return fmt.Errorf("step %d (%s): %w", a.idx, a.step.ID, ch)
}

// calibStat is what a position keeps besides its means for calibration:
// each role's accepted readings in the meter's own scale, the type B
// components of its corrected mean, and which dark was subtracted. It is
// embedded in positionStats and journalled with it.
type calibStat struct {
	Raw      map[string]rawStat `json:"raw,omitempty"`
	TypeB    map[string][]typeB `json:"type_b,omitempty"`
	DarkFrom string             `json:"dark_from,omitempty"` // the position label whose own dark was subtracted; "" the meter's latest
}

// rawStat summarises a role's readings as the meter gave them.
type rawStat struct {
	Mean       float64 `json:"mean"`
	SD         float64 `json:"sd"`
	N          int     `json:"n"`
	Resolution float64 `json:"resolution,omitempty"`
	Under      int     `json:"under_range,omitempty"`        // readings below the meter's range
	Printed    bool    `json:"resolution_printed,omitempty"` // Resolution read from the printed digits, not a certificate
	Floor      float64 `json:"floor,omitempty"`              // the meter's range floor, own scale; 0 unknown
	Scale      float64 `json:"scale,omitempty"`              // corrected = raw × Scale (+ offsets); 0 unknown
}

// typeB is a calib.Component as journalled.
type typeB struct {
	Source      string  `json:"source"`
	Rel         float64 `json:"rel,omitempty"`
	Abs         float64 `json:"abs,omitempty"`
	DoF         float64 `json:"dof,omitempty"`
	Calibration bool    `json:"calibration,omitempty"`
}

// finishStat fills the calibration part of an accepted position from the
// readings the attempt holds (those that enter the result).
func (e *Engine) finishStat(p *positionStats, a *attempt) {
	byRole := map[string][]unconfirmedReading{}
	for _, h := range a.unconfirmed {
		if a.inStep[h.role] {
			byRole[h.role] = append(byRole[h.role], h)
		}
	}
	p.Raw, p.TypeB = map[string]rawStat{}, map[string][]typeB{}
	for role, hs := range byRole {
		var r calib.Running
		var st rawStat
		var cs []calib.Corrected
		printed := 0.0 // the finest step the meter printed, own scale
		for _, h := range hs {
			st.Floor = math.Max(st.Floor, h.c.Floor)
			if h.c.Scale > 0 {
				st.Scale = h.c.Scale
			}
			switch {
			case h.r.Status == drivers.StatusUnderRange:
				st.Under++
			case h.r.Usable():
				r.Add(h.r.Value)
				st.Resolution = math.Max(st.Resolution, h.c.Resolution)
				if p := printedStep(h.r); p > 0 && (printed == 0 || p < printed) {
					printed = p
				}
				cs = append(cs, calib.Corrected{Value: h.c.Value, TypeB: h.c.TypeB, Calibrated: true})
			}
		}
		if st.Resolution == 0 {
			// No certificate states it: the finest step of the printed
			// numbers is the display's resolution (a number that ends in a
			// zero shows a coarser step, so the smallest over the readings
			// is taken).
			st.Resolution, st.Printed = printed, printed > 0
		}
		s := r.Summary()
		st.Mean, st.SD, st.N = s.Mean, s.SD, s.N
		p.Raw[role] = st
		for _, b := range calib.Collect(role, "", cs).TypeB {
			p.TypeB[role] = append(p.TypeB[role], typeB{Source: b.Source, Rel: b.Rel, Abs: b.Abs, DoF: b.DoF, Calibration: b.Calibration})
		}
	}
	if a.spec.Beam && a.label != "" {
		if _, ok := e.st.darks[darkKey(Photometer, a.label)]; ok {
			p.DarkFrom = a.label
		}
	}
}

func darkKey(role, label string) string {
	if label == "" {
		return role
	}
	return role + "@" + label
}

// darkFor is the dark to subtract from a reading of role at a position:
// the one taken at that position when there is one, else the meter's
// latest.
func (st *state) darkFor(role, label string) (DarkLevel, bool) {
	if d, ok := st.darks[darkKey(role, label)]; ok && label != "" {
		return d, true
	}
	d, ok := st.darks[role]
	return d, ok
}

// putDark keeps the dark levels of an accepted beam-off position: by role,
// and by role and position label when it has one. A position journalled
// by an earlier release has no raw summary: its corrected mean is used,
// as that release did.
func (st *state) putDark(p positionStats) {
	for _, role := range []string{Photometer, Dosimeter} {
		var d DarkLevel
		if r, ok := p.Raw[role]; ok && r.Under > 0 {
			// Under range: the dark lies somewhere between 0 and the
			// floor; taken as its middle with a rectangular uncertainty
			// of that width (JCGM 100:2008 4.3.7), which is what a
			// display whose only step is the floor gives (δ/√12).
			d = DarkLevel{Mean: r.Floor / 2, N: 1, Resolution: r.Floor, Note: fmt.Sprintf("under range: half the range floor %.4g", r.Floor)}
			if !(r.Floor > 0) {
				d = DarkLevel{Unknown: true, Note: "under range, range floor not known"}
			}
		} else if r, ok := p.Raw[role]; ok && r.N > 0 {
			d = DarkLevel{Mean: r.Mean, SD: r.SD, N: r.N, Resolution: r.Resolution}
		} else if m, ok := p.meter(role); ok {
			d = DarkLevel{Mean: m.Mean, N: m.N, Note: "dark recorded as corrected (older journal)"}
		} else {
			continue
		}
		if p.Label != "" {
			d.Note = "taken at position " + p.Label
			st.darks[darkKey(role, p.Label)] = d
		}
		st.darks[role] = d
	}
}

// parts returns the type B components of role's corrected mean at a
// position; positions from older journals carry one relative value, taken
// as the calibration's.
func (p positionStats) parts(role string, rel float64, src string) []calib.Component {
	if bs, ok := p.TypeB[role]; ok {
		out := make([]calib.Component, len(bs))
		for i, b := range bs {
			out[i] = calib.Component{Source: b.Source, Rel: b.Rel, Abs: b.Abs, DoF: b.DoF, Calibration: b.Calibration}
		}
		return out
	}
	return relB(src, rel)
}

// isMeterChanged wraps a read error that says another meter is on the
// link; nil for any other error.
func isMeterChanged(role string, err error) *changedError {
	if errors.Is(err, drivers.ErrMeterChanged) {
		return &changedError{role: role, err: err}
	}
	return nil
}

// modelledDark is a position's dark correction from the centre's dark.
type modelledDark struct {
	calib.Component         // its uncertainty, corrected scale
	shift           float64 // added to the position's corrected mean
}

// positionDarks returns, for each luminance position of a uniformity map
// that had the meter's (centre) dark subtracted rather than its own, the
// change calib.PositionDark makes to it: the centre dark was subtracted,
// the model's D_pos is used instead, so N·(D − D_pos) is added to the
// corrected mean, with N·u as a type B component (not the calibration's:
// it does not cancel in the ratio). Positions with their own dark, and
// the centre, are left as they are.
func (e *Engine) positionDarks(ps []positionStats) map[int]modelledDark {
	d, ok := e.st.darks[Photometer]
	if !ok || d.Unknown || d.Mean == 0 {
		return nil
	}
	centre := -1
	for i, p := range ps {
		if p.Radius == 0 && centre < 0 {
			centre = i
		}
	}
	if centre < 0 {
		return nil
	}
	rc, ok := ps[centre].Raw[Photometer]
	if !ok || rc.N == 0 {
		return nil
	}
	out := map[int]modelledDark{}
	for i, p := range ps {
		r, ok := p.Raw[Photometer]
		if i == centre || p.DarkFrom != "" || !ok || r.N == 0 || !(r.Scale > 0) {
			continue
		}
		dp, u := calib.PositionDark(d.Mean, r.Mean, rc.Mean)
		out[i] = modelledDark{
			Component: calib.Component{Source: "dark at this position, modelled from the centre's", Abs: r.Scale * u},
			shift:     r.Scale * (d.Mean - dp),
		}
	}
	return out
}

// printedStep is the step of the last digit the meter printed, in the
// reading's canonical unit: "0.03" cd/m² gives 0.01 cd/m²; a value printed
// in foot-lamberts is converted with the reading's own ratio of canonical
// to printed value. 0 when it cannot be told.
func printedStep(r drivers.Reading) float64 {
	if r.RawValue == 0 || r.Value == 0 || math.IsNaN(r.RawValue) || math.IsInf(r.RawValue, 0) {
		return 0
	}
	s := strconv.FormatFloat(math.Abs(r.RawValue), 'f', -1, 64)
	dec := 0
	if i := strings.IndexByte(s, '.'); i >= 0 {
		dec = len(s) - i - 1
	}
	return math.Pow(10, -float64(dec)) * math.Abs(r.Value/r.RawValue)
}
