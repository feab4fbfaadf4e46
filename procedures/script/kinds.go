package script

import (
	"strings"
)

// StepKind is a step's kind.
type StepKind string

// The step kinds.
const (
	// KindSay shows and speaks Text and goes on without waiting.
	KindSay StepKind = "say"
	// KindPrepare shows and speaks Text and the Setup wanted, then waits
	// for a press.
	KindPrepare StepKind = "prepare"
	// KindChecklist reads Items one at a time; each needs a press.
	KindChecklist StepKind = "checklist"
	// KindSafetyChecklist is the pre-exposure safety checklist: like
	// KindChecklist, and no beam step may come before one is acknowledged.
	KindSafetyChecklist StepKind = "safety_checklist"
	// KindEnter asks for a value (see ValueRequest).
	KindEnter StepKind = "enter"
	// KindMeasure takes readings (see MeasureSpec).
	KindMeasure StepKind = "measure"
	// KindCompute computes a figure of merit from earlier measurements.
	KindCompute StepKind = "compute"
	// KindJudge judges a computed result against limits.
	KindJudge StepKind = "judge"
	// KindPerFieldMode repeats its nested steps once for each field mode.
	KindPerFieldMode StepKind = "per_field_mode"
	// KindInclude runs another procedure's steps in its place.
	KindInclude StepKind = "include"
)

// kindDef is one entry of the table of step kinds: what the parser, the
// checker and Flatten know about a kind is here or in a function named
// here (kind_<kind>.go), so that a new kind is a new entry; the engine
// has the other side of the table, each kind's conversion (fromScript in
// procedures/engine/fromscript.go) beside what it does with the kind.
// DEVELOPERS.md, "How to add a step kind", lists the steps.
type kindDef struct {
	kind StepKind
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

	// static checks a written step once, within the procedure it is
	// written in (Check and Flatten); nil: nothing beyond the checks
	// every step has (its id, {mode} outside per_field_mode).
	static func(x *expander, p *Procedure, s *Step)
	// instance copies the kind's spec into a step's instance for one
	// place in the run, filling in what the place decides (a measure
	// step's defaults and field mode); nil: the kind has no spec.
	instance func(x *expander, p *Procedure, s, st *Step, mode string)
	// at checks an instance at its place in the run, against the steps
	// before it (references, the safety checklist before any beam); nil:
	// nothing to check there.
	at func(x *expander, at place)
	// expand stands for a kind that Flatten replaces by other steps
	// (per_field_mode, include): it expands the step in place and
	// returns the beam-on time the steps it stands for may use. Such a
	// kind never reaches the engine.
	expand func(x *expander, p *Procedure, prefix string, s *Step) beamUse
}

// place is a step at its place in the run: the step as written, its
// instance there, the include path it is under and its field mode
// within per_field_mode (empty outside; modes are the block's modes).
type place struct {
	prefix        string
	written, step *Step
	mode          string
	modes         []string
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
		{kind: KindSafetyChecklist, fields: []string{"text", "items"}, finish: standardItems, at: safetyChecklistAt},
		{kind: KindEnter, fields: []string{"text", "name", "unit", "range", "default", "source"},
			need: []string{"name", "unit", "range"}, parse: (*parse).enterField,
			static: enterStatic, instance: enterInstance, at: enterAt},
		{kind: KindMeasure, fields: []string{"text", "read", "beam", "beam_quality", "field_mode", "setup", "positions",
			"precision", "max_beam", "min_beam", "duration", "max_drift", "expect"},
			need: []string{"read", "beam"}, parse: (*parse).measureField,
			static: measureStatic, instance: measureInstance, at: measureAt},
		{kind: KindCompute, fields: []string{"text", "figure", "from"}, need: []string{"figure", "from"},
			parse: (*parse).computeField, instance: computeInstance, at: (*expander).compute},
		{kind: KindJudge, fields: []string{"text", "result", "limits"}, need: []string{"result", "limits"},
			parse: (*parse).judgeField, instance: judgeInstance, at: (*expander).judge},
		{kind: KindPerFieldMode, fields: []string{"modes", "max_modes", "steps"}, need: []string{"modes", "steps"},
			parse: (*parse).repeatField, expand: (*expander).repeat},
		{kind: KindInclude, fields: []string{"procedure", "once"}, need: []string{"procedure"},
			parse: (*parse).includeField, expand: (*expander).include},
	}
	for _, k := range kindTable {
		Kinds = append(Kinds, k.kind)
	}
}

// Kinds lists every step kind, in the order FORMAT.md describes them.
var Kinds []StepKind

// kindOf returns the table entry of a kind and whether there is one.
func kindOf(k StepKind) (*kindDef, bool) {
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
