package script

// includeField reads a key of an include step (its entry in kindTable).
func (ps *parse) includeField(s *Step, f field) {
	if s.Include == nil {
		s.Include = &IncludeSpec{}
	}
	switch f.key {
	case "procedure":
		s.Include.Procedure = ps.text(f, "procedure")
	case "once":
		s.Include.Once = ps.boolean(f, "once", "yes", "no")
	}
}
