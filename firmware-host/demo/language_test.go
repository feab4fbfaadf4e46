package demo

import (
	"context"
	"encoding/json"
	"regexp"
	"sync"
	"testing"

	"kermalux/drivers/clock"
	"kermalux/procedures/catalog"
	"kermalux/procedures/engine"
	"kermalux/procedures/panel"
)

// englishWords are words of the engine's English that no built-in
// translation uses: a text said in another language that holds one was
// not translated (a literal that bypasses the catalog, or a composed text
// whose format is not catalogued).
var englishWords = regexp.MustCompile(`(?i)\b(the|press|release|reading|field|switch|beam|step|is|of|and|when|dark|level|stability|done|left)\b`)

// missRecorder is the bench's catalog, noting every English text asked
// for that it has no translation of.
type missRecorder struct {
	c    *catalog.Catalog
	mu   sync.Mutex
	miss map[string]bool
}

func (m *missRecorder) Text(s string) string {
	t, ok := m.c.Translate(s)
	if !ok && englishWords.MatchString(s) {
		m.mu.Lock()
		m.miss[s] = true
		m.mu.Unlock()
	}
	return t
}

func (m *missRecorder) Number(s string) string { return m.c.Number(s) }

// The same seeded session, in each built-in language, measures the same:
// identical results (values, uncertainties, budgets, verdicts, flags),
// beam-on time and number of readings, because the language changes only
// the words. And every text said or asked in another language than
// English is translated: none holds an English word, and the catalog was
// never asked for an English text it lacks.
func TestSeededSameInEveryLanguage(t *testing.T) {
	if testing.Short() {
		t.Skip("one whole seeded session per language")
	}
	ctx := context.Background()
	// A session that passes, one with faults (retakes, a meter lost),
	// and an aged tube whose results fail.
	for _, scn := range []string{"tollemby-rise-room2.yaml", "tollemby-rise-faults.yaml", "wendlemoor-aged-tube.yaml"} {
		t.Run(scn, func(t *testing.T) { sameInEveryLanguage(ctx, t, "../../testdata/scenarios/"+scn, false) })
	}
	// With the room air read from the simulated sensor: what the board
	// says of the sensor is translated too, and the results are still the
	// same in every language.
	t.Run("room air from the sensor", func(t *testing.T) {
		sameInEveryLanguage(ctx, t, "../../testdata/scenarios/tollemby-rise-room2.yaml", true)
	})
}

func sameInEveryLanguage(ctx context.Context, t *testing.T, scn string, sensor bool) {
	var ref []byte
	var refOut *SeededOutcome
	for _, lang := range catalog.Languages() {
		var mu sync.Mutex
		var said []string
		var rec *missRecorder
		note := func(s string) { mu.Lock(); said = append(said, s); mu.Unlock() }
		out, err := Seeded(ctx, SeededOptions{Dir: t.TempDir(), Scenario: scn, Language: lang, RoomAir: sensor,
			OnSay: func(m panel.Message) { note(m.Text) },
			OnAsk: func(p panel.Prompt) { note(p.Spoken()) },
			Config: func(cfg *engine.Config, _ clock.Clock) {
				if c, ok := cfg.Messages.(*catalog.Catalog); ok {
					rec = &missRecorder{c: c, miss: map[string]bool{}}
					cfg.Messages = rec
				}
			}})
		if err != nil {
			t.Fatalf("%s: %v", lang, err)
		}
		if sensor != (out.Config.RoomAir != nil) {
			t.Fatalf("%s: room-air sensor configured: %v, want %v", lang, out.Config.RoomAir != nil, sensor)
		}
		if len(out.Summary.Results) == 0 || len(said) == 0 {
			t.Fatalf("%s: no results or nothing said", lang)
		}
		got, _ := json.Marshal(out.Summary.Results)
		if ref == nil {
			ref, refOut = got, out
		} else {
			if string(got) != string(ref) {
				t.Errorf("%s: the results differ from English's", lang)
			}
			if out.Summary.BeamOn != refOut.Summary.BeamOn || out.Readings != refOut.Readings {
				t.Errorf("%s: beam-on %v, %d readings; English %v, %d", lang, out.Summary.BeamOn, out.Readings, refOut.Summary.BeamOn, refOut.Readings)
			}
		}
		if lang == catalog.English {
			if rec != nil {
				t.Errorf("English has a catalog")
			}
			continue
		}
		if rec == nil {
			t.Fatalf("%s: the engine was given no catalog", lang)
		}
		if testing.Verbose() {
			for _, s := range said {
				t.Logf("%s: %s", lang, s)
			}
		}
		for s := range rec.miss {
			t.Errorf("%s: no translation of %q", lang, s)
		}
		for _, s := range said {
			if w := englishWords.FindString(s); w != "" {
				t.Errorf("%s: said %q (English %q)", lang, s, w)
			}
		}
	}
}
