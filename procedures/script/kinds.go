package script

import "strings"

// Kind is a step's kind.
type Kind string

// The step kinds.
const (
	// KindSay shows and speaks Text and goes on without waiting.
	KindSay Kind = "say"
	// KindPrepare shows and speaks Text and the Setup wanted, then waits
	// for a press.
	KindPrepare Kind = "prepare"
	// KindChecklist reads Items one at a time; each needs a press.
	KindChecklist Kind = "checklist"
	// KindSafetyChecklist is the pre-exposure safety checklist: like
	// KindChecklist, and no beam step may come before one is acknowledged.
	KindSafetyChecklist Kind = "safety_checklist"
	// KindEnter asks for a value (see EnterSpec).
	KindEnter Kind = "enter"
	// KindMeasure takes readings (see MeasureSpec).
	KindMeasure Kind = "measure"
	// KindCompute computes a figure of merit from earlier measurements.
	KindCompute Kind = "compute"
	// KindJudge judges a computed result against limits.
	KindJudge Kind = "judge"
	// KindPerFieldMode repeats its nested steps once for each field mode.
	KindPerFieldMode Kind = "per_field_mode"
	// KindInclude runs another procedure's steps in its place.
	KindInclude Kind = "include"
)

// kindDef is one entry of the table of step kinds: what the parser, the
// checker and Flatten know about a kind is here or in a function named
// here, so that a new kind is a new entry (and, in the engine, its
// conversion in engine.FromFlat and what the engine does with it).
type kindDef struct {
	kind Kind
	// fields are the keys a step of the kind may have besides id and
	// kind, in the order FORMAT.md lists them; need are those it must
	// have.
	fields, need []string
	// parse reads one of the kind's keys into the step, after the keys
	// every kind shares (text, setup, items) have been read into the
	// step's own fields; nil for a kind that has no keys of its own.
	parse func(ps *parse, s *Step, f field)
	// finish completes a step once all its keys have been read (the
	// safety checklist's standard lines); nil: nothing to do.
	finish func(s *Step)
}

// kindTable is every step kind, in the order FORMAT.md describes them. It
// is filled in by init: its parse functions read nested steps through the
// table.
var kindTable []kindDef

func init() {
	kindTable = []kindDef{
		{kind: KindSay, fields: []string{"text"}, need: []string{"text"}},
		{kind: KindPrepare, fields: []string{"text", "setup"}, need: []string{"text"}},
		{kind: KindChecklist, fields: []string{"text", "items"}, need: []string{"items"}},
		{kind: KindSafetyChecklist, fields: []string{"text", "items"}, finish: standardItems},
		{kind: KindEnter, fields: []string{"text", "name", "unit", "range", "default", "source"},
			need: []string{"name", "unit", "range"}, parse: (*parse).enterField},
		{kind: KindMeasure, fields: []string{"text", "read", "beam", "beam_quality", "field_mode", "setup", "positions",
			"precision", "max_beam", "duration", "max_drift", "expect"},
			need: []string{"read", "beam"}, parse: (*parse).measureField},
		{kind: KindCompute, fields: []string{"text", "figure", "from"}, need: []string{"figure", "from"}, parse: (*parse).computeField},
		{kind: KindJudge, fields: []string{"text", "result", "limits"}, need: []string{"result", "limits"}, parse: (*parse).judgeField},
		{kind: KindPerFieldMode, fields: []string{"modes", "max_modes", "steps"}, need: []string{"modes", "steps"}, parse: (*parse).repeatField},
		{kind: KindInclude, fields: []string{"procedure", "once"}, need: []string{"procedure"}, parse: (*parse).includeField},
	}
	for _, k := range kindTable {
		Kinds = append(Kinds, k.kind)
	}
}

// Kinds lists every step kind, in the order FORMAT.md describes them.
var Kinds []Kind

// kindOf returns the table entry of a kind and whether there is one.
func kindOf(k Kind) (*kindDef, bool) {
	for i := range kindTable {
		if kindTable[i].kind == k {
			return &kindTable[i], true
		}
	}
	return nil, false
}

func kindNames() string {
	var s []string
	for _, k := range Kinds {
		s = append(s, string(k))
	}
	return strings.Join(s, ", ")
}

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
