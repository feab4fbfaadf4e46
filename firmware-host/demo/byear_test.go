package demo

import (
	"context"
	"fmt"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"kermalux/firmware-host/panel/speech"
	"kermalux/procedures/catalog"
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

// A German and a French board say a whole seeded session in their words:
// what reaches the synthesiser holds no unit symbol, no number written
// with a decimal separator (it is said with "Komma" or "virgule") and no
// English unit word (speech.Ear; the rules and their sources are in
// firmware-host/panel/speech/ear_lang.go).
func TestSessionByEarInEachLanguage(t *testing.T) {
	symbols := regexp.MustCompile(`\d\s?(?:µGy|cd/m|cd·|mm|cm|kV|kPa|hPa|°C|%|s|r|min|ms|mR)(?:$|[\s.,;:!?)])|µ|°|±|²|⁻|\d[.,]\d`)
	// English unit words the language spells otherwise ("minute" and
	// "microgray" are French too).
	englishUnits := map[string]*regexp.Regexp{
		"de": regexp.MustCompile(`\b(?:per|square metres?|metres?|seconds?|minutes?|percent|of the radius|degrees?|micrograys?)\b`),
		"fr": regexp.MustCompile(`\b(?:per|square metres?|metres?|seconds?|percent|of the radius|degrees?)\b`),
	}
	for _, lang := range catalog.Languages()[1:] {
		c, err := catalog.Builtin(lang)
		if err != nil {
			t.Fatal(err)
		}
		ear := speech.NewEar(c)
		if englishUnits[lang] == nil {
			t.Fatalf("%s: no English unit words to look for", lang)
		}
		var mu sync.Mutex
		var problems []string
		heard := 0
		hear := func(text string) {
			mu.Lock()
			defer mu.Unlock()
			heard++
			if m := symbols.FindString(text); m != "" {
				problems = append(problems, fmt.Sprintf("%q left: %s", m, text))
			}
			if m := englishUnits[lang].FindString(text); m != "" {
				problems = append(problems, fmt.Sprintf("English %q: %s", m, text))
			}
		}
		out, err := Seeded(context.Background(), SeededOptions{Dir: t.TempDir(), Language: lang, RoomAir: true,
			OnAsk: func(p panel.Prompt) { hear(ear.PromptText(p, true)) },
			OnSay: func(m panel.Message) { hear(ear.ForEar(m.Text)) },
		})
		if err != nil {
			t.Fatalf("%s: %v", lang, err)
		}
		if out.Summary.Outcome != "complete" || heard < 100 {
			t.Fatalf("%s: %s after %d utterances", lang, out.Summary.Outcome, heard)
		}
		if len(problems) > 0 {
			t.Errorf("%s: %d of %d utterances not said in %s's words:\n%s", lang, len(problems), heard, lang, strings.Join(problems, "\n"))
		}
	}
}
