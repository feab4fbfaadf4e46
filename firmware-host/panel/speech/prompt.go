package speech

import (
	"fmt"
	"strconv"
	"strings"

	"kermalux/procedures/panel"
)

// PromptText is what the board says for a prompt, as the synthesiser gets
// it (rewritten by ForEar): the prompt's words with its checklist line
// ("Line 2 of 4."), and, when offer is set (a foot-switch panel, where a
// press accepts the offered value), the value a press accepts followed by
// the one cue "Press to accept.". A script's own closing "Press to
// accept." is dropped there, so that the cue is never said twice.
func PromptText(pr panel.Prompt, offer bool) string {
	text := pr.Spoken()
	if v := pr.Value; offer && v != nil && v.HasDef {
		text = strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(text), acceptCue))
		text = fmt.Sprintf("%s %s %s. %s", text, strconv.FormatFloat(v.Default, 'g', -1, 64), v.Unit, acceptCue)
	}
	return ForEar(text)
}

const acceptCue = "Press to accept."
