package speech

import (
	"fmt"
	"regexp"
	"strings"
	"unicode"
)

// Plain-language rules for what the board says, checked on the text the
// synthesiser gets (after ForEar). They follow the writing rules of
// ASD-STE100 Simplified Technical English for procedures: at most 20 words
// in a procedural sentence (rule 5.1), only one instruction in a sentence
// unless the actions are done at the same time (rule 5.2), sequential
// steps as separate sentences; and the checklist practice of one action a
// line (common practice): an engineer under an apron hears a prompt once,
// does what it says, and presses. So a spoken prompt holds at most one
// instruction besides its cue (the closing sentence that says what a press
// does: "Press when ready.", "Press to accept.", "Press the switch, then
// step on the pedal."), and no instruction is said twice in a row.
//
// A sentence is an instruction when it begins with an imperative verb
// from the closed list below (the verbs kermalux's prompts use); a clause
// after a comma, "then" or "and" that begins with one is another
// instruction in the same sentence.

// MaxInstructionWords is the longest instruction sentence, in words
// (ASD-STE100 rule 5.1: 20 words in a procedural sentence).
const MaxInstructionWords = 20

var imperatives = map[string]bool{}

func init() {
	for _, v := range strings.Fields(`press step release select set remove tape put hang place take keep
		cover uncover move switch stop check follow enter wait read fit refit plug unplug turn lift
		hold open close mount connect disconnect leave make use start repeat retake type go come wear
		tell ask note write confirm lower raise align centre center replace insert attach detach clean
		record unlatch latch route lay mark push pull`) {
		imperatives[v] = true
	}
}

// beamCue is the one cue of two actions: the foot switch arms the board
// and the pedal switches the beam on, one gesture of the feet (common
// practice at a fluoroscope: the pedal is pressed at once after the
// switch, and the board waits for the beam, not for a pause).
var beamCue = regexp.MustCompile(`^press the switch, then step on the (fluoroscopy )?pedal$`)

// unitLeft is a unit symbol still after a number: ForEar missed it.
var unitLeft = regexp.MustCompile(`\b\d+(?:\.\d+)? (?:r|s|m|mm|cm|kV|mA|fL|min|deg|kPa)\b`)

// Listener hears what the board says, in order, and names what breaks
// the rules above. The zero value is ready.
type Listener struct {
	prev map[string]bool // the instructions of the last utterance
}

// Hear takes one utterance (a prompt or a message, as the synthesiser
// gets it) and returns a problem for each rule it breaks.
func (l *Listener) Hear(text string) []string {
	var problems []string
	bad := func(format string, a ...any) { problems = append(problems, fmt.Sprintf(format, a...)) }

	for _, r := range text {
		if !(unicode.IsLetter(r) || unicode.IsDigit(r) || unicode.IsSpace(r) || strings.ContainsRune(".,:;?!'’()-", r)) {
			bad("%q is not said as words", string(r))
		}
	}
	if m := unitLeft.FindString(text); m != "" {
		bad("unit symbol %q not said as words", m)
	}

	sentences := Sentences(text)
	here := map[string]bool{}
	var instructions []string
	cue := -1
	for i, s := range sentences {
		low := normal(s)
		verbs := imperativesIn(low)
		isCue := len(verbs) > 0 && verbs[0] == "press"
		switch {
		case isCue:
			if cue >= 0 {
				bad("two cues: %q and %q", sentences[cue], s)
			}
			cue = i
			if len(verbs) > 1 && !beamCue.MatchString(low) {
				bad("%d instructions in one sentence: %q", len(verbs), s)
			}
		case len(verbs) > 0:
			if cue >= 0 {
				bad("instruction after the cue: %q", s)
			}
			if len(verbs) > 1 {
				bad("%d instructions in one sentence: %q", len(verbs), s)
			}
			if w := len(strings.Fields(s)); w > MaxInstructionWords {
				bad("%d words in an instruction (at most %d): %q", w, MaxInstructionWords, s)
			}
			if here[low] {
				bad("instruction said twice: %q", s)
			}
			if l.prev[low] {
				bad("instruction said again right after: %q", s)
			}
			here[low] = true
			instructions = append(instructions, s)
		}
	}
	if len(instructions) > 1 {
		bad("%d instructions in one prompt (one a line): %q", len(instructions), strings.Join(instructions, " | "))
	}
	l.prev = here
	return problems
}

// Sentences splits spoken text at a full stop, question or exclamation
// mark that ends the text or is followed by a space (so "0.5" stays whole).
func Sentences(text string) []string {
	var out []string
	start := 0
	rs := []rune(text)
	for i, r := range rs {
		if r != '.' && r != '?' && r != '!' {
			continue
		}
		if i+1 < len(rs) && !unicode.IsSpace(rs[i+1]) {
			continue
		}
		if s := strings.TrimSpace(string(rs[start : i+1])); strings.Trim(s, ".?! ") != "" {
			out = append(out, s)
		}
		start = i + 1
	}
	if s := strings.TrimSpace(string(rs[start:])); s != "" {
		out = append(out, s)
	}
	return out
}

// normal is a sentence in lower case without its closing punctuation.
func normal(s string) string {
	return strings.Join(strings.Fields(strings.ToLower(strings.TrimRight(s, ".?! "))), " ")
}

// imperativesIn lists the imperative verbs that open the sentence and its
// clauses (after a comma, "then" or "and").
func imperativesIn(low string) []string {
	words := strings.Fields(low)
	var out []string
	for i, w := range words {
		w = strings.TrimRight(w, ",;:")
		opens := i == 0
		if i > 0 {
			p := words[i-1]
			opens = p == "then" || p == "and" || strings.HasSuffix(p, ",") || strings.HasSuffix(p, ";")
		}
		if opens && imperatives[w] {
			out = append(out, w)
		}
	}
	return out
}
