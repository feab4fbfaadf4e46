// Package engineplan turns a checked, flattened procedure script into the
// procedure the run engine walks. It is the one place that knows both
// shapes, so the script format and the engine can change independently.
package engineplan

import (
	"fmt"

	"kermalux/procedures/engine"
	"kermalux/procedures/script"
)

// kinds maps script step kinds to engine step kinds.
var kinds = map[script.Kind]engine.StepKind{
	script.KindSay:             engine.Announce,
	script.KindPrepare:         engine.Instruct,
	script.KindChecklist:       engine.Checklist,
	script.KindSafetyChecklist: engine.Checklist,
	script.KindEnter:           engine.Enter,
	script.KindMeasure:         engine.Measure,
	script.KindCompute:         engine.Compute,
	script.KindJudge:           engine.Judge,
}

// FromFlat converts a flattened procedure (from script.Flatten, which
// refuses a procedure the checker rejects).
func FromFlat(f *script.Flat) (engine.Procedure, error) {
	if f == nil || f.Procedure == nil {
		return engine.Procedure{}, fmt.Errorf("engineplan: no procedure")
	}
	p := engine.Procedure{
		Name:       f.Procedure.Name,
		Title:      f.Procedure.Title,
		Hash:       f.Procedure.SHA256,
		BeamBudget: f.BeamBudget,
	}
	for _, fs := range f.Steps {
		s, err := step(fs)
		if err != nil {
			return engine.Procedure{}, fmt.Errorf("engineplan: step %d of %d (%s): %w", fs.Index, fs.Of, fs.ID, err)
		}
		p.Steps = append(p.Steps, s)
	}
	return p, nil
}

func step(fs script.FlatStep) (engine.Step, error) {
	st := fs.Step
	k, ok := kinds[st.Kind]
	if !ok {
		return engine.Step{}, fmt.Errorf("step kind %q cannot be run (not flattened?)", st.Kind)
	}
	s := engine.Step{
		ID:        fs.ID,
		Kind:      k,
		Procedure: fs.Procedure,
		FieldMode: fs.FieldMode,
		Text:      st.Text,
		Setup:     st.Setup.Map(),
		Safety:    st.Kind == script.KindSafetyChecklist,
	}
	for _, it := range st.Items {
		s.Items = append(s.Items, it.Text)
	}
	switch st.Kind {
	case script.KindEnter:
		e := st.Enter
		if e == nil {
			return s, fmt.Errorf("enter step without its value")
		}
		s.Value = &engine.ValueSpec{Name: e.Name, Unit: e.Unit, Min: e.Min, Max: e.Max,
			Default: e.Default, HasDef: e.HasDef, Source: string(e.Source)}
	case script.KindMeasure:
		m := st.Measure
		if m == nil {
			return s, fmt.Errorf("measure step without its readings")
		}
		if m.FieldMode != "" {
			s.FieldMode = m.FieldMode
		}
		ms := &engine.MeasureSpec{Beam: m.Beam, Quality: m.BeamQuality, Target: m.Precision,
			MaxBeamOn: m.MaxBeam, Duration: m.Duration}
		for _, r := range m.Reads {
			ms.Meters = append(ms.Meters, r.Meter)
		}
		for _, p := range m.Positions {
			ms.Positions = append(ms.Positions, engine.Position{Label: p.Label, R: p.Radius, Angle: p.Angle})
		}
		for _, e := range m.Expect {
			ms.Expect = append(ms.Expect, engine.Expect{Quantity: string(e.Quantity), Min: e.Min, Max: e.Max})
		}
		s.Measure = ms
	case script.KindCompute:
		c := st.Compute
		if c == nil {
			return s, fmt.Errorf("compute step without its figure")
		}
		cs := &engine.ComputeSpec{Figure: string(c.Figure), Inputs: map[string]string{}}
		for _, in := range c.Inputs {
			if in.Resolved == "" {
				return s, fmt.Errorf("input %s not resolved (use script.Flatten)", in.Role)
			}
			cs.Inputs[in.Role] = in.Resolved
		}
		s.Compute = cs
	case script.KindJudge:
		j := st.Judge
		if j == nil || j.Resolved == "" {
			return s, fmt.Errorf("judge step without a resolved result (use script.Flatten)")
		}
		js := &engine.JudgeSpec{Result: j.Resolved}
		for _, l := range j.Limits {
			js.Limits = append(js.Limits, engine.JudgeLimit{Kind: string(l.Kind), Value: l.Value, Ref: l.Ref})
		}
		s.Judge = js
	}
	return s, nil
}
