package speech

import (
	"fmt"
	"testing"

	"kermalux/procedures/builtin"
	"kermalux/procedures/panel"
	"kermalux/procedures/script"
)

// TestBuiltinPromptsByEar reads every built-in procedure aloud as a
// foot-switch board would (PromptText with the offered value, ForEar for
// what is said without a wait), flattened for an intensifier of four field
// modes, and holds each utterance to the Listener's rules: one
// instruction a prompt besides its cue, checklists one action a line, no
// instruction said twice, at most 20 words an instruction, every unit
// said as words. The words the engine adds at run time (photometer
// positions, results, countdowns) are heard in the demo's seeded session
// (firmware-host/demo, TestSessionByEar).
func TestBuiltinPromptsByEar(t *testing.T) {
	t.Parallel()
	for _, name := range builtin.Names() {
		p, err := script.LoadBuiltin(name)
		if err != nil {
			t.Fatal(err)
		}
		f, err := script.Flatten(p, script.Env{FieldModes: []string{"36 cm", "25 cm", "17 cm", "12 cm"}})
		if err != nil {
			t.Fatal(err)
		}
		var l Listener
		hear := func(id, text string) {
			for _, problem := range l.Hear(text) {
				t.Errorf("%s %s: %s\n  said: %q", name, id, problem, text)
			}
		}
		for _, s := range f.Steps {
			st := s.Step
			switch st.Kind {
			case script.KindSay:
				hear(s.ID, ForEar(st.Text))
			case script.KindPrepare:
				hear(s.ID, PromptText(panel.Prompt{Message: panel.Message{Text: st.Text}}, true))
			case script.KindChecklist, script.KindSafetyChecklist:
				if st.Text != "" {
					hear(s.ID, ForEar(st.Text))
				}
				for k, it := range st.Items {
					hear(fmt.Sprintf("%s line %d", s.ID, k+1), PromptText(panel.Prompt{Message: panel.Message{Text: it.Text}, Line: k + 1, Lines: len(st.Items)}, true))
				}
			case script.KindEnter:
				e := st.Enter
				def := e.Default
				if !e.HasDefault {
					def = e.Min // a bench file's default, as a foot-switch panel needs one
				}
				hear(s.ID, PromptText(panel.Prompt{Message: panel.Message{Text: st.Text}, Value: &panel.ValueRequest{Name: e.Name, Unit: e.Unit, Default: def, HasDefault: true}}, true))
			case script.KindMeasure:
				if st.Text != "" {
					hear(s.ID, PromptText(panel.Prompt{Message: panel.Message{Text: st.Text}}, true))
				}
			}
		}
	}
}
