package engine

import (
	"fmt"
	"strings"
	"testing"
	"time"

	"kermalux/calib"
	"kermalux/firmware-host/panel/scripted"
	"kermalux/firmware-host/panel/speech"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

const room2 = "../../testdata/scenarios/tollemby-rise-room2.yaml"

var room2Values = map[string]float64{"temperature": 22, "pressure": 101.3, "lead_disk_diameter": 32}

// A dark (beam-off) reading waits for a press, so its prompt says so and
// never tells the engineer to wait: an engineer who waits as told would
// wait for ever.
func TestDarkReadingsAskForAPress(t *testing.T) {
	v := runBuiltinOnSimulator(t, room2, "acceptance", room2Values)
	n := 0
	for _, p := range v.pan.Prompts() {
		low := strings.ToLower(p.Text)
		if strings.Contains(low, "wait") {
			t.Errorf("prompt %s says wait while it waits for a press: %q", p.StepID, p.Text)
		}
		if strings.HasSuffix(p.StepID, "dark") {
			n++
			if !strings.Contains(low, "press to start the") || !strings.Contains(low, "dark reading") {
				t.Errorf("dark prompt %s does not say a press starts the reading: %q", p.StepID, p.Text)
			}
		}
	}
	if n < 4 {
		t.Errorf("%d dark prompts, want the meter checks' and one per part", n)
	}
}

// The two one-minute beam-off meter checks run together: one prompt, one
// minute counted down aloud, one beep at the end, and the whole meter
// check takes well under the two minutes it took one after the other.
func TestMeterChecksTogether(t *testing.T) {
	v := runBuiltinOnSimulator(t, room2, "meter-checks", room2Values)
	evs := v.pan.Events()
	var start, end time.Time
	var said []string
	beeps := 0
	for _, e := range evs {
		switch {
		case e.Kind == scripted.KindAsk && e.Prompt.StepID == "beam-off":
			start = e.At
		case e.Kind == scripted.KindSay && strings.HasPrefix(e.Message.Text, "Meter checks done"):
			end = e.At
		case e.Kind == scripted.KindSay:
			said = append(said, e.Message.Text)
			if e.Message.Text == "Dark reading done." && e.Message.Level == panel.Good {
				beeps++
			}
		}
	}
	darkPrompts := 0
	for _, p := range v.pan.Prompts() {
		if strings.Contains(p.Text, "dark reading") {
			darkPrompts++
		}
	}
	if darkPrompts != 1 {
		t.Errorf("%d dark-reading prompts, want one for both meters", darkPrompts)
	}
	all := strings.Join(said, "\n")
	for _, want := range []string{"Dark reading started: 1 minute.", "30 seconds left.", "15 seconds left."} {
		if !strings.Contains(all, want) {
			t.Errorf("countdown lacks %q:\n%s", want, all)
		}
	}
	if beeps != 1 {
		t.Errorf("%d end-of-reading beeps (level good), want 1", beeps)
	}
	// One minute of reading, the meters' settling and the presses: well
	// under the 2 minutes two one-minute readings in turn need.
	if d := end.Sub(start); start.IsZero() || end.IsZero() || d > 90*time.Second {
		t.Errorf("meter checks took %s, want under 90 s", d)
	}
	if len(v.sum.Results) != 4 {
		t.Errorf("%d results, want the dark level and stability of each meter", len(v.sum.Results))
	}
}

// A value to be read off the console (the tube voltage the brightness
// control chose) that was only accepted at its bench default says so in
// the record, and the dosimeter readings whose coefficient used it carry
// a note: it never feeds a correction silently.
func TestReadOffValueNotReplacedSilently(t *testing.T) {
	vals := map[string]float64{"temperature": 22, "pressure": 101.3, "tube_voltage": 70, "tube_current": 1.2}
	v := runBuiltinOnSimulator(t, room2, "input-kerma-rate", vals)
	n := 0
	for _, x := range records[entry.Value](v.jr, v.sum.Session, entry.KindValue) {
		if x.Name != "tube_voltage" {
			continue
		}
		n++
		if !x.Unconfirmed || !strings.Contains(x.Source, "not read off") {
			t.Errorf("tube voltage %g %s recorded as %q, unconfirmed %v", x.Value, x.Unit, x.Source, x.Unconfirmed)
		}
	}
	if n != 3 {
		t.Errorf("%d tube voltages recorded, want one per field mode", n)
	}
	rates := 0
	for _, r := range v.sum.Results {
		if r.Quantity != "input_kerma_rate" {
			continue
		}
		rates++
		noted := false
		for _, f := range r.Flags {
			noted = noted || strings.Contains(f, "dosimeter coefficient taken at")
		}
		if !noted {
			t.Errorf("input kerma rate %s: no note on the tube voltage its coefficient used: %v", r.FieldMode, r.Flags)
		}
	}
	if rates != 3 {
		t.Errorf("%d input kerma rates", rates)
	}
}

// A lead disk of the wrong size for the field is said when its diameter is
// entered, before the exposure with the disk; the right size says nothing.
func TestWrongLeadDiskSaidAtEntry(t *testing.T) {
	for _, c := range []struct {
		disk float64
		warn bool
	}{{50, true}, {32, false}} {
		vals := map[string]float64{"temperature": 22, "pressure": 101.3, "lead_disk_diameter": c.disk}
		v := runBuiltinOnSimulator(t, room2, "contrast-ratio", vals)
		var after string
		seenValue := false
		for _, e := range v.pan.Events() {
			if e.Kind == scripted.KindAsk && e.Prompt.Value != nil && e.Prompt.Value.Name == "lead_disk_diameter" {
				seenValue = true
				continue
			}
			if seenValue && e.Kind != scripted.KindIndicate {
				if e.Kind == scripted.KindSay && e.Message.Level == panel.Warn {
					after = e.Message.Text
				}
				break
			}
		}
		got := strings.Contains(after, "Check the lead disk. 50 mm is 16 % of the 320 mm field")
		if got != c.warn {
			t.Errorf("disk %g mm: said after entry %q, want warning %v", c.disk, after, c.warn)
		}
	}
}

// Results are said with their units, a relative figure in percent for its
// value and its limits alike, the deciding limit in plain words with its
// value, and "marginal" only of the limit that decided. The unit words are
// what the speaking panels make of them (speech.ForEar).
func TestSpokenResultsAndVerdicts(t *testing.T) {
	cf := calib.Limit{Kind: calib.KindSpecification, Bound: calib.AtLeast, Value: 100}
	tests := []struct {
		r             entry.Result
		limits        []calib.Limit
		result, ear   string
		verdict, vEar string
	}{
		{
			r:       entry.Result{Quantity: calib.QConversionFactor, FieldMode: "32cm", Value: 151, ExpUnc: 5, Unit: calib.UnitConversion, Calibrated: true, Baseline: 168, BaselineFrac: 151.0 / 168},
			limits:  []calib.Limit{cf, {Kind: calib.KindBaseline, Bound: calib.AtLeast, Value: 0.8}},
			result:  "Conversion factor, 32cm field: 151 cd/m² per µGy/s, last time 168, 90 % of baseline.",
			ear:     "Conversion factor, 32 centimetre field: 151 candelas per square metre per microgray per second, last time 168, 90 percent of baseline.",
			verdict: "Conversion factor, 32cm field: pass. Nearest limit: at least 80 % of the baseline, 134 cd/m² per µGy/s.",
		},
		{
			r:       entry.Result{Quantity: calib.QNonUniformity, Value: 0.0846, ExpUnc: 0.009, Unit: calib.UnitRatio, Calibrated: true},
			limits:  []calib.Limit{{Kind: calib.KindSpecification, Bound: calib.AtMost, Value: 0.25}},
			result:  "Luminance non-uniformity: 8.46 %.",
			verdict: "Luminance non-uniformity: pass. Nearest limit: the specification maximum of 25 %.",
			vEar:    "Luminance non-uniformity: pass. Nearest limit: the specification maximum of 25 percent.",
		},
		{
			r:       entry.Result{Quantity: calib.QInputKermaRate, FieldMode: "32cm", Value: 0.444, ExpUnc: 0.012, Unit: "µGy/s", Calibrated: true},
			limits:  []calib.Limit{{Kind: calib.KindActionLevel, Bound: calib.AtMost, Value: 2}},
			result:  "Input air kerma rate, 32cm field: 0.444 µGy/s.",
			ear:     "Input air kerma rate, 32 centimetre field: 0.444 micrograys per second.",
			verdict: "Input air kerma rate, 32cm field: pass. Nearest limit: the action level maximum of 2 µGy/s.",
		},
		{
			// A fail against the specification of 100 is not marginal
			// because the action level of 60 is near.
			r:       entry.Result{Quantity: calib.QConversionFactor, FieldMode: "17cm", Value: 61, ExpUnc: 3, Unit: calib.UnitConversion, Calibrated: true},
			limits:  []calib.Limit{cf, {Kind: calib.KindActionLevel, Bound: calib.AtLeast, Value: 60}},
			verdict: "Conversion factor, 17cm field: fail, below the specification minimum of 100 cd/m² per µGy/s.",
		},
		{
			r:       entry.Result{Quantity: calib.QContrastRatio, Value: 24.1, ExpUnc: 0.5, Unit: calib.UnitRatio, Calibrated: true},
			limits:  []calib.Limit{{Kind: calib.KindSpecification, Bound: calib.AtLeast, Value: 15}},
			result:  "Contrast ratio: 24.1 to 1.",
			verdict: "Contrast ratio: pass. Nearest limit: the specification minimum of 15 to 1.",
		},
	}
	for _, tc := range tests {
		res := calib.Result{Value: tc.r.Value, ExpUnc: tc.r.ExpUnc, Unit: tc.r.Unit, Calibrated: true}
		v := calib.Judge(res, tc.r.Baseline, tc.limits)
		if tc.result != "" {
			if got := (&Engine{}).spokenResult(tc.r, ""); got != tc.result {
				t.Errorf("result\n got %q\nwant %q", got, tc.result)
			}
		}
		if tc.ear != "" {
			if got := speech.ForEar((&Engine{}).spokenResult(tc.r, "")); got != tc.ear {
				t.Errorf("result by ear\n got %q\nwant %q", got, tc.ear)
			}
		}
		if got := (&Engine{}).spokenVerdict(tc.r, "", v); got != tc.verdict {
			t.Errorf("verdict\n got %q\nwant %q", got, tc.verdict)
		}
		if tc.vEar != "" {
			if got := speech.ForEar((&Engine{}).spokenVerdict(tc.r, "", v)); got != tc.vEar {
				t.Errorf("verdict by ear\n got %q\nwant %q", got, tc.vEar)
			}
		}
	}
}

// Progress by ear: the start says the parts, exposures, time and beam-on
// budget; each part says what it takes and what is left after it; a
// checklist says its line numbers; the step count is the operator's own,
// silent computations not counted.
func TestProgressByEar(t *testing.T) {
	v := runBuiltinOnSimulator(t, room2, "acceptance", room2Values)
	msgs := v.pan.Messages()
	if len(msgs) == 0 || !strings.HasPrefix(msgs[0].Text, "Starting Acceptance") {
		t.Fatalf("no opening message")
	}
	open := msgs[0].Text
	for _, want := range []string{"7 parts", "exposures", "minutes", "Beam-on budget"} {
		if !strings.Contains(open, want) {
			t.Errorf("opening %q lacks %q", open, want)
		}
	}
	parts := 0
	for _, m := range msgs {
		if strings.HasPrefix(m.Text, "Part ") {
			parts++
			if !strings.Contains(m.Text, fmt.Sprintf("Part %d of 7: ", parts)) || !(strings.Contains(m.Text, "After it:") || strings.Contains(m.Text, "last part")) {
				t.Errorf("part intro %q", m.Text)
			}
		}
	}
	if parts != 7 {
		t.Errorf("%d part intros, want 7", parts)
	}
	computes := 0
	for _, s := range v.proc.Steps {
		if s.Kind == Compute || s.Kind == Judge || s.Kind == Say {
			computes++
		}
	}
	lines, last := 0, 0
	for _, p := range v.pan.Prompts() {
		if p.Tasks == 0 || p.Tasks != len(v.proc.Steps)-computes {
			t.Fatalf("prompt %q: %d operator steps, want %d of %d steps without the silent ones", p.Text, p.Tasks, len(v.proc.Steps)-computes, len(v.proc.Steps))
		}
		if p.Task < last || p.Task > p.Tasks {
			t.Errorf("prompt %q: step %d after %d of %d", p.Text, p.Task, last, p.Tasks)
		}
		last = p.Task
		if p.Action == panel.ActCheck {
			lines++
			if want := fmt.Sprintf("Line %d of 4. ", lines); p.Lines != 4 || !strings.HasPrefix(p.Spoken(), want) {
				t.Errorf("checklist line said %q, want it to start %q", p.Spoken(), want)
			}
		}
	}
	if lines != 4 {
		t.Errorf("%d checklist lines", lines)
	}
}

// The operator can hear the last prompt again (with what was said since
// the previous answer), and skip a field mode from the pause menu: the
// mode's steps are journalled as skipped with the reason, and the rest of
// the visit goes on.
func TestSayAgainAndSkipFieldMode(t *testing.T) {
	scn := room2
	var repeated, skipped bool
	v := runBuiltinOnSimulatorWith(t, scn, "conversion-factor", room2Values, func(p panel.Prompt) (panel.Response, bool) {
		switch {
		case p.StepID == "select@32cm" && !repeated:
			repeated = true
			return panel.Response{Answer: panel.Repeat}, true
		case p.StepID == "select@25cm" && p.Action == panel.ActSetup && !skipped:
			return panel.Response{Answer: panel.Pause}, true
		case p.Action == panel.ActMenu && !skipped:
			skipped = true
			return panel.Response{Answer: panel.Retake}, true
		}
		return panel.Response{}, false
	})
	asked := 0
	for _, p := range v.pan.Prompts() {
		if p.StepID == "select@32cm" {
			asked++
		}
	}
	if asked != 2 {
		t.Errorf("the repeated prompt was asked %d times, want 2", asked)
	}
	for _, r := range v.sum.Results {
		if r.FieldMode == "25cm" {
			t.Errorf("a result in the skipped mode: %+v", r)
		}
	}
	n := 0
	for _, s := range records[entry.Step](v.jr, v.sum.Session, entry.KindStep) {
		if s.State == entry.StepSkipped && s.FieldMode == "25cm" {
			n++
			if !strings.Contains(s.Reason, "skipped by the operator") {
				t.Errorf("skip reason %q", s.Reason)
			}
		}
	}
	if n != 5 {
		t.Errorf("%d steps of the 25cm mode journalled as skipped, want its 5", n)
	}
	msgs := v.pan.Messages()
	if last := msgs[len(msgs)-1].Text; !strings.Contains(last, "Skipped: the 25cm field.") {
		t.Errorf("closing summary %q does not say the skipped mode", last)
	}
	if len(v.sum.Skipped) != 1 || v.sum.Skipped[0] != "25cm" {
		t.Errorf("summary skipped %v", v.sum.Skipped)
	}
}

// A procedure of one part opens with its exposures as a sentence of their
// own, capitalised ("Starting Meter checks before use. No exposures,
// about 2 minutes."; it said "no exposures" after the full stop).
func TestOpeningOfOnePart(t *testing.T) {
	v := runBuiltinOnSimulator(t, room2, "meter-checks", room2Values)
	msgs := v.pan.Messages()
	if len(msgs) == 0 || !strings.HasPrefix(msgs[0].Text, "Starting ") {
		t.Fatalf("no opening message")
	}
	if open := msgs[0].Text; !strings.Contains(open, ". No exposures, ") {
		t.Errorf("opening %q: the exposures do not open their sentence", open)
	}
}
