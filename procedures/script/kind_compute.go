package script

import (
	"strings"
)

// computeField reads a key of a compute step (its entry in kindTable).
func (ps *parse) computeField(s *Step, f field) {
	if s.Compute == nil {
		s.Compute = &ComputeSpec{}
	}
	c := s.Compute
	switch f.key {
	case "figure":
		c.Figure = Figure(ps.text(f, "figure"))
		if now, ok := legacyFigures[c.Figure]; ok {
			c.Figure = now
		}
		if _, ok := figureRoles[c.Figure]; !ok {
			ps.errf(f.vpos, "unknown figure %q (expected one of %s)", c.Figure, figureNames())
		}
	case "from":
		fields, ok := ps.mapping(f.value, "from")
		if !ok {
			return
		}
		for _, g := range fields {
			ref := ps.text(g, "from")
			c.Inputs = append(c.Inputs, Input{Role: g.key, Ref: ref, Pos: g.vpos})
		}
	}
}

func (x *expander) compute(at place) {
	prefix, st, mode, modes := at.prefix, at.step, at.mode, at.modes
	c := st.Compute
	if c == nil {
		return
	}
	roles, ok := figureRoles[c.Figure]
	if !ok {
		return
	}
	for i := range c.Inputs {
		in := &c.Inputs[i]
		var r *role
		for j := range roles {
			if roles[j].name == in.Role {
				r = &roles[j]
			}
		}
		if r == nil {
			var names []string
			for _, r := range roles {
				names = append(names, r.name)
			}
			x.errf(in.Pos, "%s takes no input %q (expected %s)", c.Figure, in.Role, strings.Join(names, ", "))
			continue
		}
		id, found := x.resolve(prefix, in.Ref, mode, modes)
		if !found {
			x.errf(in.Pos, "%s refers to %q, which is not a step earlier in this procedure", in.Role, in.Ref)
			continue
		}
		in.Resolved = id
		ref := x.steps[x.byID[id]].Step
		if ref.Kind != KindMeasure || ref.Measure == nil {
			x.errf(in.Pos, "%s refers to %q, a %s step, not a measure step", in.Role, in.Ref, ref.Kind)
			continue
		}
		m := ref.Measure
		if r.quantity != "" && !m.reads(r.quantity) {
			x.errf(in.Pos, "%s refers to %q, which does not read %s", in.Role, in.Ref, r.quantity)
		}
		if r.beam == 1 && !m.Beam {
			x.errf(in.Pos, "%s refers to %q, a dark reading (beam off); it needs a beam reading", in.Role, in.Ref)
		}
		if r.beam == -1 && m.Beam {
			x.errf(in.Pos, "%s refers to %q, a beam reading; it needs a dark reading (beam off)", in.Role, in.Ref)
		}
		if c.Figure == FigNonUniformity && r.name == "luminance" && len(m.Positions) < 2 {
			x.errf(in.Pos, "non_uniformity needs a luminance measurement at several positions; %q has %d", in.Ref, len(m.Positions))
		}
		if c.Figure == FigStability && m.Duration == 0 {
			x.errf(in.Pos, "stability needs a measurement over a fixed duration; %q has no duration", in.Ref)
		}
	}
	for _, r := range roles {
		if _, ok := c.Input(r.name); !ok && !r.optional {
			x.errf(st.Fields["from"], "%s needs input %q", c.Figure, r.name)
		}
	}
	if (c.Figure == FigStability || c.Figure == FigDarkLevel) && len(c.Inputs) != 1 {
		x.errf(st.Fields["from"], "%s takes one input: reading (a step that reads one meter), or air_kerma_rate or luminance (the meter among several read together)", c.Figure)
	}
	if c.Figure == FigStability || c.Figure == FigDarkLevel {
		if in, ok := c.Input("reading"); ok {
			if i, ok := x.byID[in.Resolved]; ok && x.steps[i].Step.Measure != nil && len(x.steps[i].Step.Measure.Reads) > 1 {
				x.errf(in.Pos, "%s: %q reads several meters; name the one meant by its quantity (air_kerma_rate: or luminance:) instead of reading:", c.Figure, in.Ref)
			}
		}
	}
}

// computeInstance copies a compute step's spec for one run position, so
// that resolving its inputs leaves the written step as it was.
func computeInstance(x *expander, p *Procedure, s, st *Step, mode string) {
	if s.Compute != nil {
		c := *s.Compute
		c.Inputs = append([]Input(nil), s.Compute.Inputs...)
		st.Compute = &c
	}
}
