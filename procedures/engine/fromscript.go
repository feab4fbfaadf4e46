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
		switch s.Kind {
		case script.KindSay:
			st.Kind = Announce
		case script.KindPrepare:
			st.Kind = Instruct
		case script.KindChecklist, script.KindSafetyChecklist:
			st.Kind = Checklist
			st.Safety = s.Kind == script.KindSafetyChecklist
			for _, it := range s.Items {
				st.Items = append(st.Items, it.Text)
			}
		case script.KindEnter:
			st.Kind = Enter
			if e := s.Enter; e != nil {
				st.Value = &ValueSpec{Name: e.Name, Unit: e.Unit, Min: e.Min, Max: e.Max, Default: e.Default, HasDef: e.HasDef, Source: string(e.Source)}
			}
		case script.KindMeasure:
			st.Kind = Measure
			if m := s.Measure; m != nil {
				ms := &MeasureSpec{Beam: m.Beam, Quality: m.BeamQuality, Target: m.Precision, MaxBeamOn: m.MaxBeam, Duration: m.Duration}
				for _, r := range m.Reads {
					ms.Meters = append(ms.Meters, strings.ToLower(r.Meter))
				}
				for _, ps := range m.Positions {
					ms.Positions = append(ms.Positions, Position{Label: ps.Label, R: ps.Radius, Angle: ps.Angle})
				}
				for _, x := range m.Expect {
					ms.Expect = append(ms.Expect, Expect{Quantity: string(x.Quantity), Min: x.Min, Max: x.Max})
				}
				if m.FieldMode != "" && st.FieldMode == "" {
					st.FieldMode = m.FieldMode
				}
				st.Measure = ms
			}
		case script.KindCompute:
			st.Kind = Compute
			if c := s.Compute; c != nil {
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
		case script.KindJudge:
			st.Kind = Judge
			if j := s.Judge; j != nil {
				js := &JudgeSpec{Result: j.Resolved}
				if js.Result == "" {
					js.Result = j.Result
				}
				for _, l := range j.Limits {
					js.Limits = append(js.Limits, JudgeLimit{Kind: string(l.Kind), Value: l.Value, Ref: l.Ref})
				}
				st.Judge = js
			}
		}
		p.Steps = append(p.Steps, st)
	}
	return p
}
