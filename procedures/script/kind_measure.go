package script

import (
	"github.com/goccy/go-yaml/ast"

	"kermalux/drivers/units"
)

// measureField reads a key of a measure step (its entry in kindTable).
func (ps *parse) measureField(s *Step, f field) {
	if s.Measure == nil {
		s.Measure = &MeasureSpec{}
	}
	m := s.Measure
	switch f.key {
	case "read":
		fields, ok := ps.mapping(f.value, "read")
		if !ok {
			return
		}
		for _, g := range fields {
			q := units.Quantity(ps.text(g, "read"))
			if q != units.AirKermaRate && q != units.AirKerma && q != units.Luminance {
				ps.errf(g.vpos, "read: unknown quantity %q for meter %q (a meter gives air_kerma_rate, air_kerma or luminance)", q, g.key)
				continue
			}
			m.Reads = append(m.Reads, Read{Meter: g.key, Quantity: q, Pos: g.kpos})
		}
		if len(fields) == 0 {
			ps.errf(f.vpos, "read: no meter named")
		}
	case "beam":
		m.Beam = ps.boolean(f, "beam", "on", "off")
	case "beam_quality":
		m.BeamQuality = ps.text(f, "beam_quality")
		if _, ok := beamQuality(m.BeamQuality); !ok {
			ps.errf(f.vpos, "beam_quality: unknown radiation quality %q (expected an IEC 61267 name: %s)", m.BeamQuality, qualityNames())
		}
	case "field_mode":
		m.FieldMode = ps.text(f, "field_mode")
	case "positions":
		items, ok := ps.list(f, "positions")
		if ok && len(items) == 0 {
			ps.errf(f.vpos, "positions: the list is empty")
		}
		for _, it := range items {
			if p, ok := ps.position(it); ok {
				m.Positions = append(m.Positions, p)
			}
		}
	case "precision":
		if v, ok := ps.fraction(f, "precision"); ok {
			m.Precision = v
		}
	case "max_beam":
		if v, ok := ps.duration(f, "max_beam"); ok {
			m.MaxBeam = v
		}
	case "duration":
		if v, ok := ps.duration(f, "duration"); ok {
			m.Duration = v
		}
	case "max_drift":
		if v, ok := ps.fraction(f, "max_drift"); ok {
			m.MaxDrift = v
		}
	case "expect":
		m.Expect = ps.expect(f)
	}
}

// position reads a photometer position: "centre", "up 0.9 r" or a
// mapping {label, radius, angle}.
func (ps *parse) position(n ast.Node) (Position, bool) {
	p := Position{Pos: ps.pos(n)}
	if t, ok := ps.scalar(n); ok {
		pp, err := positionOf(t)
		if err != nil {
			ps.errf(p.Pos, "position: %v", err)
			return p, false
		}
		pp.Pos = p.Pos
		return pp, true
	}
	fields, ok := ps.mapping(n, "position")
	if !ok {
		return p, false
	}
	var haveRadius bool
	for _, g := range fields {
		switch g.key {
		case "label":
			p.Label = ps.text(g, "label")
		case "radius":
			v, err := radiusOf(ps.text(g, "radius"))
			if err != nil {
				ps.errf(g.vpos, "position radius: %v", err)
				continue
			}
			p.Radius, haveRadius = v, true
		case "angle":
			v, err := angleOf(ps.text(g, "angle"))
			if err != nil {
				ps.errf(g.vpos, "position angle: %v", err)
				continue
			}
			p.Angle = v
		default:
			ps.errf(g.kpos, "unknown position field %q (expected label, radius, angle)", g.key)
		}
	}
	if p.Label == "" || !haveRadius {
		ps.errf(p.Pos, "position needs a label and a radius")
		return p, false
	}
	return p, true
}
