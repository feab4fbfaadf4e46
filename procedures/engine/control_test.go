package engine

import (
	"context"
	"errors"
	"strings"
	"testing"
	"time"

	"kermalux/drivers"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// A long press at the prompt after a measurement retakes that
// measurement; the result is computed from the retaken one only.
func TestRetakeLastStep(t *testing.T) {
	steps := cfSteps()
	// An instruction after the measurement, where the engineer long-presses once.
	steps = append(steps[:6], append([]Step{{ID: "check", Kind: Prepare, Text: "Check the photometer bracket. Press when done."}}, steps[6:]...)...)
	r := newRig(steps)
	pressed := false
	r.reply = func(p panel.Prompt) (panel.Response, bool) {
		if p.StepID == "check" && !pressed {
			pressed = true
			return panel.Response{Answer: panel.Retake}, true
		}
		return panel.Response{}, false
	}
	sum, err := r.run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if r.phys.beamOns != 2 {
		t.Errorf("%d beam-ons, want 2", r.phys.beamOns)
	}
	n := 0
	for _, s := range records[entry.Step](r.jr, sum.Session, entry.KindStep) {
		if s.ID == "cf@32cm" && s.State == entry.StepRetake && s.Reason == "operator asked to retake" {
			n++
		}
	}
	if n != 1 {
		t.Errorf("%d operator retakes journalled", n)
	}
	if len(sum.Results) != 1 || sum.Outcome != "complete" {
		t.Errorf("outcome %s, %d results", sum.Outcome, len(sum.Results))
	}
}

// Pause leaves the session unfinished (resumable); abort ends it. A
// pause gesture brings the pause menu, where the pause gesture again
// stops.
func TestPauseAndAbort(t *testing.T) {
	for _, c := range []struct {
		answer  panel.Answer
		want    error
		outcome string
		ended   bool
	}{{panel.Pause, ErrPaused, "paused", false}, {panel.Abort, ErrAborted, "aborted", true}} {
		r := newRig(cfSteps())
		r.reply = func(p panel.Prompt) (panel.Response, bool) {
			if p.Action == panel.ActValue || p.Action == panel.ActMenu {
				return panel.Response{Answer: c.answer}, true
			}
			return panel.Response{}, false
		}
		sum, err := r.run(context.Background())
		if !errors.Is(err, c.want) || sum.Outcome != c.outcome {
			t.Errorf("%s: err %v, outcome %s", c.answer, err, sum.Outcome)
		}
		if r.jr.ended[sum.Session] != c.ended {
			t.Errorf("%s: session ended = %v", c.answer, r.jr.ended[sum.Session])
		}
	}
}

// An expired certificate is said aloud at the start, and a reading's
// flags reach the result.
func TestCertificateProblemsSaid(t *testing.T) {
	r := newRig(cfSteps())
	r.cfg.CertProblems = []string{"The dosimeter certificate NRML-25-0112 expired on 4 March 2025."}
	sum, err := r.run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	warned := false
	for _, m := range r.pan.Messages() {
		if m.Level == panel.Warn && said(r.pan, "expired on 4 March 2025") {
			warned = true
		}
	}
	if !warned || len(events(r.jr, sum.Session, evCertificate)) != 1 {
		t.Error("certificate problem not said and journalled")
	}
	if sum.Results[0].Calibrated {
		t.Error("result marked calibrated")
	}
}

// A value asked in another unit (pressure in hPa) is offered from the
// bench default converted (101.3 kPa = 1013 hPa, 1 hPa = 100 Pa, NIST SP
// 811) and kept canonical for the corrections.
func TestValueUnits(t *testing.T) {
	steps := cfSteps()
	steps[3].Value = &ValueRequest{Name: "pressure", Unit: "hPa", Min: 700, Max: 1100}
	r := newRig(steps)
	var offered float64
	r.reply = func(p panel.Prompt) (panel.Response, bool) {
		if p.Value != nil && p.Value.Name == "pressure" {
			offered = p.Value.Default
		}
		return panel.Response{}, false
	}
	e, err := New(r.cfg)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.Run(context.Background()); err != nil {
		t.Fatal(err)
	}
	if offered < 1012.99 || offered > 1013.01 {
		t.Errorf("offered %g hPa", offered)
	}
	if p := e.st.values["pressure"]; p < 101.299 || p > 101.301 {
		t.Errorf("kept %g, want 101.3 kPa", p)
	}
}

// The closing summary (each fail, what else needs review, the total
// beam-on time) is said, and journalled before the session's end record,
// which the journal closes the session with.
func TestClosingSummarySaidBeforeEnd(t *testing.T) {
	steps := cfSteps()
	// A limit the fake bench's G of 150 cannot meet: one fail.
	steps[len(steps)-1].Judge.Limits = []JudgeLimit{{Kind: "min", Value: 1000}}
	r := newRig(steps)
	calibrated := correctorFunc(func(rd drivers.Reading, _ Conditions) Corrected {
		return Corrected{Value: rd.Value, Calibrated: true, Certificate: "test"}
	})
	r.cfg.Correctors = map[string]Corrector{Dosimeter: calibrated, Photometer: calibrated}
	sum, err := r.run(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	var last string
	for _, m := range r.pan.Messages() {
		last = m.Text
	}
	for _, want := range []string{"All steps done.", "One fail: Conversion factor, 32cm field", "Beam-on time"} {
		if !strings.Contains(last, want) {
			t.Errorf("last message %q lacks %q", last, want)
		}
	}
	env := r.jr.sessions[sum.Session]
	if n := len(env); n < 2 || env[n-1].Kind != entry.KindSessionEnd || env[n-2].Kind != entry.KindPrompt ||
		!strings.Contains(string(env[n-2].Payload), "All steps done") {
		t.Errorf("the summary is not the record before the session's end")
	}
}

// correctorFunc adapts a function to Corrector (tests only).
type correctorFunc func(r drivers.Reading, c Conditions) Corrected

func (f correctorFunc) Correct(r drivers.Reading, c Conditions) Corrected { return f(r, c) }

// TestClosingSummaryNamesWhy: the closing summary says why results need
// review in the engineer's terms: a figure that could not be measured is
// "not measurable", not "not calibrated" (it was said so of eight
// not-measurable figures).
func TestClosingSummaryNamesWhy(t *testing.T) {
	nm := entry.Result{Quantity: "contrast_ratio", Verdict: "not_measurable"}
	unc := entry.Result{Quantity: "conversion_factor", FieldMode: "25cm", Verdict: "pass"}
	ok := entry.Result{Quantity: "conversion_factor", FieldMode: "17cm", Verdict: "pass", Calibrated: true}
	for _, c := range []struct {
		results []entry.Result
		want    string
	}{
		{[]entry.Result{nm, ok}, "One result needs review: not measurable."},
		{[]entry.Result{unc, ok}, "One result needs review: not calibrated."},
		{[]entry.Result{nm, nm, unc}, "Three results need review: not measurable, not calibrated."},
		{[]entry.Result{ok}, "No results need review."},
	} {
		sum := Summary{Results: c.results}
		for _, r := range c.results {
			if needsReview(r) {
				sum.Review++
			}
		}
		if got := (&Engine{}).closingSummary(sum, 90*time.Second); !strings.Contains(got, c.want) {
			t.Errorf("%q, want %q in it", got, c.want)
		}
	}
}
