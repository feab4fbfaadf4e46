package builtin_test

import (
	"slices"
	"strings"
	"testing"
	"time"

	"kermalux/drivers/units"
	"kermalux/procedures/builtin"
	"kermalux/procedures/script"
)

// bench is a bench with both meters, as the built-ins expect.
var bench = script.Env{Quantities: map[string][]units.Quantity{
	"dosimeter":  {units.AirKermaRate, units.AirKerma},
	"photometer": {units.Luminance},
}}

// TestBuiltinsPass: every built-in passes the checker, alone and on a
// bench with both meters.
func TestBuiltinsPass(t *testing.T) {
	names := builtin.Names()
	if len(names) < 8 {
		t.Fatalf("only %d built-ins: %v", len(names), names)
	}
	for _, n := range names {
		p, err := script.LoadBuiltin(n)
		if err != nil {
			t.Errorf("%s: %v", n, err)
			continue
		}
		if p.Name != n {
			t.Errorf("%s: file declares name %q", n, p.Name)
		}
		for _, env := range []script.Env{{}, bench} {
			if ps := script.Check(p, env); len(ps) > 0 {
				t.Errorf("%s: %d problems:\n%v", n, len(ps), ps)
			}
		}
	}
}

// TestBuiltinCounts flattens each built-in with n field modes and checks
// the number of steps against counts made by hand from the scripts:
// pre-exposure-safety 2 (caution, checklist); air-density 2; meter-checks
// 9 (both meters read together); conversion-factor 10 + 5n (safety 2, air 2,
// five set-up prompts of one action each, dark; per mode select, kv, light,
// factor, factor-check); luminance-uniformity 9 (three set-up prompts);
// contrast-ratio 13 (three); input-kerma-rate 8 + 7n (four); acceptance
// 43 + 12n (the once-includes of safety and air density inside the parts
// are skipped).
func TestBuiltinCounts(t *testing.T) {
	counts := map[string]func(n int) int{
		"pre-exposure-safety":  func(int) int { return 2 },
		"air-density":          func(int) int { return 2 },
		"meter-checks":         func(int) int { return 9 },
		"conversion-factor":    func(n int) int { return 10 + 5*n },
		"luminance-uniformity": func(int) int { return 9 },
		"contrast-ratio":       func(int) int { return 13 },
		"input-kerma-rate":     func(n int) int { return 8 + 7*n },
		"acceptance":           func(n int) int { return 43 + 12*n },
	}
	modes := []string{"36 cm", "25 cm", "17 cm", "12 cm"}
	for _, n := range builtin.Names() {
		count, ok := counts[n]
		if !ok {
			t.Errorf("built-in %s has no hand count in this test", n)
			continue
		}
		p, err := script.LoadBuiltin(n)
		if err != nil {
			t.Fatal(err)
		}
		for k := 1; k <= len(modes); k++ {
			env := bench
			env.FieldModes = modes[:k]
			f, err := script.Flatten(p, env)
			if err != nil {
				t.Errorf("%s with %d modes: %v", n, k, err)
				continue
			}
			if len(f.Steps) != count(k) {
				t.Errorf("%s with %d modes: %d steps, want %d", n, k, len(f.Steps), count(k))
			}
			seen := map[string]bool{}
			for _, s := range f.Steps {
				if seen[s.ID] {
					t.Errorf("%s: step id %q twice", n, s.ID)
				}
				seen[s.ID] = true
			}
		}
	}
}

// TestAcceptanceShape: in the acceptance sequence the safety checklist
// comes before any beam step and the temperature before the first
// measurement. It is the whole visit: four field modes (where the bench
// has them) for the conversion factor and the input kerma rate, a
// 13-point uniformity map (the centre, the four directions at 0.5 r and
// 0.9 r, the four diagonals), the contrast ratio's two readings; its
// beam-on budget is 120 s, enforced as a pool that keeps every reading's
// reserve, well under the 4.5 minutes at which the board warns ahead of
// the five-minute timer of 21 CFR 1020.32(h).
func TestAcceptanceShape(t *testing.T) {
	p, err := script.LoadBuiltin("acceptance")
	if err != nil {
		t.Fatal(err)
	}
	env := bench
	env.FieldModes = []string{"36 cm", "25 cm", "17 cm", "12 cm"}
	f, err := script.Flatten(p, env)
	if err != nil {
		t.Fatal(err)
	}
	if f.BeamBudget != 120*time.Second {
		t.Errorf("budget %v, want 120 s", f.BeamBudget)
	}
	var safety, temperature, firstMeasure, firstBeam, readings int
	var reserve time.Duration
	modes := map[string]map[string]bool{}
	for _, s := range f.Steps {
		switch {
		case s.Step.Kind == script.KindSafetyChecklist && safety == 0:
			safety = s.Index
		case s.Step.Kind == script.KindEnter && s.Step.Enter.Name == "temperature" && temperature == 0:
			temperature = s.Index
		case s.Step.Kind == script.KindMeasure && firstMeasure == 0:
			firstMeasure = s.Index
		}
		if s.MaxBeam() == 0 {
			continue
		}
		if firstBeam == 0 {
			firstBeam = s.Index
		}
		readings += s.Step.Measure.PositionCount()
		reserve += s.Reserve()
		if len(s.Pools) == 0 || s.Pools[0].ID != "" || s.Pools[0].Budget != f.BeamBudget {
			t.Errorf("%s: pools %v, want the sequence's first", s.ID, s.Pools)
		}
		if s.FieldMode != "" {
			if modes[s.Part] == nil {
				modes[s.Part] = map[string]bool{}
			}
			modes[s.Part][s.FieldMode] = true
		}
		if s.ID == "uniformity/spots" {
			var got []string
			for _, ps := range s.Step.Measure.Positions {
				got = append(got, ps.Label)
			}
			want := []string{"centre", "up 0.5 r", "up 0.9 r", "right 0.5 r", "right 0.9 r", "down 0.5 r", "down 0.9 r", "left 0.5 r", "left 0.9 r",
				"up-right 0.7 r", "up-left 0.7 r", "down-left 0.7 r", "down-right 0.7 r"}
			if !slices.Equal(got, want) {
				t.Errorf("uniformity positions %q, want %q", got, want)
			}
		}
	}
	if !(safety > 0 && safety < temperature && temperature < firstMeasure && firstMeasure <= firstBeam) {
		t.Errorf("order: safety %d, temperature %d, first measure %d, first beam %d", safety, temperature, firstMeasure, firstBeam)
	}
	for _, part := range []string{"cf", "input"} {
		if len(modes[part]) != 4 {
			t.Errorf("%s in %d field modes, want 4: %v", part, len(modes[part]), modes[part])
		}
	}
	// 4 conversion factors, 13 uniformity points, 2 contrast readings, 4
	// input kerma rates.
	if readings != 23 {
		t.Errorf("%d beam readings, want 23", readings)
	}
	// The reserves are what readings that go right take (3.2 to 6.4 s
	// each with the release on the four-mode simulated bench,
	// TestWholeVisit in firmware-host/demo), not their maxima: a budget
	// that reserved nearly all of itself would leave the first readings
	// no room for a retake. At most 100 s of the 120 s leaves 20 s, five
	// retakes or so, to whichever readings need them.
	if reserve > 100*time.Second {
		t.Errorf("reserves %v, want at most 100 s of the budget %v", reserve, f.BeamBudget)
	}
}

// TestSpokenWording keeps the spoken texts short enough to follow with
// busy hands: at most 16 words a sentence (a house rule).
func TestSpokenWording(t *testing.T) {
	for _, n := range builtin.Names() {
		p, err := script.LoadBuiltin(n)
		if err != nil {
			t.Fatal(err)
		}
		f, err := script.Flatten(p, script.Env{FieldModes: []string{"36 cm"}})
		if err != nil {
			t.Fatal(err)
		}
		for _, s := range f.Steps {
			texts := []string{s.Step.Text}
			for _, it := range s.Step.Items {
				texts = append(texts, it.Text)
			}
			for _, text := range texts {
				for _, sentence := range strings.FieldsFunc(text, func(r rune) bool { return r == '.' || r == '?' || r == '!' }) {
					if w := len(strings.Fields(sentence)); w > 16 {
						t.Errorf("%s %s: %d words: %q", n, s.ID, w, strings.TrimSpace(sentence))
					}
				}
			}
		}
	}
}

func TestReadUnknown(t *testing.T) {
	for _, n := range []string{"no-such", "../acceptance", ""} {
		if _, err := builtin.Read(n); err == nil {
			t.Errorf("Read(%q) succeeded", n)
		}
	}
}
