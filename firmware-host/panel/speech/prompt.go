package speech

import (
	"fmt"
	"strconv"
	"strings"

	"kermalux/procedures/panel"
)

// PromptText is what the board says for a prompt in English, as the
// synthesiser gets it (Ear.PromptText).
func PromptText(pr panel.Prompt, offer bool) string { return (*Ear)(nil).PromptText(pr, offer) }

// PromptText is what the board says for a prompt, as the synthesiser gets
// it (rewritten by ForEar in the ear's language): the prompt's words with
// its checklist line ("Line 2 of 4."), and, when offer is set (a
// foot-switch panel, where a press accepts the offered value), the value
// a press accepts followed by the one cue "Press to accept." (in the
// ear's language). A script's own closing cue is dropped there, so that
// the cue is never said twice.
func (e *Ear) PromptText(pr panel.Prompt, offer bool) string {
	text := pr.Spoken()
	if v := pr.Value; offer && v != nil && v.HasDefault {
		cue := e.Text(acceptCue)
		text = strings.TrimSpace(text)
		for _, c := range []string{cue, acceptCue} {
			text = strings.TrimSpace(strings.TrimSuffix(text, c))
		}
		text = fmt.Sprintf("%s %s %s. %s", text, strconv.FormatFloat(v.Default, 'g', -1, 64), v.Unit, cue)
	}
	return e.ForEar(text)
}

// acceptCue is the cue after an offered value (panel catalog).
const acceptCue = "Press to accept."
