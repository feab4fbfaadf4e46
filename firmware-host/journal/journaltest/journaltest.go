// Package journaltest writes demo-like sessions (invented data) into a
// journal for tests of the journal, the sync, the store and the report.
package journaltest

import (
	"context"
	"fmt"
	"time"

	"kermalux/procedures/entry"
)

// Session returns the n-th invented session header (demo data only).
func Session(n int) entry.Session {
	return entry.Session{
		Site: "Tollemby Rise Clinic", Room: fmt.Sprintf("Fluoro %d", 1+n%3),
		IntensifierModel: "Lumora XI-23", IntensifierSerial: fmt.Sprintf("LX23-%04d", 100+n%7),
		Engineer: "Field service engineer", Procedure: "acceptance-rqa5", ProcedureHash: "ab12", BenchHash: "cd34",
	}
}

// Appender is the journal's Append.
type Appender interface {
	Append(ctx context.Context, session string, kind entry.Kind, payload any) (int64, error)
}

// WriteSession appends a demo-like sequence of records to session (steps,
// prompts, acknowledgements, values, beam events, readings, a result),
// calling ack after each acknowledged Append. It ends the session when
// end is true.
func WriteSession(ctx context.Context, j Appender, session string, readings int, end bool, ack func(seq int64, k entry.Kind)) error {
	app := func(k entry.Kind, p any) error {
		seq, err := j.Append(ctx, session, k, p)
		if err != nil {
			return err
		}
		if ack != nil {
			ack(seq, k)
		}
		return nil
	}
	steps := []struct{ id, kind, mode string }{{"kerma-48", "conversion_factor", "48 cm"}, {"uniformity-48", "uniformity", "48 cm"}}
	for i, st := range steps {
		if err := app(entry.KindStep, entry.Step{Index: i + 1, Of: len(steps), ID: st.id, Kind: st.kind, FieldMode: st.mode, State: entry.StepStarted}); err != nil {
			return err
		}
		if err := app(entry.KindPrompt, entry.Prompt{Step: i + 1, Level: "caution", Action: "confirm_checklist", Text: "Everyone in the room wears a lead apron <and> the door is shut?", Asked: true}); err != nil {
			return err
		}
		if err := app(entry.KindAck, entry.Ack{Step: i + 1, Answer: "yes", Text: "checklist", At: time.Date(2026, 3, 4, 10, 0, 0, 0, time.UTC)}); err != nil {
			return err
		}
		if err := app(entry.KindValue, entry.Value{Step: i + 1, Name: "temperature", Value: 21.5, Unit: "°C", Source: "operator"}); err != nil {
			return err
		}
		if err := app(entry.KindEvent, entry.Event{Step: i + 1, Name: "beam_on"}); err != nil {
			return err
		}
		for r := 0; r < readings; r++ {
			v := 0.871 + 0.001*float64(r%5)
			if err := app(entry.KindReading, entry.Reading{Step: i + 1, StepID: st.id, FieldMode: st.mode, Meter: "dosimeter",
				Quantity: "air_kerma_rate", Raw: fmt.Sprintf("MEAS %.4f uGy/s OK", v), RawValue: v, RawUnit: "µGy/s",
				Value: v * 1.013, Unit: "µGy/s", Status: "ok", Calibrated: true,
				Corrections: []entry.Correction{{Name: "k_tp", Factor: 1.013}}, Used: r > 1}); err != nil {
				return err
			}
		}
		if err := app(entry.KindEvent, entry.Event{Step: i + 1, Name: "beam_off", BeamOn: 4.2}); err != nil {
			return err
		}
		if err := app(entry.KindResult, entry.Result{Step: i + 1, Procedure: "acceptance-rqa5", FieldMode: st.mode, Quantity: st.kind,
			Value: 21.3, Unit: "cd·s/(m²·µGy)", StdUnc: 0.6, ExpUnc: 1.2, K: 2, Verdict: "pass", Calibrated: true,
			Budget: []entry.BudgetRow{{Source: "repeatability", Type: "A", RelStdUnc: 0.01}}}); err != nil {
			return err
		}
		if err := app(entry.KindStep, entry.Step{Index: i + 1, Of: len(steps), ID: st.id, Kind: st.kind, State: entry.StepDone}); err != nil {
			return err
		}
	}
	if end {
		return app(entry.KindSessionEnd, entry.SessionEnd{Finished: time.Date(2026, 3, 4, 11, 0, 0, 0, time.UTC), Steps: len(steps), Outcome: "complete"})
	}
	return nil
}

// Records is how many records WriteSession writes (plus the session record
// Begin writes): 1 + 2 steps × (8 + readings) + 1 if ended.
func Records(readings int, end bool) int64 {
	n := int64(1 + 2*(8+readings))
	if end {
		n++
	}
	return n
}
