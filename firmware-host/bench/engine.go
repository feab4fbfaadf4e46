package bench

import (
	"errors"
	"fmt"
	"math"
	"os"
	"strings"
	"time"

	"kermalux/calib"
	"kermalux/drivers"
	"kermalux/drivers/clock"
	"kermalux/drivers/units"
	"kermalux/procedures/engine"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
	"kermalux/procedures/script"
)

// legacyQuantities are result names bench files of earlier releases used
// in limits, with the name of the same quantity today.
var legacyQuantities = map[string]string{"kerma_mode_scaling": calib.QKermaScaling}

// ErrSimulatedBaseline refuses a simulated session's results.json as the
// baseline of a real bench: it has the shape of a real one, but its
// figures are the simulator's.
var ErrSimulatedBaseline = errors.New("the results of a simulated session (the demo) are not measurements and cannot be the baseline of a real intensifier; use the results.json of a real session")

// EngineSettings turns the bench's specification, action levels and baseline
// into the engine's settings (defaults for what the bench leaves out).
func (b *Bench) EngineSettings() (engine.Settings, error) {
	l := engine.DefaultSettings()
	l.Spec, l.Action, l.Inputs = map[string]engine.Range{}, map[string]engine.Range{}, map[string]float64{}
	put := func(m map[string]engine.Range, prefix string, kv map[string]float64) error {
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
			if now, ok := legacyQuantities[q]; ok {
				// A bench file of an earlier release: the same limit under
				// today's name, so it applies to the result it names.
				q = now
				l.Inputs[prefix+"."+strings.Replace(k, name, q+"_"+side, 1)] = v
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
		l.Precision = b.Limits.Precision
	}
	if b.Intensifier.Baseline != "" {
		rf, err := engine.ReadResults(b.Rel(b.Intensifier.Baseline))
		if err != nil {
			return l, fmt.Errorf("bench %s: intensifier.baseline: %w", b.Path, err)
		}
		if rf.Simulated && !b.Simulated {
			return l, fmt.Errorf("bench %s: intensifier.baseline %s: %w", b.Path, b.Intensifier.Baseline, ErrSimulatedBaseline)
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
			cc.TemperatureUnc, cc.PressureUnc = b.Defaults.TemperatureUncC, b.Defaults.PressureUncKPa
			if cc.TemperatureUnc == 0 {
				cc.TemperatureUnc = 0.5 / math.Sqrt(3)
			}
			if cc.PressureUnc == 0 {
				cc.PressureUnc = 0.2 / math.Sqrt(3)
			}
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
	// A foot-switch panel cannot enter a number: the checker then wants a
	// default for every value asked.
	env := script.Env{Quantities: q, FieldModes: b.ModeNames(), Values: b.Values(), HandsFree: b.Panel.Kind == "gpio"}
	if m := b.Messages(); !m.IsEnglish() {
		env.Texts = m
	}
	return env
}

// Procedure loads the procedure name (a built-in's name or a script path;
// empty: the bench's sequence), checks it against the bench and flattens
// it. A procedure that fails the checker is refused with its problems.
func (b *Bench) Procedure(name string) (engine.Procedure, error) {
	if name == "" && b.Sequence != "" {
		// The bench file's own sequence: a script path in it is relative
		// to the file, like every path in the file.
		name = b.Sequence
		if isScriptPath(name) {
			name = b.Rel(name)
		}
	}
	if name == "" {
		return engine.Procedure{}, fmt.Errorf("bench %s: no sequence named, and none given", b.Path)
	}
	env := b.Env()
	var p *script.Procedure
	var probs script.Problems
	if isScriptPath(name) {
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

// isScriptPath tells a procedure script's path from a built-in's name.
func isScriptPath(name string) bool {
	if _, err := os.Stat(name); err == nil {
		return true
	}
	return strings.ContainsAny(name, "/.")
}

// Config assembles the engine's configuration for a session on this
// bench: limits, certificates and corrections, defaults, session record.
// The meters, panel, journal and clock are opened by the caller.
func (b *Bench) Config(proc engine.Procedure, meters map[string]drivers.Meter, pan panel.Panel, j engine.Journal, clk clock.Clock, version string) (engine.Config, error) {
	day := clk.Now()
	lim, err := b.EngineSettings()
	if err != nil {
		return engine.Config{}, err
	}
	certs, problems, err := Certificates(b, day)
	if err != nil {
		return engine.Config{}, err
	}
	corr, refs := b.Correctors(certs, day)
	air, airProblems := b.roomAirFor(clk)
	return engine.Config{
		Procedure: proc, Meters: meters, Correctors: corr, Panel: pan, Journal: j, Clock: clk,
		Session: entry.Session{Site: b.Site, Room: b.Room, IntensifierModel: b.Intensifier.Model,
			IntensifierSerial: b.Intensifier.Serial, Engineer: b.Engineer, Procedure: proc.Name,
			ProcedureHash: proc.Hash, BenchHash: b.SHA256, SoftwareVersion: version, Started: day, Certificates: refs,
			Simulated: b.Simulated, TestType: b.TestType, Language: b.sessionLanguage(), XRay: b.xray(), Geometry: b.geometryRecord()},
		Values: b.Values(), CertProblems: problems, Warnings: append(b.Warnings(), airProblems...), Settings: lim, BootID: BootID(), FieldModes: b.modeDiameters(),
		RoomAir: air, Messages: b.engineMessages(),
	}, nil
}

// engineMessages is the bench's language for the engine; nil (not a nil
// *catalog.Catalog in the interface) for English.
func (b *Bench) engineMessages() engine.Messages {
	if m := b.Messages(); !m.IsEnglish() {
		return m
	}
	return nil
}

// sessionLanguage is the language journalled with a session: its code,
// empty for English (as sessions recorded before languages were).
func (b *Bench) sessionLanguage() string {
	if m := b.Messages(); !m.IsEnglish() {
		return m.Code()
	}
	return ""
}

// BootID is this boot's id (Linux), "unknown" elsewhere.
func BootID() string {
	b, err := os.ReadFile("/proc/sys/kernel/random/boot_id")
	if err != nil {
		return "unknown"
	}
	return strings.TrimSpace(string(b))
}

// Found says what the board found at start-up, for the standby greeting:
// "Dosimeter found, certificate valid until March 2027."
func (b *Bench) Found(meters map[string]drivers.Meter, day time.Time) string {
	m := b.Messages()
	tf := func(format string, a ...any) string { return fmt.Sprintf(m.Text(format), a...) }
	certs, _, _ := Certificates(b, day)
	var parts []string
	for _, mt := range b.Meters {
		s := m.Text(strings.ToUpper(mt.Role[:1]) + mt.Role[1:])
		c := certs[mt.Role]
		switch {
		case meters[mt.Role] == nil:
			parts = append(parts, tf("%s not found", s))
		case c == nil:
			parts = append(parts, tf("%s found, no certificate", s))
		case day.After(c.Due):
			parts = append(parts, tf("%s found, certificate expired", s))
		default:
			parts = append(parts, tf("%s found, certificate valid until %s", s, m.Text(c.Due.Format("January"))+" "+c.Due.Format("2006")))
		}
	}
	return strings.Join(parts, ". ") + "."
}

// Greeting is what the board says at standby, in the bench's language:
// what it found (Found) and the cue that starts, or resumes, the
// procedure titled title.
func (b *Bench) Greeting(meters map[string]drivers.Meter, day time.Time, title string, resume bool) string {
	m := b.Messages()
	format := "Ready. %s Press the switch to start %s."
	if resume {
		format = "Ready. %s Press the switch to resume %s."
	}
	return fmt.Sprintf(m.Text(format), b.Found(meters, day), m.Text(title))
}

func (b *Bench) modeDiameters() map[string]float64 {
	m := map[string]float64{}
	for _, f := range b.Intensifier.FieldModes {
		m[f.Name] = f.DiameterMM
	}
	return m
}

// xray is the session's record of the X-ray system (nil when the bench
// names none).
func (b *Bench) xray() *entry.XRaySystem {
	if b.XRay == (XRaySystem{}) {
		return nil
	}
	x := entry.XRaySystem(b.XRay)
	return &x
}

// geometryRecord is the session's record of the chamber's position.
func (b *Bench) geometryRecord() *entry.Geometry {
	c := b.Chamber
	return &entry.Geometry{SourceToChamberMM: c.SourceToChamberMM, SourceToInputMM: c.SourceToInputMM,
		AgainstFace: c.AgainstFace, Backscatter: c.Backscatter, GridRemoved: c.GridRemoved}
}
