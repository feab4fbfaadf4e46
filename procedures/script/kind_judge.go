package script

import (
	"kermalux/drivers/units"
	"strings"
)

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
			l := JudgeLimit{Kind: k, Pos: g.vpos}
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

func (x *expander) judge(at place) {
	prefix, st, mode, modes := at.prefix, at.step, at.mode, at.modes
	j := st.Judge
	if j == nil || j.Result == "" {
		return
	}
	id, found := x.resolve(prefix, j.Result, mode, modes)
	if !found {
		x.errf(st.Fields["result"], "result refers to %q, which is not a step earlier in this procedure", j.Result)
		return
	}
	j.Resolved = id
	ref := x.steps[x.byID[id]].Step
	if ref.Kind != KindCompute || ref.Compute == nil {
		x.errf(st.Fields["result"], "result refers to %q, a %s step, not a compute step", j.Result, ref.Kind)
		return
	}
	fig := ref.Compute.Figure
	q := figureQuantity[fig]
	if q == "" && fig != FigConversionFactor {
		// dark_level and stability are in the unit of what was read.
		for _, in := range ref.Compute.Inputs {
			if i, ok := x.byID[in.Resolved]; ok && x.steps[i].Step.Measure != nil && len(x.steps[i].Step.Measure.Reads) > 0 {
				q = x.steps[i].Step.Measure.Reads[0].Quantity
			}
			if in.Role == "air_kerma_rate" || in.Role == "luminance" {
				q = units.Quantity(in.Role)
			}
		}
	}
	for i := range j.Limits {
		l := &j.Limits[i]
		if l.Ref != "" {
			ns, name, ok := strings.Cut(l.Ref, ".")
			if !ok || !contains(RefNamespaces, ns) || !validID(name) {
				x.errf(l.Pos, "%s: %q is neither a number nor a session value (spec.NAME, baseline.NAME, site.NAME, action.NAME, entered.NAME)", l.Kind, l.Ref)
				continue
			}
			if ns == "entered" && !x.entered[name] {
				x.errf(l.Pos, "%s refers to entered value %q, which no earlier enter step asks for", l.Kind, name)
			}
			continue
		}
		v, unit, err := limitValue(fig, q, *l)
		if err != nil {
			x.errf(l.Pos, "%s of %s: %v", l.Kind, fig, err)
			continue
		}
		l.Value, l.Unit = v, unit
	}
	lim := map[LimitKind]JudgeLimit{}
	for _, l := range j.Limits {
		lim[l.Kind] = l
	}
	for _, pair := range [][2]LimitKind{{SpecMin, SpecMax}, {BaselineMin, BaselineMax}, {ActionMin, ActionMax}} {
		lo, ok1 := lim[pair[0]]
		hi, ok2 := lim[pair[1]]
		if ok1 && ok2 && lo.Ref == "" && hi.Ref == "" && lo.Unit == hi.Unit && lo.Value > hi.Value {
			x.errf(lo.Pos, "%s is above %s", pair[0], pair[1])
		}
	}
}

// judgeInstance copies a judge step's spec for one run position, so
// that resolving its result and limits leaves the written step as it was.
func judgeInstance(x *expander, p *Procedure, s, st *Step, mode string) {
	if s.Judge != nil {
		j := *s.Judge
		j.Limits = append([]JudgeLimit(nil), s.Judge.Limits...)
		st.Judge = &j
	}
}
