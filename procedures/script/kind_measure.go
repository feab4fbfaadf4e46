package script

import (
	"cmp"
	"sort"
	"strings"
	"time"

	"github.com/goccy/go-yaml/ast"

	"kermalux/drivers/units"
)

// measureField reads a key of a measure step (its entry in kindTable).
func (ps *parse) measureField(s *Step, f field) {
	if s.Measure == nil {
		s.Measure = &MeasureSpec{}
	}
	m := s.Measure
	if ps.measureShared(f, &m.Precision, &m.MaxBeam, &m.MinBeam, &m.Expect) {
		return
	}
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
	case "duration":
		if v, ok := ps.duration(f, "duration"); ok {
			m.Duration = v
		}
	case "max_drift":
		if v, ok := ps.fraction(f, "max_drift"); ok {
			m.MaxDrift = v
		}
	}
}

// measureSharedKeys are the keys a measure step and the procedure's
// defaults both take (the step's own value wins: measureInstance).
var measureSharedKeys = []string{"precision", "max_beam", "min_beam", "expect"}

// measureShared reads one of measureSharedKeys into its field, a measure
// step's or the defaults'; it reports false for any other key.
func (ps *parse) measureShared(f field, precision *float64, maxBeam, minBeam *time.Duration, expect *[]Expect) bool {
	switch f.key {
	case "precision":
		if v, ok := ps.fraction(f, "precision"); ok {
			*precision = v
		}
	case "max_beam":
		if v, ok := ps.duration(f, "max_beam"); ok {
			*maxBeam = v
		}
	case "min_beam":
		if v, ok := ps.duration(f, "min_beam"); ok {
			*minBeam = v
		}
	case "expect":
		*expect = ps.expect(f)
	default:
		return false
	}
	return true
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

func (m *MeasureSpec) reads(q units.Quantity) bool {
	for _, r := range m.Reads {
		if r.Quantity == q {
			return true
		}
	}
	return false
}

// meterReports checks a read against the configured meters.
func (x *expander) meterReports(r Read) {
	qs, configured := x.env.Quantities[r.Meter]
	for _, q := range qs {
		if q == r.Quantity {
			return
		}
	}
	var any []string
	for name, qs := range x.env.Quantities {
		for _, q := range qs {
			if q == r.Quantity {
				any = append(any, name)
			}
		}
	}
	sort.Strings(any)
	switch {
	case len(any) == 0:
		x.errf(r.Pos, "no configured meter reports %s", r.Quantity)
	case !configured:
		x.errf(r.Pos, "meter %q is not configured on this bench (%s reports %s)", r.Meter, strings.Join(any, ", "), r.Quantity)
	default:
		x.errf(r.Pos, "meter %q does not report %s (%s does)", r.Meter, r.Quantity, strings.Join(any, ", "))
	}
}

// measureInstance copies a measure step's spec for one run position:
// {mode} and "largest" substituted in its field mode, the procedure's
// defaults filled in, the field mode and the beam quality's tube voltage
// and filter added to the setup when it does not say them.
func measureInstance(x *expander, p *Procedure, s, st *Step, mode string) {
	if s.Measure == nil {
		return
	}
	m := *s.Measure
	m.FieldMode = x.largest(subMode(m.FieldMode, mode))
	if m.FieldMode == "" {
		if fm, ok := st.Setup.Get(SetFieldMode); ok {
			m.FieldMode = fm
		} else {
			m.FieldMode = mode
		}
	}
	if m.Precision == 0 {
		m.Precision = p.Defaults.Precision
	}
	if m.MaxBeam == 0 && m.Beam {
		m.MaxBeam = p.Defaults.MaxBeam
	}
	if m.MinBeam == 0 && m.Beam {
		m.MinBeam = p.Defaults.MinBeam
	}
	if m.Expect == nil {
		m.Expect = p.Defaults.Expect
	}
	if m.FieldMode != "" {
		if _, ok := st.Setup.Get(SetFieldMode); !ok {
			st.Setup = append(st.Setup, Setting{Key: SetFieldMode, Value: m.FieldMode, Pos: s.Pos})
		}
	}
	if q, ok := beamQuality(m.BeamQuality); ok {
		if _, ok := st.Setup.Get(SetBeamQuality); !ok {
			st.Setup = append(st.Setup, Setting{Key: SetBeamQuality, Value: q.Name, Pos: s.Pos})
		}
		if _, ok := st.Setup.Get(SetTubeVoltage); !ok {
			st.Setup = append(st.Setup, Setting{Key: SetTubeVoltage, Value: formatNumber(q.TubeVoltage) + " kV", Pos: s.Pos})
		}
		if _, ok := st.Setup.Get(SetAddedFilter); !ok {
			st.Setup = append(st.Setup, Setting{Key: SetAddedFilter, Value: formatNumber(q.AddedAl) + " mm Al", Pos: s.Pos})
		}
	}
	st.Measure = &m

}

// measureStatic checks a written measure step once: its meters, and the
// safety fields of a beam reading (a bound on its beam-on time, an
// expected kerma rate range for the safety stop).
func measureStatic(x *expander, p *Procedure, s *Step) {
	m := s.Measure
	if m == nil {
		return
	}
	for _, r := range m.Reads {
		if !contains(p.Meters, r.Meter) {
			x.errf(r.Pos, "meter %q is not in the procedure's meters (%s)", r.Meter, strings.Join(p.Meters, ", "))
		}
		if x.env.Quantities != nil {
			x.meterReports(r)
		}
	}
	if m.Beam {
		_, wroteMax := s.Fields["max_beam"]
		_, wroteExpect := s.Fields["expect"]
		if m.MaxBeam == 0 && p.Defaults.MaxBeam == 0 && !wroteMax {
			x.errf(s.Pos, "beam step %q has no max_beam (and the procedure has no default): its beam-on time must be bounded", s.ID)
		}
		maxB, minB := cmp.Or(m.MaxBeam, p.Defaults.MaxBeam), cmp.Or(m.MinBeam, p.Defaults.MinBeam)
		if minB > 0 && maxB > 0 && minB > maxB {
			pos := s.Pos
			if fp, ok := s.Fields["min_beam"]; ok {
				pos = fp
			}
			x.errf(pos, "beam step %q keeps min_beam %s in reserve, more than its max_beam %s", s.ID, fmtDur(minB), fmtDur(maxB))
		}
		if m.reads(units.AirKermaRate) {
			exp := m.Expect
			if exp == nil {
				exp = p.Defaults.Expect
			}
			var ok bool
			for _, e := range exp {
				ok = ok || e.Quantity == units.AirKermaRate
			}
			if !ok && !wroteExpect {
				x.errf(s.Pos, "beam step %q reads air_kerma_rate with no expected range (expect: air_kerma_rate: LOW to HIGH µGy/s) for the out-of-range safety stop", s.ID)
			}
		}
	} else if m.BeamQuality != "" {
		x.errf(s.Fields["beam_quality"], "a dark reading (beam off) has no beam quality")
	}
	if m.Duration > 0 && len(m.Positions) > 1 {
		x.errf(s.Fields["duration"], "a fixed-duration reading takes one position, not %d", len(m.Positions))
	}
	if q, ok := beamQuality(m.BeamQuality); ok {
		if f, ok := s.Setup.Get(SetAddedFilter); ok {
			if want := formatNumber(q.AddedAl) + " mm Al"; f != want {
				x.errf(s.Setup.pos(SetAddedFilter), "added_filter %s does not match beam quality %s (%s)", f, q.Name, want)
			}
		}
	}
}

// measureAt notes a beam reading that comes before any pre-exposure
// safety checklist in the run.
func measureAt(x *expander, at place) {
	if m := at.step.Measure; m != nil && m.Beam && x.safetyAt == nil {
		x.earlyBeam = append(x.earlyBeam, at.written.Pos)
	}
}
