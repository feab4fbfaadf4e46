package script

import "kermalux/drivers/units"

// enterField reads a key of an enter step (its entry in kindTable); the
// range and default are converted into the step's unit once it is known.
func (ps *parse) enterField(s *Step, f field) {
	if s.Enter == nil {
		s.Enter = &ValueRequest{Source: FromOperator}
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
			e.Default, e.HasDefault = v, true
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
func (ps *parse) convertEntered(e *ValueRequest, v *float64, unit string, p Pos, what string) {
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

// enterOnBench checks an enter step against the bench: a value the script
// says comes from the bench must be in the bench file, and on a panel that
// cannot enter a number (the foot switch) every value needs a default, from
// the script or the bench; otherwise the session would stop at that step,
// perhaps after many exposures.
func (x *expander) enterOnBench(s *Step, e *ValueRequest) {
	if x.env.Values == nil {
		return
	}
	_, onBench := x.env.Values[e.Name]
	pos := s.Fields["source"]
	if pos.Line == 0 {
		pos = s.Pos
	}
	switch {
	case e.Source == FromBench && !onBench:
		x.errf(pos, "%s comes from the bench file (source: bench), which gives no value for it%s", e.Name, benchKeyHint(e.Name))
	case x.env.HandsFree && !e.HasDefault && !onBench:
		x.errf(s.Pos, "%s has no default and the bench's panel is a foot switch, which cannot enter a number: give the step a default, or the bench file a value%s", e.Name, benchKeyHint(e.Name))
	}
}

// benchKeyHint names the bench file key that gives a value, when there is one.
func benchKeyHint(name string) string {
	if k, ok := BenchValueKeys[name]; ok {
		return " (defaults: " + k + ")"
	}
	return ""
}

// BenchValueKeys are the bench file's keys (under defaults:) for the values
// enter steps ask for, by value name.
var BenchValueKeys = map[string]string{
	"temperature":        "temperature_c",
	"pressure":           "pressure_kpa",
	"tube_voltage":       "tube_voltage_kv",
	"tube_current":       "tube_current_ma",
	"lead_disk_diameter": "lead_disk_diameter_mm",
}

// enterInstance copies an enter step's spec for one run position.
func enterInstance(x *expander, p *Procedure, s, st *Step, mode string) {
	if s.Enter != nil {
		e := *s.Enter
		st.Enter = &e
	}
}

// enterStatic checks a written enter step once: its default is within
// its range.
func enterStatic(x *expander, p *Procedure, s *Step) {
	e := s.Enter
	if e != nil && e.HasDefault && (e.Default < e.Min || e.Default > e.Max) {
		x.errf(s.Fields["default"], "default %s %s is outside the range %s to %s", formatNumber(e.Default), e.Unit, formatNumber(e.Min), formatNumber(e.Max))
	}
}

// enterAt notes the value an enter step asks for (judge limits may refer
// to it as entered.NAME) and checks the step against the bench.
func enterAt(x *expander, at place) {
	if e := at.step.Enter; e != nil {
		x.entered[e.Name] = true
		x.enterOnBench(at.written, e)
	}
}
