package engine

import (
	"context"
	"fmt"
	"math"
	"slices"
	"strconv"
	"strings"
	"time"

	"kermalux/calib"
	"kermalux/drivers"
	"kermalux/drivers/units"
	"kermalux/procedures/entry"
	"kermalux/procedures/panel"
)

// CalibCorrector applies a meter's certificate and the bench geometry
// through package calib, in calib's documented order.
type CalibCorrector struct {
	Cert     *calib.Certificate // nil: no certificate (readings flagged)
	Geometry calib.Geometry     // dosimeter only
	Day      time.Time          // session day for certificate validity; zero: the reading's wall time
	// Standard uncertainties of the room thermometer (°C) and barometer
	// (kPa) whose readings enter k_TP; 0: no budget row.
	TemperatureUnc, PressureUnc float64
	// Meter is what the meter reported about itself (set by
	// BindIdentity at the start of a session); nil: not identified, and
	// then the certificate is not applied.
	Meter *drivers.Identity
}

// Correct implements Corrector.
func (cc CalibCorrector) Correct(r drivers.Reading, c Conditions) Corrected {
	s := calib.Setup{Cert: cc.Cert, Day: cc.Day, Geometry: cc.Geometry, Meter: cc.Meter}
	if s.Day.IsZero() {
		s.Day = r.Wall
	}
	if q, ok := calib.RQA(c.BeamQuality); ok {
		s.BeamQuality = q
	}
	if kv, ok := c.Values["tube_voltage"]; ok && s.BeamQuality == (calib.BeamQuality{}) {
		s.BeamQuality.TubeVoltage = kv
	}
	s.Air = calib.Air{Temperature: math.NaN(), Pressure: math.NaN(), TemperatureUnc: cc.TemperatureUnc, PressureUnc: cc.PressureUnc}
	if t, ok := c.Values["temperature"]; ok {
		s.Air.Temperature = t
	}
	if p, ok := c.Values["pressure"]; ok {
		s.Air.Pressure = p
	}
	if u, ok := c.Unc["temperature"]; ok { // read by the room-air sensor
		s.Air.TemperatureUnc = u
	}
	if u, ok := c.Unc["pressure"]; ok {
		s.Air.PressureUnc = u
	}
	if c.Dark != nil && r.Quantity == units.Luminance {
		res := c.Dark.Resolution
		if res == 0 && cc.Cert != nil && cc.Meter != nil && cc.Cert.AppliesTo(*cc.Meter) == nil {
			res = cc.Cert.Resolution
		}
		u, dof := calib.DarkUncertainty(calib.Summary{N: c.Dark.N, Mean: c.Dark.Mean, SD: c.Dark.SD}, res)
		s.Dark = &calib.Dark{Value: c.Dark.Mean, StdUnc: u, DoF: dof, Note: c.Dark.Note}
	}
	if r.Quantity != units.AirKermaRate && r.Quantity != units.AirKerma {
		s.Geometry = calib.Geometry{}
	}
	out := calib.Correct(r.Value, r.Quantity, s)
	res := Corrected{Value: out.Value, Certificate: out.Certificate, Calibrated: out.Calibrated, Flags: calib.FlagTexts(out.Flags), TypeB: out.TypeB}
	if out.Certificate != "" && cc.Cert != nil {
		res.Resolution, res.Floor = cc.Cert.Resolution, cc.Cert.RangeFloor
	}
	res.Scale = 1
	for _, a := range out.Corrections {
		res.Scale *= a.Factor
	}
	if c.Dark != nil && c.Dark.Unknown && r.Quantity == units.Luminance {
		res.Calibrated = false
		res.Flags = append(res.Flags, "the dark reading was under range and the meter's range floor is not known: the dark light could not be subtracted, reading not calibrated")
	}
	for _, a := range out.Corrections {
		res.Corrections = append(res.Corrections, entry.Correction{Name: a.Name, Factor: a.Factor, Offset: a.Offset, Note: a.Note})
	}
	// Every type B component of the corrected value: the coefficient, the
	// resolution, and the thermometer and barometer through k_TP.
	res.RelStdUncB = out.RelStdUncB()
	return res
}

// measured turns the accepted samples of one position into calib's input.
func measured(p positionStats, lum bool) calib.Measured {
	if lum {
		m := p.Meters[Photometer]
		return calib.Measured{Name: "output luminance", Unit: units.Canonical(units.Luminance),
			Samples: calib.Summary{N: m.N, Mean: m.Mean, SD: m.U * math.Sqrt(float64(m.N))},
			TypeB:   p.parts(Photometer, m.B, "photometer calibration and resolution"), Calibrated: p.Calib}
	}
	m := p.Meters[Dosimeter]
	return calib.Measured{Name: "input air kerma rate", Unit: units.Canonical(units.AirKermaRate),
		Samples: calib.Summary{N: m.N, Mean: m.Mean, SD: m.U * math.Sqrt(float64(m.N))},
		TypeB:   p.parts(Dosimeter, m.B, "dosimeter calibration, resolution and air density (k_TP)"), Calibrated: p.Calib}
}

// settledMeasure is measured for a beam reading, with the residual of
// settling in its budget. The settling test admits a signal still
// approaching equilibrium at up to SettleSlope per second; over the
// sampling that follows, the mean of a first-order approach keeps a
// residual of at most about SettleSlope × SettleWindow / 2 (an estimate,
// from a first-order lag whose time constant is below the window). It is
// taken as a rectangular distribution of that half-width (JCGM 100:2008
// 4.3.7), u = a/√3, and is not a calibration component: it does not cancel
// in a ratio read with one meter.
//
// A position journalled by this release carries its residual from the
// data instead (positionStats.Settle, residualSettling): the remainder of the
// approach or drift the readings do not rule out, zero for a settled beam.
func (e *Engine) settledMeasure(p positionStats, lum bool) calib.Measured {
	m := measured(p, lum)
	l := e.cfg.Settings
	a := l.SettleSlope * l.SettleWindow.Seconds() / 2
	if p.Settle != nil {
		a = p.Settle[roleOf(lum)]
	}
	if a > 0 {
		m.TypeB = append(m.TypeB, calib.Component{Source: "residual settling of the reading", Rel: a / math.Sqrt(3)})
	}
	return m
}

func roleOf(lum bool) string {
	if lum {
		return Photometer
	}
	return Dosimeter
}

func relB(src string, rel float64) []calib.Component {
	if rel == 0 {
		return nil
	}
	return []calib.Component{{Source: src, Rel: rel, Calibration: true}}
}

// input finds the accepted measurement a compute step names for role.
func (e *Engine) input(s Step, role string) ([]positionStats, error) {
	id, ok := s.Compute.Inputs[role]
	if !ok {
		return nil, fmt.Errorf("needs a %s measurement", strings.ReplaceAll(role, "_", " "))
	}
	ps := e.st.meas[id]
	var out []positionStats
	for _, p := range ps {
		if p.Index >= 0 {
			out = append(out, p)
		}
	}
	if len(out) == 0 {
		return nil, fmt.Errorf("the %s measurement %s was not taken", strings.ReplaceAll(role, "_", " "), id)
	}
	return out, nil
}

// compute computes a figure of merit from accepted measurements (through
// calib), judges it against the bench's limits and says it.
func (e *Engine) compute(ctx context.Context, idx int, s Step) error {
	if s.Compute == nil {
		return fmt.Errorf("step %d (%s): compute step without a figure", idx, s.ID)
	}
	var res calib.Result
	var meter string // of a one-meter figure
	var err error
	fig := s.Compute.Figure
	if why := e.unmeasured(s); why != "" {
		return e.notMeasurableResult(ctx, idx, s, why)
	}
	switch fig {
	case "conversion_factor":
		var lp, kp []positionStats
		if lp, err = e.input(s, "luminance"); err == nil {
			if kp, err = e.input(s, "air_kerma_rate"); err == nil {
				res = calib.ConversionFactor(e.settledMeasure(lp[0], true), e.settledMeasure(kp[0], false), 0)
			}
		}
	case "input_kerma_rate":
		var kp []positionStats
		if kp, err = e.input(s, "air_kerma_rate"); err == nil {
			res = calib.KermaRate(e.settledMeasure(kp[0], false), 0)
		}
	case "contrast_ratio":
		var op, dp []positionStats
		if op, err = e.input(s, "open"); err == nil {
			if dp, err = e.input(s, "disk"); err == nil {
				disk := e.st.values["lead_disk_diameter"]
				if disk == 0 {
					disk = e.st.values["disk_diameter"]
				}
				mode := s.FieldMode
				if mode == "" {
					mode = op[0].Mode
				}
				field := e.cfg.FieldModes[resolveMode(e.cfg.FieldModes, mode)]
				res = calib.ContrastRatio(e.settledMeasure(op[0], true), e.settledMeasure(dp[0], true), disk, field, 0)
			}
		}
	case "non_uniformity":
		var lp []positionStats
		if lp, err = e.input(s, "luminance"); err == nil {
			var spots []calib.Spot
			modelled := e.positionDarks(lp)
			for i, p := range lp {
				m := e.settledMeasure(p, true)
				if md := modelled[i]; md.Source != "" {
					m.Samples.Mean += md.shift
					m.TypeB = append(m.TypeB, md.Component)
				}
				spots = append(spots, calib.Spot{Label: p.Label, Radius: p.Radius, Angle: p.Angle, Luminance: m})
			}
			res, err = calib.Uniformity(spots, 0)
			if err == nil && len(modelled) > 0 {
				res.Flags = append(res.Flags, calib.Flag{Code: calib.FlagDarkModel, Text: "positions without their own dark reading: dark modelled from the centre's, between unchanged and scaled by each position's light (calib.PositionDark)"})
			}
		}
	case calib.QKermaScaling, "kerma_mode_scaling": // the older name of the same figure
		if s.Compute.Inputs["air_kerma_rate"] == s.Compute.Inputs["reference"] {
			return &skipError{reason: "the reference field mode itself: no scaling"}
		}
		var kp, rp []positionStats
		if kp, err = e.input(s, "air_kerma_rate"); err == nil {
			if rp, err = e.input(s, "reference"); err == nil {
				mk, mr := kp[0].Mode, rp[0].Mode
				modes := []calib.Mode{
					{Name: mk, FieldDiameter: e.cfg.FieldModes[mk], Kerma: e.settledMeasure(kp[0], false)},
					{Name: mr, FieldDiameter: e.cfg.FieldModes[mr], Kerma: e.settledMeasure(rp[0], false)},
				}
				var rs []calib.Result
				if rs, err = calib.ModeScaling(modes, 0); err == nil && len(rs) > 0 {
					res = rs[0]
				} else if err == nil {
					err = fmt.Errorf("no scaling between %s and %s", mk, mr)
				}
			}
		}
	case "dark_level", "stability":
		// The input names the meter by its quantity when the reading took
		// several ("air_kerma_rate: dark"); "reading" takes the one read.
		role := "reading"
		for _, q := range []string{"air_kerma_rate", "luminance"} {
			if _, ok := s.Compute.Inputs[q]; ok {
				role = q
			}
		}
		var rp []positionStats
		if rp, err = e.input(s, role); err == nil {
			p := rp[0]
			_, lum := p.meter(Photometer)
			switch role {
			case "air_kerma_rate":
				lum = false
			case "luminance":
				lum = true
			}
			meter = roleOf(lum)
			m := measured(p, lum)
			// The level with its resolution and type B in the budget
			// (calib.Level); stability is a relative change, below.
			raw, haveRaw := p.Raw[roleOf(lum)]
			if haveRaw && raw.Printed && raw.Scale > 0 {
				// No certificate gave the resolution: the printed one.
				c := calib.ResolutionComponent(raw.Resolution * raw.Scale)
				c.Source = "display resolution (from the printed digits)"
				m.TypeB = append(m.TypeB, c)
			}
			res = calib.Level(fig, m, 0)
			if haveRaw {
				// The meter's range floor bounds what the level can show.
				res.Floor = raw.Floor * raw.Scale
				res.BelowFloor = raw.Under > 0
			}
			if fig == "stability" {
				drift, meter := p.Drift, Dosimeter
				if lum {
					meter = Photometer
				}
				if d, ok := p.Drifts[meter]; ok {
					drift = d
				}
				res = calib.Result{Quantity: fig, Value: drift, Unit: "1", K: 2, Calibrated: p.Calib}
			}
		}
	default:
		err = fmt.Errorf("figure %q is not known to the engine", fig)
	}
	if err != nil {
		_ = e.say(ctx, idx, panel.Message{Text: fmt.Sprintf("%s cannot be computed: %v.", spokenQuantity(fig), err), Level: panel.Warn})
		return &skipError{reason: err.Error()}
	}
	r := entry.Result{Step: idx, Procedure: s.Procedure, FieldMode: s.FieldMode, Quantity: res.Quantity, Meter: meter,
		Value: res.Value, Unit: res.Unit, StdUnc: res.StdUnc, ExpUnc: res.ExpUnc, K: res.K,
		Calibrated: res.Calibrated, Flags: calib.FlagTexts(res.Flags), Detail: res.Detail, Verdict: string(calib.Info),
		RangeFloor: res.Floor, BelowRangeFloor: res.BelowFloor, FlagCodes: calib.FlagCodes(res.Flags)}
	if r.Quantity == "" {
		r.Quantity = fig
	}
	for _, p := range e.st.meas[s.Compute.Inputs[firstRole(s.Compute.Inputs)]] {
		for _, f := range p.Flags {
			r.Flags = appendUnique(r.Flags, f)
		}
		if !p.Calib {
			r.Calibrated = false
		}
	}
	for _, b := range res.Budget {
		r.Budget = append(r.Budget, entry.BudgetRow{Source: b.Source, Type: b.Type, Value: b.Value, Unit: b.Unit, StdUnc: b.StdUnc, RelStdUnc: b.RelStdUnc, Sensitivity: b.Sensitivity, Contribution: b.Contribution, DoF: b.DoF})
	}
	key := limitKey(r.Quantity, s.FieldMode)
	if b, ok := e.cfg.Settings.Baseline[key]; ok && b != 0 {
		r.Baseline = b
		r.BaselineFrac = r.Value / b
	}
	// Judge against the bench's limits; a judge step may judge it again.
	e.applyVerdict(&r, res, e.benchLimits(r.Quantity, s.FieldMode))
	e.storeResult(s.ID, r)
	if err := e.journal(ctx, entry.KindResult, r); err != nil {
		return err
	}
	return e.say(ctx, idx, panel.Message{Text: e.spokenResult(r, e.resultMeter(s.ID)), Level: panel.Info})
}

// unmeasured is why an input of a compute step could not be measured
// ("" when every input was).
func (e *Engine) unmeasured(s Step) string {
	roles := make([]string, 0, len(s.Compute.Inputs))
	for role := range s.Compute.Inputs {
		roles = append(roles, role)
	}
	slices.Sort(roles)
	for _, role := range roles {
		for _, p := range e.st.meas[s.Compute.Inputs[role]] {
			if p.Unmeasurable != "" {
				if p.Label != "" {
					return "at position " + p.Label + ", " + p.Unmeasurable
				}
				return p.Unmeasurable
			}
		}
	}
	return ""
}

// notMeasurableResult records a figure whose input could not be measured:
// no value, the outcome not_measurable with the reason, never judged.
func (e *Engine) notMeasurableResult(ctx context.Context, idx int, s Step, why string) error {
	q := s.Compute.Figure
	if q == "kerma_mode_scaling" {
		q = calib.QKermaScaling
	}
	r := entry.Result{Step: idx, Procedure: s.Procedure, FieldMode: s.FieldMode, Quantity: q, Meter: e.resultMeter(s.ID),
		Verdict: string(calib.NotMeasurable), DecidedBy: why, Flags: []string{"not measurable: " + why}}
	e.storeResult(s.ID, r)
	if err := e.journal(ctx, entry.KindResult, r); err != nil {
		return err
	}
	return e.say(ctx, idx, panel.Message{Text: e.t("%s: not measurable, %s.", e.resultName(r, e.resultMeter(s.ID)), e.text(why)), Level: panel.Warn})
}

func firstRole(m map[string]string) string {
	for _, k := range []string{"luminance", "open", "air_kerma_rate", "reading"} {
		if _, ok := m[k]; ok {
			return k
		}
	}
	return ""
}

func appendUnique(xs []string, x string) []string {
	for _, y := range xs {
		if y == x {
			return xs
		}
	}
	return append(xs, x)
}

func (e *Engine) storeResult(id string, r entry.Result) {
	if _, ok := e.st.results[id]; !ok {
		e.st.order = append(e.st.order, id)
	}
	e.st.results[id] = r
}

// higherIsBetter: for these figures a fall against the baseline is the concern.
func higherIsBetter(q string) bool {
	return q == "conversion_factor" || q == "contrast_ratio"
}

// benchLimits are the bench file's limits for a quantity.
func (e *Engine) benchLimits(q, mode string) []calib.Limit {
	l := e.cfg.Settings
	var out []calib.Limit
	add := func(kind string, m map[string]Range) {
		lim, ok := m[limitKey(q, mode)]
		if !ok {
			lim, ok = m[q]
		}
		if !ok {
			return
		}
		if lim.HasMin {
			out = append(out, calib.Limit{Kind: kind, Bound: calib.AtLeast, Value: lim.Min})
		}
		if lim.HasMax {
			out = append(out, calib.Limit{Kind: kind, Bound: calib.AtMost, Value: lim.Max})
		}
	}
	add(calib.KindSpecification, l.Spec)
	add(calib.KindActionLevel, l.Action)
	if higherIsBetter(q) && l.BaselineFraction > 0 {
		if _, ok := l.Baseline[limitKey(q, mode)]; ok {
			out = append(out, calib.Limit{Kind: calib.KindBaseline, Bound: calib.AtLeast, Value: l.BaselineFraction})
		}
	}
	return out
}

func (e *Engine) applyVerdict(r *entry.Result, res calib.Result, limits []calib.Limit) calib.Judgement {
	res.Value, res.ExpUnc, res.Unit, res.Calibrated = r.Value, r.ExpUnc, r.Unit, r.Calibrated
	res.Floor, res.BelowFloor = r.RangeFloor, r.BelowRangeFloor
	v := calib.Judge(res, r.Baseline, limits)
	r.Verdict, r.DecidedBy = string(v.Outcome), v.DecidedBy
	r.Limits = nil
	for _, c := range v.Checks {
		lc := entry.LimitCheck{Kind: c.Limit.Kind, Bound: string(c.Limit.Bound), Value: c.Absolute, Margin: c.Margin, Passed: c.Passed, WithinU: c.WithinU}
		if c.Limit.Kind == calib.KindBaseline {
			lc.Fraction = c.Limit.Value
		}
		r.Limits = append(r.Limits, lc)
	}
	if v.Marginal {
		r.Flags = appendUnique(r.Flags, "marginal")
	}
	for _, n := range v.Notes {
		r.Flags = appendUnique(r.Flags, n)
	}
	return v
}

// judge judges a computed result against the step's limits.
func (e *Engine) judge(ctx context.Context, idx int, s Step) error {
	j := s.Judge
	if j == nil {
		return fmt.Errorf("step %d (%s): judge step without limits", idx, s.ID)
	}
	r, ok := e.st.results[j.Result]
	if !ok {
		_ = e.say(ctx, idx, panel.Message{Text: "There is no result to judge: the measurement was not completed.", Level: panel.Warn})
		return &skipError{reason: "no result " + j.Result}
	}
	var limits []calib.Limit
	for _, jl := range j.Limits {
		v := jl.Value
		if jl.Ref != "" {
			// A value for this field mode ("spec.conversion_factor_min@17cm")
			// takes precedence over the one for all modes.
			x, ok := e.cfg.Settings.Inputs[jl.Ref+"@"+r.FieldMode]
			if !ok || r.FieldMode == "" {
				x, ok = e.cfg.Settings.Inputs[jl.Ref]
			}
			if !ok {
				r.Flags = appendUnique(r.Flags, "limit "+jl.Ref+" not given in the bench file: not checked")
				continue
			}
			v = x
		}
		kind, bound := calib.KindSpecification, calib.AtLeast
		switch jl.Kind {
		case "max":
			bound = calib.AtMost
		case "baseline_min":
			kind = calib.KindBaseline
		case "baseline_max":
			kind, bound = calib.KindBaseline, calib.AtMost
		case "action_min":
			kind = calib.KindActionLevel
		case "action_max":
			kind, bound = calib.KindActionLevel, calib.AtMost
		}
		limits = append(limits, calib.Limit{Kind: kind, Bound: bound, Value: v})
	}
	if len(limits) == 0 {
		limits = e.benchLimits(r.Quantity, r.FieldMode)
	}
	if r.Verdict == string(calib.NotMeasurable) {
		// Nothing to compare, and the compute step said why (the same
		// sentence twice in a row is noise to the engineer).
		return nil
	}
	v := e.applyVerdict(&r, calib.Result{}, limits)
	e.storeResult(j.Result, r)
	if err := e.journal(ctx, entry.KindResult, r); err != nil {
		return err
	}
	lv := panel.Good
	if r.Verdict == string(calib.Fail) {
		lv = panel.Warn
	}
	return e.say(ctx, idx, panel.Message{Text: e.spokenVerdict(r, e.resultMeter(j.Result), v), Level: lv})
}

// resultMeter is the meter a dark level or a stability was read with (the
// role its compute step names, or the meter its measurement read), for the
// spoken name; "" for the other figures.
func (e *Engine) resultMeter(computeID string) string {
	for _, s := range e.cfg.Procedure.Steps {
		if s.ID != computeID || s.Compute == nil {
			continue
		}
		if f := s.Compute.Figure; f != "dark_level" && f != "stability" {
			return ""
		}
		if _, ok := s.Compute.Inputs["air_kerma_rate"]; ok {
			return Dosimeter
		}
		if _, ok := s.Compute.Inputs["luminance"]; ok {
			return Photometer
		}
		for _, m := range e.cfg.Procedure.Steps {
			if m.ID == s.Compute.Inputs["reading"] && m.Measure != nil && len(m.Measure.Meters) == 1 {
				return m.Measure.Meters[0]
			}
		}
	}
	return ""
}

// fmtNum writes v with three significant figures, as one would say it.
func fmtNum(v float64) string {
	if v == 0 || math.IsNaN(v) || math.IsInf(v, 0) {
		return strconv.FormatFloat(v, 'g', -1, 64)
	}
	d := 3 - int(math.Floor(math.Log10(math.Abs(v)))) - 1
	if d < 0 {
		p := math.Pow(10, float64(-d))
		return strconv.FormatFloat(math.Round(v/p)*p, 'f', 0, 64)
	}
	return strconv.FormatFloat(v, 'f', d, 64)
}
