// Package report turns one session's journal records into the acceptance
// report a medical physicist reads and signs (HTML, PDF, CSV), and one
// intensifier's history into a trend with the projected date at which it
// crosses an action level.
//
// The report is built only from what the journal recorded (entry
// envelopes): nothing is recomputed from the readings except what is
// purely presentational (the luminance map's fraction of centre, the
// radial profile of that map, the corrections summary), so what the
// physicist signs is what the board judged.
package report

import (
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"sort"
	"strings"
	"time"

	"kermalux/calib"
	"kermalux/procedures/entry"
)

// Report is the model of one session, ready to render.
type Report struct {
	Session entry.Session
	// End is the closing record; nil when the session never finished
	// (power cut without resume, aborted before the end record).
	End *entry.SessionEnd
	// Simulated is true when the records say the readings came from the
	// bench simulator: its results are not measurements.
	Simulated bool

	Certificates []Certificate
	Results      []Result
	Readings     []Reading
	Corrections  []CorrectionSummary
	Acks         []Ack
	Values       []Value
	Events       []Event
	Steps        []Step // steps that did not simply run: retakes, skips, aborts, resumes
	StepCount    int    // steps in the procedure (from the step records)
	BeamOn       float64
	Maps         []LuminanceMap
	Review       []string // what needs the physicist's attention, in plain words
	Setups       []Setup  // the bench set-up each prompt asked for, in order
	// Meters are the meters as they identified themselves ("meter_identified"
	// events), the latest of each role, in order of first identification.
	Meters []entry.MeterIdentity
	Trends []Trend // optional: this intensifier's history (see AttachHistory)
	// Unverified lists what is wrong with the records when the report was
	// forced from a source that does not verify (empty: verified). Every
	// page carries the stamp (UnverifiedText).
	Unverified []string
}

// Setup is the bench state one prompt asked for.
type Setup struct {
	Step  int
	Setup map[string]string
}

// Certificate is a calibration certificate used in the session, with its
// standing on the session day.
type Certificate struct {
	entry.CertRef
	DaysToDue int    // days from the session start to the due date (negative: overdue)
	Status    string // "valid", "due soon", "expired", "not valid"
}

// dueSoonDays is when a certificate is reported as due soon (common
// practice: recalibration is booked a month ahead).
const dueSoonDays = 30

// Result is a judged figure of merit as the report shows it.
type Result struct {
	entry.Result
	Seq    int64
	Review string // why it needs review; empty if it does not
}

// Unmeasured reports whether the result could not be measured (verdict
// not_measurable): it has no value, only a reason, and is left out of the
// charts and the trend.
func (r Result) Unmeasured() bool { return r.Verdict == string(calib.NotMeasurable) }

// Shown is the value as printed: with its U, or "not measurable".
func (r Result) Shown() string {
	if r.Unmeasured() {
		return "not measurable"
	}
	return ValueWithUnc(r.Value, r.ExpUnc)
}

// Reading is one journalled reading.
type Reading struct {
	entry.Reading
	Seq int64
}

// CorrectionSummary tells, for one kind of correction, to how many readings
// it was applied and over which range of factors and offsets.
type CorrectionSummary struct {
	Name                 string
	Count                int
	MinFactor, MaxFactor float64
	MinOffset, MaxOffset float64
	Notes                []string // distinct notes, in order of first appearance
}

// Ack is one acknowledgement by the operator, with the prompt it answered.
type Ack struct {
	entry.Ack
	Seq    int64
	Safety bool   // answered a safety prompt (checklist before exposure)
	Level  string // the prompt's level, when the prompt is in the journal
}

// Value is a value entered or confirmed during the session.
type Value struct {
	entry.Value
	Seq  int64
	Wall time.Time
}

// Event is something that happened, with when.
type Event struct {
	entry.Event
	Seq  int64
	Wall time.Time
}

// Step is a step transition worth reporting.
type Step struct {
	entry.Step
	Seq  int64
	Wall time.Time
}

// LuminanceMap is the luminance distribution over the output face for one
// field mode: the mean corrected luminance at each position and its
// fraction of the centre.
type LuminanceMap struct {
	FieldMode string
	Unit      string
	Centre    float64 // mean centre luminance; 0 if no centre reading
	Points    []MapPoint
	Profile   []ProfilePoint // mean fraction of centre per radius
}

// MapPoint is one position of a luminance map.
type MapPoint struct {
	Label    string
	R        float64 // fraction of the output radius
	AngleDeg float64 // counter-clockwise from "right", 90 = "up"
	Placed   bool    // the label could be read as a position
	Mean     float64
	N        int
	Fraction float64 // Mean / centre mean (0 if no centre)
}

// ProfilePoint is the mean fraction of centre at one radius.
type ProfilePoint struct {
	R        float64
	Fraction float64
	Min, Max float64
	N        int // positions at this radius
}

// Build makes the report model from a session's envelopes, in journal
// order. Payloads are decoded by kind; an undecodable payload is an error
// naming the record. Unknown kinds are skipped (later versions may add
// kinds; old workstations still render what they know).
func Build(envs []entry.Envelope) (*Report, error) {
	if len(envs) == 0 {
		return nil, fmt.Errorf("report: no journal records for the session")
	}
	envs = append([]entry.Envelope(nil), envs...)
	sort.SliceStable(envs, func(i, j int) bool { return envs[i].Seq < envs[j].Seq })

	r := &Report{}
	haveSession := false
	prompts := map[int64]entry.Prompt{}
	resultAt := map[string]int{} // step/quantity/field mode → index in r.Results
	corr := map[string]*CorrectionSummary{}
	var corrOrder []string
	for _, env := range envs {
		fail := func(err error) error {
			return fmt.Errorf("report: record seq %d (kind %q) of session %s: payload not understood: %w", env.Seq, env.Kind, env.Session, err)
		}
		switch env.Kind {
		case entry.KindSession:
			if err := json.Unmarshal(env.Payload, &r.Session); err != nil {
				return nil, fail(err)
			}
			haveSession = true
		case entry.KindSessionEnd:
			var e entry.SessionEnd
			if err := json.Unmarshal(env.Payload, &e); err != nil {
				return nil, fail(err)
			}
			r.End = &e
		case entry.KindStep:
			var s entry.Step
			if err := json.Unmarshal(env.Payload, &s); err != nil {
				return nil, fail(err)
			}
			if s.Of > r.StepCount {
				r.StepCount = s.Of
			}
			if s.State != entry.StepStarted && s.State != entry.StepDone {
				r.Steps = append(r.Steps, Step{Step: s, Seq: env.Seq, Wall: env.Wall})
			}
		case entry.KindPrompt:
			var p entry.Prompt
			if err := json.Unmarshal(env.Payload, &p); err != nil {
				return nil, fail(err)
			}
			prompts[env.Seq] = p
			if len(p.Setup) > 0 {
				r.Setups = append(r.Setups, Setup{Step: p.Step, Setup: p.Setup})
			}
		case entry.KindAck:
			var a entry.Ack
			if err := json.Unmarshal(env.Payload, &a); err != nil {
				return nil, fail(err)
			}
			if a.At.IsZero() {
				a.At = env.Wall
			}
			ack := Ack{Ack: a, Seq: env.Seq}
			if p, ok := prompts[a.PromptSeq]; ok {
				ack.Level = p.Level
				ack.Safety = isSafety(p.Level) || isSafety(p.Action)
				if ack.Text == "" {
					ack.Text = p.Text
				}
			}
			r.Acks = append(r.Acks, ack)
		case entry.KindValue:
			var v entry.Value
			if err := json.Unmarshal(env.Payload, &v); err != nil {
				return nil, fail(err)
			}
			if strings.Contains(strings.ToLower(v.Source), "simulat") {
				r.Simulated = true
			}
			r.Values = append(r.Values, Value{Value: v, Seq: env.Seq, Wall: env.Wall})
		case entry.KindReading:
			var rd entry.Reading
			if err := json.Unmarshal(env.Payload, &rd); err != nil {
				return nil, fail(err)
			}
			if rd.Wall.IsZero() {
				rd.Wall = env.Wall
			}
			if hasSimFlag(rd.Flags) {
				r.Simulated = true
			}
			r.Readings = append(r.Readings, Reading{Reading: rd, Seq: env.Seq})
			for _, c := range rd.Corrections {
				s, ok := corr[c.Name]
				if !ok {
					s = &CorrectionSummary{Name: c.Name, MinFactor: c.Factor, MaxFactor: c.Factor, MinOffset: c.Offset, MaxOffset: c.Offset}
					corr[c.Name] = s
					corrOrder = append(corrOrder, c.Name)
				}
				s.Count++
				s.MinFactor, s.MaxFactor = math.Min(s.MinFactor, c.Factor), math.Max(s.MaxFactor, c.Factor)
				s.MinOffset, s.MaxOffset = math.Min(s.MinOffset, c.Offset), math.Max(s.MaxOffset, c.Offset)
				if c.Note != "" && !contains(s.Notes, c.Note) {
					s.Notes = append(s.Notes, c.Note)
				}
			}
		case entry.KindEvent:
			var e entry.Event
			if err := json.Unmarshal(env.Payload, &e); err != nil {
				return nil, fail(err)
			}
			if strings.Contains(strings.ToLower(e.Name), "simulat") {
				r.Simulated = true
			}
			if e.BeamOn > r.BeamOn {
				r.BeamOn = e.BeamOn
			}
			if e.Meter != nil {
				r.addMeter(*e.Meter)
			}
			r.Events = append(r.Events, Event{Event: e, Seq: env.Seq, Wall: env.Wall})
		case entry.KindResult:
			var res entry.Result
			if err := json.Unmarshal(env.Payload, &res); err != nil {
				return nil, fail(err)
			}
			if hasSimFlag(res.Flags) {
				r.Simulated = true
			}
			// A result judged again (a judge step after the compute step,
			// or a retake) supersedes the earlier record of the same step,
			// quantity and field mode; it keeps the earlier one's place.
			key := fmt.Sprintf("%d\x00%s\x00%s", res.Step, res.Quantity, res.FieldMode)
			if i, ok := resultAt[key]; ok {
				r.Results[i] = Result{Result: res, Seq: env.Seq}
				continue
			}
			resultAt[key] = len(r.Results)
			r.Results = append(r.Results, Result{Result: res, Seq: env.Seq})
		}
	}
	if r.Session.Simulated {
		r.Simulated = true
	}
	if !haveSession {
		return nil, fmt.Errorf("report: session %s has no opening session record (seq of first record: %d)", envs[0].Session, envs[0].Seq)
	}
	if r.End != nil && r.End.BeamOn > r.BeamOn {
		r.BeamOn = r.End.BeamOn
	}
	for _, name := range corrOrder {
		r.Corrections = append(r.Corrections, *corr[name])
	}
	for _, c := range r.Session.Certificates {
		r.Certificates = append(r.Certificates, certificate(c, r.Session.Started))
	}
	r.Maps = luminanceMaps(r.Readings)
	r.review()
	return r, nil
}

// addMeter keeps the latest identification of each meter role.
func (r *Report) addMeter(m entry.MeterIdentity) {
	for i := range r.Meters {
		if r.Meters[i].Role == m.Role {
			r.Meters[i] = m
			return
		}
	}
	r.Meters = append(r.Meters, m)
}

func certificate(c entry.CertRef, day time.Time) Certificate {
	out := Certificate{CertRef: c}
	if !c.Due.IsZero() && !day.IsZero() {
		out.DaysToDue = int(math.Floor(c.Due.Sub(day).Hours() / 24))
	}
	switch {
	case !c.Due.IsZero() && !day.IsZero() && c.Due.Before(day):
		out.Status = "expired"
	case !c.Valid:
		out.Status = "not valid"
	case !c.Due.IsZero() && out.DaysToDue <= dueSoonDays:
		out.Status = "due soon"
	default:
		out.Status = "valid"
	}
	return out
}

// review fills Result.Review and Report.Review: only what a physicist
// must look at before signing, in plain words, each thing once. A flag
// that several results share ("tube voltage not read off") is one item
// naming the results; what is information only (no baseline yet, no type
// A uncertainty of a zero dark reading, a limit the value is near, said
// as "marginal") is left to the results table.
func (r *Report) review() {
	per, list := r.reviewLists(func(s string) string { return s })
	for i := range r.Results {
		r.Results[i].Review = per[i]
	}
	r.Review = list
}

// reviewLists composes the review: each result's own reasons (per, in
// the order of r.Results) and the list a physicist reads, every text
// through tr (the report's language at rendering; the identity for the
// journal's English).
func (r *Report) reviewLists(tr func(string) string) (per, list []string) {
	type shared struct {
		text    string
		results []string
	}
	name := func(res entry.Result) string {
		n := tr(resultWords(res))
		if res.FieldMode != "" {
			n += " (" + res.FieldMode + ")"
		}
		return n
	}
	var flagOrder []string
	flags := map[string]*shared{}
	per = make([]string, len(r.Results))
	for i := range r.Results {
		res := &r.Results[i]
		var why []string
		switch strings.ToLower(res.Verdict) {
		case "fail":
			why = append(why, fmt.Sprintf(tr("outside the %s"), tr(orDash(res.DecidedBy))))
		case "pass", "info":
		default:
			why = append(why, fmt.Sprintf(tr("verdict %q"), tr(res.Verdict)))
		}
		if !res.Calibrated {
			why = append(why, tr("not calibrated"))
		}
		for _, f := range res.Flags {
			text, ok := reviewFlag(f)
			if !ok {
				continue
			}
			text = tr(text)
			if !contains(why, text) {
				why = append(why, text)
			}
			sh, seen := flags[text]
			if !seen {
				sh = &shared{text: text}
				flags[text] = sh
				flagOrder = append(flagOrder, text)
			}
			sh.results = append(sh.results, name(res.Result))
		}
		if len(why) > 0 {
			per[i] = strings.Join(why, "; ")
		}
		// Fails and uncalibrated results are named one by one.
		var own []string
		for _, w := range why {
			if _, isShared := flags[w]; !isShared {
				own = append(own, w)
			}
		}
		if len(own) > 0 {
			list = append(list, fmt.Sprintf(tr("%s: %s"), name(res.Result), strings.Join(own, "; ")))
		}
	}
	for _, text := range flagOrder {
		sh := flags[text]
		list = append(list, fmt.Sprintf(tr("%s (%s)"), capital(sh.text), strings.Join(sh.results, ", ")))
	}
	for _, c := range r.Certificates {
		if c.Status == "expired" || c.Status == "not valid" {
			list = append(list, fmt.Sprintf(tr("Certificate %s (%s %s) was %s on the session day"), c.ID, c.Model, c.Serial, tr(c.Status)))
		}
	}
	counts := map[string]int{}
	for _, e := range r.Events {
		counts[e.Name]++
	}
	for _, ev := range []string{"beam_alarm", "kerma_out_of_range", "beam_refused", "certificate_problem", "aborted", "meter_lost", "reading_error"} {
		n := counts[ev]
		switch {
		case n == 1:
			list = append(list, fmt.Sprintf(tr("%s: %d time"), tr(capital(eventWords(ev))), n))
		case n > 1:
			list = append(list, fmt.Sprintf(tr("%s: %d times"), tr(capital(eventWords(ev))), n))
		}
	}
	for _, s := range r.Steps {
		if (s.State == entry.StepSkipped || s.State == entry.StepAborted) && !skippedByDesign(s.Reason) {
			if s.Reason == "" {
				list = append(list, fmt.Sprintf(tr("Step %d was %s"), s.Index, tr(string(s.State))))
			} else {
				list = append(list, fmt.Sprintf(tr("Step %d was %s: %s"), s.Index, tr(string(s.State)), tr(s.Reason)))
			}
		}
	}
	switch {
	case r.End == nil:
		list = append(list, tr("The session has no end record: it was interrupted and not finished"))
	case r.End.Outcome != "" && r.End.Outcome != "complete":
		list = append(list, fmt.Sprintf(tr("The session ended %q"), r.End.Outcome))
	}
	if r.Simulated {
		list = append(list, tr("Readings came from the bench simulator: the results are not measurements"))
	}
	return per, list
}

// reviewShown is the review list as a rendering in w's language shows
// it: what was put before the session's own review (a verification
// failure) translated as a whole, then the review composed in w's
// language.
func (r *Report) reviewShown(w *words) []string {
	if w == nil {
		return r.Review
	}
	_, en := r.reviewLists(func(s string) string { return s })
	extra := len(r.Review) - len(en)
	if extra < 0 || !slices.Equal(r.Review[extra:], en) {
		out := make([]string, len(r.Review))
		for i, s := range r.Review {
			out[i] = w.text(s)
		}
		return out
	}
	var out []string
	for _, s := range r.Review[:extra] {
		out = append(out, w.text(s))
	}
	_, list := r.reviewLists(w.text)
	return append(out, list...)
}

// reviewFlag says a result flag in the words of the review list, and
// whether it needs a person at all.
func reviewFlag(f string) (string, bool) {
	l := strings.ToLower(f)
	switch {
	case strings.HasPrefix(l, "no baseline"),
		strings.HasPrefix(l, "no type a uncertainty"),
		strings.Contains(l, "lies within the expanded uncertainty"),
		strings.HasPrefix(l, "would be "):
		return "", false
	case l == "marginal":
		return "a limit lies within the expanded uncertainty: the verdict could go either way", true
	}
	return f, true
}

// skippedByDesign recognises steps the procedure skips on purpose (the
// scaling of the reference field mode against itself).
func skippedByDesign(reason string) bool {
	return strings.Contains(reason, "reference field mode itself")
}

// Verdict sums the session up in one word: "fail" if any result fails,
// "review" if anything else needs review, "pass" otherwise, "incomplete"
// without an end record.
func (r *Report) Verdict() string {
	for _, res := range r.Results {
		if strings.EqualFold(res.Verdict, "fail") {
			return "fail"
		}
	}
	if r.End == nil || (r.End.Outcome != "" && r.End.Outcome != "complete") {
		return "incomplete"
	}
	if len(r.Review) > 0 {
		return "review"
	}
	return "pass"
}

// Count returns how many results have the verdict v.
func (r *Report) Count(v string) int {
	n := 0
	for _, res := range r.Results {
		if strings.EqualFold(res.Verdict, v) {
			n++
		}
	}
	return n
}

// SafetyAcks returns the acknowledgements of safety prompts.
func (r *Report) SafetyAcks() []Ack {
	var out []Ack
	for _, a := range r.Acks {
		if a.Safety {
			out = append(out, a)
		}
	}
	return out
}

// Finished is the end time, or the last reading's time for an unfinished
// session.
func (r *Report) Finished() time.Time {
	if r.End != nil {
		return r.End.Finished
	}
	var t time.Time
	for _, rd := range r.Readings {
		if rd.Wall.After(t) {
			t = rd.Wall
		}
	}
	return t
}

// isSafety recognises a safety prompt by its level or action: the engine
// asks checklist lines with the action "check".
func isSafety(s string) bool {
	s = strings.ToLower(s)
	return s == "check" || strings.Contains(s, "safety") || strings.Contains(s, "checklist")
}

func hasSimFlag(flags []string) bool {
	for _, f := range flags {
		if strings.Contains(strings.ToLower(f), "simulat") {
			return true
		}
	}
	return false
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

func plural(n int) string {
	if n == 1 {
		return ""
	}
	return "s"
}

func orDash(s string) string {
	if s == "" {
		return "—"
	}
	return s
}

// eventWords says an event name in plain words.
func eventWords(name string) string {
	switch name {
	case "beam_on":
		return "beam on"
	case "beam_off":
		return "beam off"
	case "meter_lost":
		return "a meter was lost"
	case "meter_back":
		return "the meter came back"
	case "beam_alarm":
		return "the cumulative beam-on alarm sounded"
	case "beam_warning":
		return "the cumulative beam-on warning sounded"
	case "kerma_out_of_range":
		return "the air kerma rate was far out of range"
	case "samples_discarded":
		return "samples were discarded"
	case "paused":
		return "the session was paused"
	case "aborted":
		return "the session was aborted"
	case "beam_refused":
		return "an exposure was refused"
	case "beam_time":
		return "beam-on time announced"
	case "measurement_done":
		return "measurement done"
	case "reading_error":
		return "a reading could not be used"
	case "certificate_problem":
		return "a certificate problem"
	}
	return strings.ReplaceAll(name, "_", " ")
}

// resultWords is a result's quantity in words, with its meter for a
// one-meter figure ("Photometer dark level", as the board says it):
// a session's two dark levels and two stabilities are told apart by name.
func resultWords(res entry.Result) string {
	q := quantityWords(res.Quantity)
	switch res.Meter {
	case "dosimeter":
		return "Dosimeter " + strings.ToLower(q)
	case "photometer":
		return "Photometer " + strings.ToLower(q)
	}
	return q
}

// Name is the result's quantity in words with its meter (resultWords).
func (r Result) Name() string { return resultWords(r.Result) }

// quantityWords names a result quantity for people.
func quantityWords(q string) string {
	switch q {
	case "conversion_factor":
		return "Conversion factor"
	case "non_uniformity":
		return "Luminance non-uniformity"
	case "contrast_ratio":
		return "Contrast ratio"
	case "input_kerma_rate":
		return "Input air kerma rate"
	case "kerma_rate_scaling", "kerma_mode_scaling": // the older name, in journals of earlier releases
		return "Air kerma rate mode scaling"
	case "edge_centre_ratio":
		return "Edge to centre luminance"
	}
	s := strings.ReplaceAll(q, "_", " ")
	if s == "" {
		return "Result"
	}
	return strings.ToUpper(s[:1]) + s[1:]
}

// resultName is a result's name in w's language (nil: English), with its
// field mode: "Input air kerma rate (32cm)".
func (w *words) resultName(res entry.Result) string {
	n := w.text(resultWords(res))
	if res.FieldMode != "" {
		n += " (" + res.FieldMode + ")"
	}
	return n
}

// Exposure is one beam-on interval, paired from beam_on and beam_off events.
type Exposure struct {
	Step       int
	On, Off    time.Time
	Duration   float64 // seconds of beam-on in this exposure
	Cumulative float64 // cumulative beam-on seconds at its end
	Open       bool    // no beam_off was recorded
}

// Exposures pairs the beam_on and beam_off events into exposures.
func (r *Report) Exposures() []Exposure {
	var out []Exposure
	var cur *Exposure
	for _, e := range r.Events {
		switch e.Name {
		case "beam_on":
			if cur != nil {
				out = append(out, *cur)
			}
			cur = &Exposure{Step: e.Step, On: e.Wall, Cumulative: e.BeamOn, Open: true}
		case "beam_off":
			if cur == nil {
				continue
			}
			cur.Off, cur.Open = e.Wall, false
			cur.Duration = e.BeamOn - cur.Cumulative
			cur.Cumulative = e.BeamOn
			out = append(out, *cur)
			cur = nil
		}
	}
	if cur != nil {
		out = append(out, *cur)
	}
	return out
}

// ReadingGroup sums up the readings of one meter in one step at one
// position: how many, how many entered the result, and the corrected
// values of those that did.
type ReadingGroup struct {
	Step                int
	StepID              string
	FieldMode, Position string
	Meter, Quantity     string
	Unit                string
	N, Used             int
	NotOK               int // readings whose status was not "ok"
	Uncalibrated        int
	Mean, Min, Max      float64 // of the used readings' corrected values
	First, Last         time.Time
	Corrections         []string // names, in the order applied
	Readings            []Reading
}

// ReadingGroups groups the readings by step, meter and position, in the
// order they were taken.
func (r *Report) ReadingGroups() []ReadingGroup {
	var out []ReadingGroup
	at := map[string]int{}
	for _, rd := range r.Readings {
		key := fmt.Sprintf("%d\x00%s\x00%s\x00%s\x00%s", rd.Step, rd.StepID, rd.Meter, rd.Position, rd.FieldMode)
		i, ok := at[key]
		if !ok {
			i = len(out)
			at[key] = i
			out = append(out, ReadingGroup{Step: rd.Step, StepID: rd.StepID, FieldMode: rd.FieldMode, Position: rd.Position,
				Meter: rd.Meter, Quantity: rd.Quantity, Unit: rd.Unit, First: rd.Wall, Min: math.Inf(1), Max: math.Inf(-1)})
		}
		g := &out[i]
		g.N++
		g.Last = rd.Wall
		if rd.Status != "ok" && rd.Status != "" {
			g.NotOK++
		}
		if !rd.Calibrated {
			g.Uncalibrated++
		}
		for _, c := range rd.Corrections {
			if !contains(g.Corrections, c.Name) {
				g.Corrections = append(g.Corrections, c.Name)
			}
		}
		if rd.Used {
			g.Used++
			g.Mean += rd.Value
			g.Min, g.Max = math.Min(g.Min, rd.Value), math.Max(g.Max, rd.Value)
		}
		g.Readings = append(g.Readings, rd)
	}
	for i := range out {
		if out[i].Used > 0 {
			out[i].Mean /= float64(out[i].Used)
		} else {
			out[i].Min, out[i].Max = 0, 0
		}
	}
	return out
}
