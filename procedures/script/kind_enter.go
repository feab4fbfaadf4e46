package script

import "kermalux/drivers/units"

// enterField reads a key of an enter step (its entry in kindTable); the
// range and default are converted into the step's unit once it is known.
func (ps *parse) enterField(s *Step, f field) {
	if s.Enter == nil {
		s.Enter = &EnterSpec{Source: FromOperator}
	}
	e := s.Enter
	switch f.key {
	case "name":
		e.Name = ps.text(f, "name")
		if e.Name != "" && !validID(e.Name) {
			ps.errf(f.vpos, "value name %q: use letters, digits and underscores", e.Name)
		}
	case "unit":
		e.Unit = ps.text(f, "unit")
		q, err := units.QuantityOf(e.Unit)
		if err != nil {
			ps.errf(f.vpos, "unit: %v", err)
			return
		}
		e.Quantity = q
	case "range":
		lo, hi, unit, ok := ps.rangeOf(f, "range")
		if !ok {
			return
		}
		e.Min, e.Max = lo, hi
		e.rangeUnit, e.rangePos = unit, f.vpos
	case "default":
		v, unit, ok := ps.number(f, "default")
		if ok {
			e.Default, e.HasDef = v, true
			e.defUnit = unit
		}
	case "source":
		src := Source(ps.text(f, "source"))
		switch src {
		case FromOperator, FromBench, FromSensor:
			e.Source = src
		default:
			ps.errf(f.vpos, "source: expected operator, bench or sensor, found %q", src)
		}
	}
	// Units of range and default are checked once the unit is known.
	if e.Unit != "" && e.Quantity != "" {
		if e.rangeUnit != "" && !e.rangeChecked {
			e.rangeChecked = true
			ps.convertEntered(e, &e.Min, e.rangeUnit, e.rangePos, "range")
			ps.convertEntered(e, &e.Max, e.rangeUnit, e.rangePos, "range")
		}
		if e.defUnit != "" && !e.defChecked {
			e.defChecked = true
			ps.convertEntered(e, &e.Default, e.defUnit, e.rangePos, "default")
		}
	}
}

// convertEntered converts v from unit into the entered value's own unit.
func (ps *parse) convertEntered(e *EnterSpec, v *float64, unit string, p Pos, what string) {
	if unit == e.Unit {
		return
	}
	c, err := units.ToCanonical(e.Quantity, *v, unit)
	if err != nil {
		ps.errf(p, "%s: %v", what, err)
		return
	}
	c, err = units.FromCanonical(e.Quantity, c, e.Unit)
	if err != nil {
		ps.errf(p, "%s: %v", what, err)
		return
	}
	*v = c
}
