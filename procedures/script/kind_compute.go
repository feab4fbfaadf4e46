package script

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
