package engine

import (
	"strings"

	"kermalux/procedures/script"
)

// FromFlat turns a checked, flattened script into the steps the engine
// walks. Meter names in the script's reads are the bench roles
// (dosimeter, photometer).
func FromFlat(f *script.Flat) Procedure {
	p := Procedure{BeamBudget: f.BeamBudget}
	if f.Procedure != nil {
		p.Name, p.Title, p.Hash = f.Procedure.Name, f.Procedure.Title, f.Procedure.SHA256
	}
	for _, fs := range f.Steps {
		s := fs.Step
		st := Step{ID: fs.ID, Procedure: fs.Procedure, Part: fs.Part, PartTitle: fs.PartTitle, FieldMode: fs.FieldMode, Text: s.Text, Setup: s.Setup.Map()}
		for _, pl := range fs.Pools {
			st.Pools = append(st.Pools, BeamPool{ID: pl.ID, Budget: pl.Budget})
		}
		if c, ok := fromScript[s.Kind]; ok {
			st.Kind = c.kind
			if c.convert != nil {
				c.convert(&s, &st)
			}
		}
		p.Steps = append(p.Steps, st)
	}
	return p
}

// fromScript is the engine's side of the table of step kinds
// (procedures/script/kinds.go): for each kind a flat script step can have
// (every script.Kinds entry that does not expand), the engine's kind and
// the conversion of the kind's own part. A new kind gets its entry here,
// beside what the engine does with it.
var fromScript = map[script.StepKind]struct {
	kind    StepKind
	convert func(s *script.Step, st *Step)
}{
	script.KindSay:             {kind: Say},
	script.KindPrepare:         {kind: Prepare},
	script.KindChecklist:       {Checklist, checklistFrom},
	script.KindSafetyChecklist: {Checklist, checklistFrom},
	script.KindEnter:           {Enter, enterFrom},
	script.KindMeasure:         {Measure, measureFrom},
	script.KindCompute:         {Compute, computeFrom},
	script.KindJudge:           {Judge, judgeFrom},
}

func checklistFrom(s *script.Step, st *Step) {
	st.Safety = s.Kind == script.KindSafetyChecklist
	for _, it := range s.Items {
		st.Items = append(st.Items, it.Text)
	}
}

func enterFrom(s *script.Step, st *Step) {
	if e := s.Enter; e != nil {
		st.Value = &ValueRequest{Name: e.Name, Unit: e.Unit, Min: e.Min, Max: e.Max, Default: e.Default, HasDefault: e.HasDefault, Source: string(e.Source)}
	}
}

func measureFrom(s *script.Step, st *Step) {
	m := s.Measure
	if m == nil {
		return
	}
	ms := &MeasureSpec{Beam: m.Beam, BeamQuality: m.BeamQuality, Precision: m.Precision, MaxBeam: m.MaxBeam, MinBeam: m.MinBeam, Duration: m.Duration}
	for _, r := range m.Reads {
		ms.Meters = append(ms.Meters, strings.ToLower(r.Meter))
	}
	for _, ps := range m.Positions {
		ms.Positions = append(ms.Positions, Position{Label: ps.Label, Radius: ps.Radius, Angle: ps.Angle})
	}
	for _, x := range m.Expect {
		ms.Expect = append(ms.Expect, Expect{Quantity: string(x.Quantity), Min: x.Min, Max: x.Max})
	}
	if m.FieldMode != "" && st.FieldMode == "" {
		st.FieldMode = m.FieldMode
	}
	st.Measure = ms
}

func computeFrom(s *script.Step, st *Step) {
	c := s.Compute
	if c == nil {
		return
	}
	cs := &ComputeSpec{Figure: string(c.Figure), Inputs: map[string]string{}}
	for _, in := range c.Inputs {
		ref := in.Resolved
		if ref == "" {
			ref = in.Ref
		}
		cs.Inputs[in.Role] = ref
	}
	st.Compute = cs
}

func judgeFrom(s *script.Step, st *Step) {
	j := s.Judge
	if j == nil {
		return
	}
	js := &JudgeSpec{Result: j.Resolved}
	if js.Result == "" {
		js.Result = j.Result
	}
	for _, l := range j.Limits {
		js.Limits = append(js.Limits, JudgeLimit{Kind: string(l.Kind), Value: l.Value, Ref: l.Ref})
	}
	st.Judge = js
}
