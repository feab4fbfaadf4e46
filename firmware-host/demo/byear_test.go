package demo

import (
	"context"
	"strings"
	"sync"
	"testing"
	"time"

	"kermalux/firmware-host/panel/speech"
	"kermalux/procedures/panel"
)

// TestSessionByEar hears a whole seeded acceptance session as a
// foot-switch board says it (speech.PromptText with the offered value for
// prompts, speech.ForEar for messages), the engine's own words included
// (the opening, part introductions, photometer positions, countdowns,
// results, the closing summary), and holds every utterance to the
// plain-language rules of speech.Listener (ASD-STE100 rules 5.1 and 5.2,
// one action a checklist line, no instruction said twice, units said as
// words).
func TestSessionByEar(t *testing.T) {
	for _, scn := range []string{"", "../../testdata/scenarios/tollemby-rise-room4-four-modes.yaml"} {
		var (
			mu       sync.Mutex
			l        speech.Listener
			heard    int
			problems []string
		)
		hear := func(text string) {
			mu.Lock()
			defer mu.Unlock()
			heard++
			for _, p := range l.Hear(text) {
				problems = append(problems, p+"\n  said: "+text)
			}
		}
		ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
		out, err := Seeded(ctx, SeededOptions{Dir: t.TempDir(), Scenario: scn,
			OnAsk: func(p panel.Prompt) { hear(speech.PromptText(p, true)) },
			OnSay: func(m panel.Message) { hear(speech.ForEar(m.Text)) },
		})
		cancel()
		if err != nil {
			t.Fatalf("%s: %v", scn, err)
		}
		if out.Summary.Outcome != "complete" || heard < 100 {
			t.Fatalf("%s: %s after %d utterances", scn, out.Summary.Outcome, heard)
		}
		if len(problems) > 0 {
			t.Errorf("%s: %d of %d utterances break a rule:\n%s", scn, len(problems), heard, strings.Join(problems, "\n"))
		}
	}
}
