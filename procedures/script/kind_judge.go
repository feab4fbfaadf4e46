package script

// judgeField reads a key of a judge step (its entry in kindTable).
func (ps *parse) judgeField(s *Step, f field) {
	if s.Judge == nil {
		s.Judge = &JudgeSpec{}
	}
	j := s.Judge
	switch f.key {
	case "result":
		j.Result = ps.text(f, "result")
	case "limits":
		fields, ok := ps.mapping(f.value, "limits")
		if !ok {
			return
		}
		if len(fields) == 0 {
			ps.errf(f.vpos, "limits: none given")
		}
		for _, g := range fields {
			k := LimitKind(g.key)
			switch k {
			case SpecMin, SpecMax, BaselineMin, BaselineMax, ActionMin, ActionMax:
			default:
				ps.errf(g.kpos, "unknown limit %q (expected min, max, baseline_min, baseline_max, action_min, action_max)", g.key)
				continue
			}
			t := ps.text(g, string(k))
			if t == "" {
				continue
			}
			l := Limit{Kind: k, Pos: g.vpos}
			if isRef(t) {
				l.Ref = t
			} else {
				v, unit, err := splitNumber(t)
				if err != nil {
					ps.errf(g.vpos, "%s: %v", k, err)
					continue
				}
				l.Value, l.Unit = v, unit
			}
			j.Limits = append(j.Limits, l)
		}
	}
}

// isRef reports whether a limit's text is a reference to a session input
// ("spec.conversion_factor_min") rather than a number.
func isRef(t string) bool {
	if t == "" {
		return false
	}
	c := t[0]
	return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z')
}

// Namespaces a limit may refer to: the session's specification values
// (from the intensifier's data sheet or the contract), its baseline (last
// accepted results), the site's own levels and action levels, and values
// entered earlier in the procedure.
var RefNamespaces = []string{"spec", "baseline", "site", "action", "entered"}
