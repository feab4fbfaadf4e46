package report

import (
	"math"
	"sort"
	"strconv"
	"strings"
)

// directions maps the direction words of position labels to an angle in
// degrees, counter-clockwise from "right" (as the output face is seen by
// the photometer).
var directions = map[string]float64{
	"right": 0, "up-right": 45, "upper-right": 45, "right-up": 45,
	"up": 90, "top": 90, "up-left": 135, "upper-left": 135, "left-up": 135,
	"left": 180, "down-left": 225, "lower-left": 225, "left-down": 225,
	"down": 270, "bottom": 270, "down-right": 315, "lower-right": 315, "right-down": 315,
}

// ParsePosition reads a uniformity position label such as "centre",
// "up 0.9r", "down-left 0.5 r", "0.9r 45deg" or "r=0.5 a=135" as a
// fraction of the output radius and an angle in degrees counter-clockwise
// from "right". ok is false when the label is not a position.
func ParsePosition(label string) (r, angle float64, ok bool) {
	s := strings.ToLower(strings.TrimSpace(label))
	if s == "" {
		return 0, 0, false
	}
	switch s {
	case "centre", "center", "c", "0r", "0 r", "middle":
		return 0, 0, true
	}
	s = strings.NewReplacer("_", " ", ",", " ", "°", " deg", "=", " ").Replace(s)
	fields := strings.Fields(s)
	haveR, haveA := false, false
	for i := 0; i < len(fields); i++ {
		f := fields[i]
		next := func() (string, bool) {
			if i+1 < len(fields) {
				i++
				return fields[i], true
			}
			return "", false
		}
		switch {
		case f == "r" || f == "radius":
			if haveR { // "0.7 r": the unit of the number before
				continue
			}
			if v, ok2 := next(); ok2 {
				x, err := strconv.ParseFloat(strings.TrimSuffix(v, "r"), 64)
				if err != nil {
					return 0, 0, false
				}
				r, haveR = x, true
			}
		case f == "a" || f == "angle":
			if v, ok2 := next(); ok2 {
				x, err := strconv.ParseFloat(strings.TrimSuffix(v, "deg"), 64)
				if err != nil {
					return 0, 0, false
				}
				angle, haveA = x, true
			}
		case f == "deg" || f == "degrees" || f == "of" || f == "radius)" || f == "at":
		case strings.HasSuffix(f, "deg"):
			x, err := strconv.ParseFloat(strings.TrimSuffix(f, "deg"), 64)
			if err != nil {
				return 0, 0, false
			}
			angle, haveA = x, true
		case strings.HasSuffix(f, "r"):
			x, err := strconv.ParseFloat(strings.TrimSuffix(f, "r"), 64)
			if err != nil {
				if a, ok2 := directions[f]; ok2 {
					angle, haveA = a, true
					continue
				}
				return 0, 0, false
			}
			r, haveR = x, true
		default:
			if a, ok2 := directions[f]; ok2 {
				angle, haveA = a, true
				continue
			}
			if x, err := strconv.ParseFloat(f, 64); err == nil {
				if i+1 < len(fields) && (fields[i+1] == "deg" || fields[i+1] == "degrees") {
					angle, haveA = x, true
					i++
					continue
				}
				if !haveR {
					r, haveR = x, true
					continue
				}
				angle, haveA = x, true
				continue
			}
			return 0, 0, false
		}
	}
	if !haveR || r < 0 || r > 1.5 || math.IsNaN(r) || math.IsNaN(angle) || math.IsInf(angle, 0) {
		return 0, 0, false
	}
	if r == 0 {
		return 0, 0, true
	}
	if !haveA {
		return 0, 0, false
	}
	angle = math.Mod(angle, 360)
	if angle < 0 {
		angle += 360
	}
	return r, angle, true
}

// luminanceMaps groups the used luminance readings taken at named
// positions by field mode. A group becomes a map when it has at least three
// distinct positions (a centre reading alone, or the lead-disk pair, is not
// a map). Readings of dark or lead-disk steps are left out.
func luminanceMaps(readings []Reading) []LuminanceMap {
	type acc struct {
		sum  float64
		n    int
		unit string
	}
	byMode := map[string]map[string]*acc{}
	var modes []string
	order := map[string][]string{}
	for _, rd := range readings {
		if !rd.Used || rd.Position == "" || rd.Quantity != "luminance" || rd.Status != "ok" && rd.Status != "" {
			continue
		}
		id := strings.ToLower(rd.StepID)
		if strings.Contains(id, "dark") || strings.Contains(id, "disk") || strings.Contains(id, "contrast") {
			continue
		}
		m, ok := byMode[rd.FieldMode]
		if !ok {
			m = map[string]*acc{}
			byMode[rd.FieldMode] = m
			modes = append(modes, rd.FieldMode)
		}
		a, ok := m[rd.Position]
		if !ok {
			a = &acc{unit: rd.Unit}
			m[rd.Position] = a
			order[rd.FieldMode] = append(order[rd.FieldMode], rd.Position)
		}
		a.sum += rd.Value
		a.n++
	}
	var out []LuminanceMap
	for _, mode := range modes {
		m := byMode[mode]
		if len(m) < 3 {
			continue
		}
		lm := LuminanceMap{FieldMode: mode}
		for _, label := range order[mode] {
			a := m[label]
			p := MapPoint{Label: label, Mean: a.sum / float64(a.n), N: a.n}
			p.R, p.AngleDeg, p.Placed = ParsePosition(label)
			if p.Placed && p.R == 0 {
				lm.Centre = p.Mean
			}
			lm.Unit = a.unit
			lm.Points = append(lm.Points, p)
		}
		if lm.Centre > 0 {
			for i := range lm.Points {
				lm.Points[i].Fraction = lm.Points[i].Mean / lm.Centre
			}
			lm.Profile = radialProfile(lm.Points)
		}
		out = append(out, lm)
	}
	return out
}

// radialProfile averages the fraction of centre over the positions at each
// radius (rounded to 0.01 r).
func radialProfile(points []MapPoint) []ProfilePoint {
	by := map[float64]*ProfilePoint{}
	for _, p := range points {
		if !p.Placed {
			continue
		}
		key := math.Round(p.R*100) / 100
		pp, ok := by[key]
		if !ok {
			pp = &ProfilePoint{R: key, Min: p.Fraction, Max: p.Fraction}
			by[key] = pp
		}
		pp.Fraction += p.Fraction
		pp.Min = math.Min(pp.Min, p.Fraction)
		pp.Max = math.Max(pp.Max, p.Fraction)
		pp.N++
	}
	out := make([]ProfilePoint, 0, len(by))
	for _, pp := range by {
		pp.Fraction /= float64(pp.N)
		out = append(out, *pp)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].R < out[j].R })
	return out
}
