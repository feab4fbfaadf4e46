package script

import (
	"fmt"
	"strings"
)

// maxModes bounds max_modes: no intensifier has more field modes.
const maxModes = 16

// repeatField reads a key of a per_field_mode step (its entry in kindTable).
func (ps *parse) repeatField(s *Step, f field) {
	if s.Repeat == nil {
		s.Repeat = &RepeatSpec{}
	}
	r := s.Repeat
	switch f.key {
	case "modes":
		if t, ok := ps.scalar(f.value); ok {
			if t != "bench" {
				ps.errf(f.vpos, "modes: expected a list of field modes or the word bench, found %q", t)
				return
			}
			r.FromBench = true
			return
		}
		items, ok := ps.list(f, "modes")
		if ok && len(items) == 0 {
			ps.errf(f.vpos, "modes: the list is empty")
		}
		seen := map[string]bool{}
		for _, it := range items {
			t, ok := ps.scalar(it)
			if !ok || t == "" {
				ps.errf(ps.pos(it), "modes: expected a field mode name, found %s", describe(it))
				continue
			}
			if seen[t] {
				ps.errf(ps.pos(it), "modes: %q listed twice", t)
			}
			if strings.ContainsAny(t, "@/{}") {
				ps.errf(ps.pos(it), "modes: %q: a mode name must not contain @, /, { or }", t)
			}
			seen[t] = true
			r.Modes = append(r.Modes, t)
		}
	case "max_modes":
		t := ps.text(f, "max_modes")
		var n int
		if _, err := fmt.Sscanf(t, "%d", &n); err != nil || n < 1 || n > maxModes || fmt.Sprint(n) != t {
			ps.errf(f.vpos, "max_modes: expected a whole number from 1 to %d, found %q", maxModes, t)
			return
		}
		r.MaxModes = n
	case "steps":
		items, ok := ps.list(f, "steps")
		if ok && len(items) == 0 {
			ps.errf(f.vpos, "steps: the block has no steps")
		}
		r.Steps = ps.steps(items, true)
	}
}
