package speech

import (
	"strings"
	"testing"

	"kermalux/procedures/panel"
)

// TestListener: each case is one or two utterances and whether the last
// breaks a rule. The rules are ASD-STE100 Simplified Technical English's
// for procedures (rule 5.1: at most 20 words; rule 5.2: one instruction in
// a sentence unless done at the same time; sequential steps as separate
// sentences) and one action a checklist line (common practice). The
// failing prompts are the built-ins' words before they were made
// checklists.
func TestListener(t *testing.T) {
	t.Parallel()
	tests := []struct {
		name   string
		before string // said just before, or ""
		text   string
		want   string // a word of the problem expected, "" for none
	}{
		{"one action and its cue", "", "Remove the grid. Press when ready.", ""},
		{"beam cue alone", "", "Press the switch, then step on the fluoroscopy pedal.", ""},
		{"checklist line", "", "Line 2 of 4. Tape the chamber to the centre of the input.", ""},
		{"a state to check", "", "Line 1 of 4. Lead apron and thyroid collar on.", ""},
		{"value and its cue", "", "Room temperature, in degrees Celsius. 20 degrees Celsius. Press to accept.", ""},
		{"statement, then an instruction", "", "Meter checks done. Uncover the photometer lens.", ""},
		{"position and the beam cue", "", "Move the photometer to position 2 of 13: up 0.5 of the radius. Press the switch, then step on the pedal.", ""},
		{"decimal is not a sentence end", "", "Set 70.5 kilovolts. Press when ready.", ""},
		{"four actions in one prompt", "",
			"Conversion factor. Remove the grid. Tape the chamber to the centre of the input. Put the photometer at the centre of the output. Hang the 21 millimetre aluminium filter on the collimator. Press when ready.",
			"4 instructions in one prompt"},
		{"two actions in one sentence", "", "Select the field, then set 70 kilovolts.", "2 instructions in one sentence"},
		{"the same instruction twice", "",
			"Move the photometer to position 1 of 9: centre. Move the photometer to each position when asked. At each one, press the switch, then step on the pedal.",
			"instructions in one prompt"},
		{"cue said twice", "", "Room temperature, in degrees Celsius. Press to accept. 20 degrees Celsius. Press to accept.", "two cues"},
		{"instruction after the cue", "", "Press when ready. Keep the beam off.", "after the cue"},
		{"said again right after", "Keep the beam off. Press when ready.", "Keep the beam off. Press to start the dark reading.", "again right after"},
		{"cues may repeat", "Remove the grid. Press when ready.", "Select the largest field. Press when ready.", ""},
		{"too long", "", "Put the photometer on its bracket at the centre of the output window of the image intensifier so that it faces the phosphor squarely.", "words in an instruction"},
		{"unit symbol left", "", "Conversion factor: 151 cd/m² per µGy/s.", "not said as words"},
		{"radius symbol left", "", "Move the photometer to up 0.5 r.", "unit symbol"},
	}
	for _, tc := range tests {
		var l Listener
		if tc.before != "" {
			if ps := l.Hear(tc.before); len(ps) > 0 {
				t.Fatalf("%s: the utterance before has problems: %v", tc.name, ps)
			}
		}
		ps := l.Hear(tc.text)
		got := strings.Join(ps, "; ")
		switch {
		case tc.want == "" && len(ps) > 0:
			t.Errorf("%s: %q: unexpected %s", tc.name, tc.text, got)
		case tc.want != "" && !strings.Contains(got, tc.want):
			t.Errorf("%s: %q: problems %q, want one with %q", tc.name, tc.text, got, tc.want)
		}
	}
}

// TestPromptTextOffersOnce: on a foot-switch panel a value prompt says
// the value a press accepts and the cue once, even when the script's
// words end with the cue too.
func TestPromptTextOffersOnce(t *testing.T) {
	t.Parallel()
	for _, words := range []string{"Air pressure, in kilopascals.", "Air pressure, in kilopascals. Press to accept."} {
		p := panel.Prompt{Message: panel.Message{Text: words}, Value: &panel.ValueRequest{Name: "pressure", Unit: "kPa", Default: 101.3, HasDefault: true}}
		want := "Air pressure, in kilopascals. 101.3 kilopascals. Press to accept."
		if got := PromptText(p, true); got != want {
			t.Errorf("PromptText(%q)\n got %q\nwant %q", words, got, want)
		}
	}
	p := panel.Prompt{Message: panel.Message{Text: "Tape the chamber to the centre of the input."}, Line: 2, Lines: 4}
	if got, want := PromptText(p, false), "Line 2 of 4. Tape the chamber to the centre of the input."; got != want {
		t.Errorf("checklist line: got %q, want %q", got, want)
	}
}
