package bench

import (
	"fmt"
	"os"
	"strings"
	"time"

	"kermalux/calib"
	"kermalux/drivers/units"
	"kermalux/firmware-host/journal/entry"
	"kermalux/procedures/engine"
	"kermalux/procedures/script"
)

// EngineLimits turns the bench's specification, action levels and baseline
// into the engine's limits (defaults for what the bench leaves out).
func (b *Bench) EngineLimits() (engine.Limits, error) {
	l := engine.DefaultLimits()
	l.Spec, l.Action, l.Inputs = map[string]engine.Limit{}, map[string]engine.Limit{}, map[string]float64{}
	put := func(m map[string]engine.Limit, prefix string, kv map[string]float64) error {
		for k, v := range kv {
			l.Inputs[prefix+"."+k] = v
			name, mode, _ := strings.Cut(k, "@")
			q, side := name, ""
			switch {
			case strings.HasSuffix(name, "_min"):
				q, side = strings.TrimSuffix(name, "_min"), "min"
			case strings.HasSuffix(name, "_max"):
				q, side = strings.TrimSuffix(name, "_max"), "max"
			default:
				return fmt.Errorf("%s.%s: the name must end in _min or _max", prefix, k)
			}
			key := q
			if mode != "" {
				key = q + "@" + mode
			}
			lim := m[key]
			if side == "min" {
				lim.Min, lim.HasMin = v, true
			} else {
				lim.Max, lim.HasMax = v, true
			}
			m[key] = lim
		}
		return nil
	}
	if err := put(l.Spec, "spec", b.Intensifier.Spec); err != nil {
		return l, fmt.Errorf("bench %s: intensifier.%w", b.Path, err)
	}
	if err := put(l.Action, "action", b.Limits.Action); err != nil {
		return l, fmt.Errorf("bench %s: limits.%w", b.Path, err)
	}
	if b.Limits.BaselineFraction > 0 {
		l.BaselineFraction = b.Limits.BaselineFraction
	}
	if b.Limits.KermaCeiling > 0 {
		l.KermaCeiling = b.Limits.KermaCeiling
	}
	if b.Limits.Precision > 0 {
		l.Target = b.Limits.Precision
	}
	if b.Intensifier.Baseline != "" {
		rf, err := engine.ReadResults(b.Rel(b.Intensifier.Baseline))
		if err != nil {
			return l, fmt.Errorf("bench %s: intensifier.baseline: %w", b.Path, err)
		}
		l.Baseline = engine.Baselines(rf)
	}
	return l, nil
}

// Correctors builds each meter's calibration from its certificate and the
// chamber geometry, and the certificate records for the session.
func (b *Bench) Correctors(certs map[string]*calib.Certificate, day time.Time) (map[string]engine.Corrector, []entry.CertRef) {
	out := map[string]engine.Corrector{}
	var refs []entry.CertRef
	for _, m := range b.Meters {
		c := certs[m.Role]
		cc := engine.CalibCorrector{Cert: c, Day: day}
		if m.Role == engine.Dosimeter {
			cc.Geometry = b.Geometry()
		}
		out[m.Role] = cc
		if c != nil {
			ref := entry.CertRef{ID: c.Number, Meter: m.Name, Model: c.Model, Serial: c.Serial, Laboratory: c.Laboratory,
				Calibrated: c.Calibrated, Due: c.Due, Valid: !day.Before(c.Calibrated) && !day.After(c.Due)}
			if data, err := os.ReadFile(b.Rel(m.Certificate)); err == nil {
				ref.SHA256 = sha256Hex(data)
			}
			refs = append(refs, ref)
		}
	}
	return out, refs
}

// Env is what the script checker knows of this bench.
func (b *Bench) Env() script.Env {
	q := map[string][]units.Quantity{}
	for _, m := range b.Meters {
		q[m.Role] = []units.Quantity{Quantity(m.Role)}
		if m.Name != m.Role {
			q[m.Name] = q[m.Role]
		}
	}
	return script.Env{Quantities: q, FieldModes: b.ModeNames()}
}

// Procedure loads the procedure name (a built-in's name or a script path;
// empty: the bench's sequence), checks it against the bench and flattens
// it. A procedure that fails the checker is refused with its problems.
func (b *Bench) Procedure(name string) (engine.Procedure, error) {
	if name == "" {
		name = b.Sequence
	}
	if name == "" {
		return engine.Procedure{}, fmt.Errorf("bench %s: no sequence named, and none given", b.Path)
	}
	env := b.Env()
	var p *script.Procedure
	var probs script.Problems
	if _, err := os.Stat(name); err == nil || strings.ContainsAny(name, "/.") {
		p, probs = script.CheckFile(name, env)
	} else {
		p, probs = script.CheckBuiltin(name, env)
	}
	if len(probs) > 0 {
		return engine.Procedure{}, fmt.Errorf("procedure %s refused by the checker: %w", name, probs)
	}
	flat, err := script.Flatten(p, env)
	if err != nil {
		return engine.Procedure{}, fmt.Errorf("procedure %s: %w", name, err)
	}
	proc := engine.FromFlat(flat)
	return proc, nil
}
