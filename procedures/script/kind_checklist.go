package script

// StandardSafetyItems are the lines of a safety_checklist step that lists
// no items of its own (common practice for fluoroscopy; local rules may
// ask for more).
var StandardSafetyItems = []string{
	"Lead apron and thyroid collar on.",
	"Nobody else in the room, unless behind a shield.",
	"Door warning light on.",
	"You are qualified and authorised to operate this unit.",
}

// standardItems gives a safety checklist without items of its own the
// standard lines.
func standardItems(s *Step) {
	if s.Items == nil {
		for _, t := range StandardSafetyItems {
			s.Items = append(s.Items, Item{Text: t, Pos: s.Pos})
		}
	}
}

// safetyChecklistAt notes where a pre-exposure safety checklist is in the run:
// no beam reading may come before the first.
func safetyChecklistAt(x *expander, at place) {
	pos := at.written.Pos
	x.safetyAll = append(x.safetyAll, pos)
	if x.safetyAt == nil {
		x.safetyAt = &pos
	}
}
