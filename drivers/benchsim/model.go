package benchsim

import (
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"kermalux/drivers"
)

// Model is the physics of the simulated bench: a pure, deterministic
// function of the scenario, the seed, and the control calls with the times
// they were made at. It does no I/O and reads no clock: every method takes
// the simulated time t (time since the bench started). A control call for
// a later time than the model has reached is kept and takes effect at that
// time (so a test can say "beam on in 0.5 s"); a call or reading for an
// earlier time acts at the time already reached: time never runs back.
// A Model is not safe for concurrent use; Bench locks it.
type Model struct {
	scn   *Scenario
	modes map[string]FieldMode

	beam        bool
	beamOnAt    time.Duration
	beamOnCount int
	beamTotal   time.Duration // true beam-on time of the exposures that ended
	beamLog     []BeamSpan
	mode        FieldMode
	kv          float64
	phantom     bool
	leadDisk    bool
	abc         bool // automatic brightness control on
	photR       float64
	photAngle   float64 // degrees

	// Brightness-control transient: the input kerma rate was v0 at t0
	// and relaxes towards the current target.
	t0 time.Duration
	v0 float64

	// now is the time the model has been brought up to; pending are
	// control calls made for a later time, in time order.
	now     time.Duration
	pending []event

	dose, lum sensor
	doseRNG   *rand.Rand
	lumRNG    *rand.Rand
}

// event is a control change scheduled for time t.
type event struct {
	t     time.Duration
	apply func(t time.Duration)
}

// sensor is a meter's first-order lag: dy/dt = (x − y)/τ.
type sensor struct {
	tau time.Duration
	y   float64
}

// NewModel builds the model of a checked scenario (see ParseScenario).
func NewModel(scn *Scenario) (*Model, error) {
	if scn == nil || len(scn.Intensifier.FieldModes) == 0 {
		return nil, fmt.Errorf("benchsim: scenario is empty or was not checked")
	}
	m := &Model{scn: scn, modes: map[string]FieldMode{}}
	for _, fm := range scn.Intensifier.FieldModes {
		m.modes[fm.Name] = fm
	}
	m.mode = m.modes[scn.Intensifier.StartMode]
	m.kv = scn.Intensifier.TubeVoltageKV
	m.abc = scn.Intensifier.Brightness.On
	if p := scn.Photometer.Position; p != nil {
		m.photR, m.photAngle = p.R, p.AngleDeg
	}
	seed := uint64(scn.Seed)
	m.doseRNG = rand.New(rand.NewPCG(seed, 0xd05e))
	m.lumRNG = rand.New(rand.NewPCG(seed, 0x1a3b))
	m.dose.tau = scn.Dosimeter.ResponseTime
	m.lum.tau = scn.Photometer.ResponseTime
	m.lum.y = scn.Intensifier.DarkLuminance * m.relLum(m.photR, m.photAngle)
	return m, nil
}

// target is the input-plane kerma rate the system drives towards, µGy/s.
func (m *Model) target() float64 {
	if !m.beam {
		return 0
	}
	in := m.scn.Intensifier
	k := m.mode.KermaRate
	if !m.abc {
		k *= math.Pow(m.kv/in.TubeVoltageKV, in.KVExponent)
		if m.phantom {
			k *= in.PhantomTransmission
		}
	}
	return k
}

// inputMean is the input-plane kerma rate at t averaged over pulses.
func (m *Model) inputMean(t time.Duration) float64 {
	if !m.beam {
		return 0
	}
	k := m.target()
	b := m.scn.Intensifier.Brightness
	if !m.abc || b.TimeConstant == 0 {
		return k
	}
	dt := (t - m.t0).Seconds()
	return k + (m.v0-k)*math.Exp(-dt/b.TimeConstant.Seconds())
}

// pulse returns the pulse factor at t (mean 1 over a period) and the time
// of the next pulse edge after t (or a far time when not pulsed).
func (m *Model) pulse(t time.Duration) (float64, time.Duration) {
	p := m.scn.Intensifier.Pulsed
	if p == nil || !m.beam {
		return 1, math.MaxInt64
	}
	period := time.Duration(float64(time.Second) / p.RateHz)
	phase := (t - m.beamOnAt) % period
	if phase < p.Width {
		return float64(period) / float64(p.Width), t + p.Width - phase
	}
	return 0, t + period - phase
}

// chamberFactor converts the input-plane rate to the rate at the chamber:
// inverse-square law (ICRU/IAEA point-source geometry) and backscatter.
func (m *Model) chamberFactor() float64 {
	c := m.scn.Dosimeter.Chamber
	f := math.Pow(c.InputFromFocusMM/c.ChamberFromFocusMM, 2)
	if c.AgainstFace {
		f *= c.BackscatterFactor
	}
	return f
}

// airResponse is how a vented chamber's reading scales with the room's air
// density relative to its reference conditions: the collected charge is
// proportional to the mass of air in the cavity, ∝ P/T, so the chamber reads
// true / k_TP with
//
//	k_TP = ((273.15 + T)/(273.15 + T0)) · (P0/P)
//
// (IAEA TRS-398 / AAPM TG-61). A sealed chamber, or a scenario without
// room air, gives 1.
func (m *Model) airResponse() float64 {
	c, a := m.scn.Dosimeter.Chamber, m.scn.Air
	if c == nil || c.Vented == nil || a == nil {
		return 1
	}
	v := c.Vented
	kTP := ((273.15 + a.TemperatureC) / (273.15 + v.ReferenceTemperatureC)) * (v.ReferencePressureKPa / a.PressureKPa)
	return 1 / kTP
}

// relLum is the vignetting factor at (r, angle), see Vignetting.
func (m *Model) relLum(r, angleDeg float64) float64 {
	v := m.scn.Intensifier.Vignetting
	return 1 - v.EdgeFalloff*r*r*(1+v.Asymmetry*math.Cos((angleDeg-v.AsymmetryAngleDeg)*math.Pi/180))
}

// luminanceFromKerma is the output luminance at the photometer for an
// input-plane kerma rate k.
func (m *Model) luminanceFromKerma(k float64) float64 {
	in := m.scn.Intensifier
	l := m.mode.ConversionFactor * k
	if m.leadDisk && m.photR <= in.LeadDiskRadius {
		l /= in.ContrastRatio
	}
	return (l + in.DarkLuminance) * m.relLum(m.photR, m.photAngle)
}

// advance moves both meters' lags forward to t, integrating exactly over
// pieces where the input is constant (split at pulse edges) and in short
// steps through the brightness-control transient.
func (m *Model) advance(t time.Duration) {
	for len(m.pending) > 0 && m.pending[0].t <= t {
		ev := m.pending[0]
		m.pending = m.pending[1:]
		m.integrate(ev.t)
		m.restart(ev.t)
		ev.apply(ev.t)
	}
	m.integrate(t)
}

// integrate moves the lags from m.now to t under the present state.
func (m *Model) integrate(t time.Duration) {
	if t <= m.now {
		return
	}
	step := 50 * time.Millisecond
	if b := m.scn.Intensifier.Brightness; m.abc && b.TimeConstant > 0 && b.TimeConstant/10 < step {
		step = max(b.TimeConstant/10, time.Millisecond)
	}
	cf := m.chamberFactor()
	for s := m.now; s < t; {
		pf, edge := m.pulse(s)
		e := min(t, s+step, edge)
		k := m.inputMean(s+(e-s)/2) * pf
		m.dose.step(k*cf, e-s)
		m.lum.step(m.luminanceFromKerma(k), e-s)
		s = e
	}
	m.now = t
}

func (s *sensor) step(x float64, dt time.Duration) {
	if s.tau <= 0 {
		s.y = x
		return
	}
	s.y = x + (s.y-x)*math.Exp(-dt.Seconds()/s.tau.Seconds())
}

// restart is called just before a control changes the state at t (the
// lags already brought up to t): the brightness transient restarts from
// the rate it had reached.
func (m *Model) restart(t time.Duration) {
	m.v0 = m.inputMean(t)
	m.t0 = t
}

// at applies a control change at t: now, if t is not later than the time
// reached (after bringing the lags up to it), else when advance gets there.
func (m *Model) at(t time.Duration, apply func(t time.Duration)) {
	if t <= m.now {
		m.advance(m.now)
		m.restart(m.now)
		apply(m.now)
		return
	}
	i := len(m.pending)
	for i > 0 && m.pending[i-1].t > t {
		i--
	}
	m.pending = append(m.pending, event{})
	copy(m.pending[i+1:], m.pending[i:])
	m.pending[i] = event{t: t, apply: apply}
}

// SetBeam switches the beam at t. It returns the beam-on count as of the
// time reached (a beam-on scheduled for later is not counted yet).
func (m *Model) SetBeam(t time.Duration, on bool) int {
	m.at(t, func(t time.Duration) {
		if on == m.beam {
			return
		}
		m.beam = on
		if !on {
			m.beamTotal += t - m.beamOnAt
			m.beamLog = append(m.beamLog, BeamSpan{On: m.beamOnAt, Off: t})
		}
		if on {
			m.beamOnCount++
			m.beamOnAt = t
			m.v0 = m.target() * m.scn.Intensifier.Brightness.StartFraction
			if !m.abc {
				m.v0 = m.target()
			}
		}
	})
	return m.beamOnCount
}

// SetFieldMode selects a field mode at t.
func (m *Model) SetFieldMode(t time.Duration, name string) error {
	fm, ok := m.modes[name]
	if !ok {
		return fmt.Errorf("benchsim: no field mode %q (this intensifier has %v)", name, m.ModeNames())
	}
	m.at(t, func(time.Duration) { m.mode = fm })
	return nil
}

// ModeNames lists the field modes, largest first.
func (m *Model) ModeNames() []string {
	var out []string
	for _, fm := range m.scn.Intensifier.FieldModes {
		out = append(out, fm.Name)
	}
	return out
}

// SetTubeVoltage sets the tube voltage at t.
func (m *Model) SetTubeVoltage(t time.Duration, kv float64) error {
	if kv < 40 || kv > 150 || math.IsNaN(kv) {
		return fmt.Errorf("benchsim: tube voltage %g kV is outside 40..150 kV", kv)
	}
	m.at(t, func(time.Duration) { m.kv = kv })
	return nil
}

// SetPhantom puts the phantom (or added filter) in or out of the beam at t.
func (m *Model) SetPhantom(t time.Duration, in bool) {
	m.at(t, func(time.Duration) { m.phantom = in })
}

// SetBrightnessControl switches the automatic brightness control at t
// (manual mode when off). Switched on with the beam on, the rate settles
// from where it was with the control's time constant.
func (m *Model) SetBrightnessControl(t time.Duration, on bool) {
	m.at(t, func(time.Duration) { m.abc = on })
}

// SetLeadDisk puts the lead disk at the input centre or takes it away.
func (m *Model) SetLeadDisk(t time.Duration, in bool) {
	m.at(t, func(time.Duration) { m.leadDisk = in })
}

// SetPhotometerPosition moves the photometer at t to rFrac of the output
// radius at angleDeg (0 = right, 90 = up, as seen facing the output).
func (m *Model) SetPhotometerPosition(t time.Duration, rFrac, angleDeg float64) error {
	if rFrac < 0 || rFrac > 1 || math.IsNaN(rFrac) || math.IsNaN(angleDeg) {
		return fmt.Errorf("benchsim: photometer position r=%g is outside 0..1 of the output radius", rFrac)
	}
	m.at(t, func(time.Duration) { m.photR, m.photAngle = rFrac, angleDeg })
	return nil
}

// BeamOnTime is the true cumulative beam-on time up to t: the beam log
// an ideal fluoroscopy timer would keep.
func (m *Model) BeamOnTime(t time.Duration) time.Duration {
	m.advance(t)
	total := m.beamTotal
	if m.beam {
		total += m.now - m.beamOnAt
	}
	return total
}

// BeamSpan is one exposure of the true beam log.
type BeamSpan struct{ On, Off time.Duration }

// BeamLog is every exposure that has ended, in order.
func (m *Model) BeamLog() []BeamSpan { return append([]BeamSpan(nil), m.beamLog...) }

// Show is what role's meter (RoleDosimeter or RolePhotometer) displays at
// t, range included: above its range it shows the range maximum with
// drivers.StatusOverRange, below it drivers.StatusUnderRange (the value is
// then not a measurement). Faults are the Bench's.
func (m *Model) Show(role string, t time.Duration) (MeterValue, drivers.Status) {
	var mv MeterValue
	spec := m.scn.Photometer
	if role == RoleDosimeter {
		mv, spec = m.DoseReading(t), m.scn.Dosimeter
	} else {
		mv = m.LumReading(t)
	}
	switch {
	case mv.Value > spec.Range.Max:
		mv.Value = spec.Range.Max
		return mv, drivers.StatusOverRange
	case mv.Value < spec.Range.Min:
		return mv, drivers.StatusUnderRange
	}
	return mv, drivers.StatusOK
}

// BeamOnCount is how many times the beam has been switched on.
func (m *Model) BeamOnCount() int { return m.beamOnCount }

// MeterValue is what a meter shows, before range limits and printing.
type MeterValue struct {
	Value float64 // canonical unit, with calibration error and noise
	Clean float64 // the lagged true value with calibration error, no noise
}

// DoseReading is the dosimeter's reading at t (µGy/s at the chamber):
// lagged true rate × (1 + calibration error), with relative noise of
// standard deviation sqrt(meter² + quantum²) and the absolute floor.
func (m *Model) DoseReading(t time.Duration) MeterValue {
	m.advance(t)
	d := m.scn.Dosimeter
	clean := m.dose.y * (1 + d.CalibrationError) * m.airResponse()
	rel := math.Hypot(d.Noise, m.quantumNoise(m.dose.y/m.chamberFactor(), d.IntegrationTime))
	v := clean*(1+rel*m.doseRNG.NormFloat64()) + d.NoiseFloor*m.doseRNG.NormFloat64()
	return MeterValue{Value: v, Clean: clean}
}

// LumReading is the photometer's reading at t (cd/m²). The beam-induced
// light carries the same relative quantum noise as the kerma rate.
func (m *Model) LumReading(t time.Duration) MeterValue {
	m.advance(t)
	t = m.now
	p := m.scn.Photometer
	clean := m.lum.y * (1 + p.CalibrationError)
	dark := m.scn.Intensifier.DarkLuminance * m.relLum(m.photR, m.photAngle) * (1 + p.CalibrationError)
	q := m.quantumNoise(m.inputMean(t), p.IntegrationTime)
	v := clean*(1+p.Noise*m.lumRNG.NormFloat64()) + (clean-dark)*q*m.lumRNG.NormFloat64() + p.NoiseFloor*m.lumRNG.NormFloat64()
	return MeterValue{Value: v, Clean: clean}
}

// quantumNoise is the relative standard deviation of a kerma rate k
// averaged over integration time T: counting statistics give
//
//	σ/K = q0 · sqrt(K0·T0 / (K·T))
//
// with q0 at K0 over T0 from the scenario. It is capped at 1.
func (m *Model) quantumNoise(k float64, T time.Duration) float64 {
	q := m.scn.Intensifier.QuantumNoise
	if q.Relative == 0 || k <= 0 {
		return 0
	}
	return min(1, q.Relative*math.Sqrt(q.AtKermaRate*q.Over.Seconds()/(k*T.Seconds())))
}

// Truth is the model's state at t: what an ideal, noise-free instrument
// would show, for tests and for the demo's answer key.
func (m *Model) Truth(t time.Duration) Truth {
	m.advance(t)
	t = m.now
	in := m.scn.Intensifier
	k := m.inputMean(t)
	tr := Truth{
		At:                    t,
		Beam:                  m.beam,
		BeamOnCount:           m.beamOnCount,
		FieldMode:             m.mode.Name,
		TubeVoltageKV:         m.kv,
		Phantom:               m.phantom,
		LeadDisk:              m.leadDisk,
		PhotometerR:           m.photR,
		PhotometerAngleDeg:    m.photAngle,
		ConversionFactor:      m.mode.ConversionFactor,
		InputKermaRate:        k,
		SettledInputKermaRate: m.target(),
		ChamberFactor:         m.chamberFactor(),
		AirResponse:           m.airResponse(),
		ChamberKermaRate:      k * m.chamberFactor(),
		CentreLuminance:       m.mode.ConversionFactor*k + in.DarkLuminance,
		PhotometerLuminance:   m.luminanceFromKerma(k),
		DarkLuminance:         in.DarkLuminance,
		ContrastRatio:         in.ContrastRatio,
		BrightnessOn:          m.abc,
		BrightnessTime:        in.Brightness.TimeConstant,
		Vignetting:            in.Vignetting,
		Dosimeter:             meterTruth(m.scn.Dosimeter),
		Photometer:            meterTruth(m.scn.Photometer),
		DosimeterLagged:       m.dose.y,
		PhotometerLagged:      m.lum.y,
	}
	if in.Pulsed != nil {
		tr.PulseRateHz, tr.PulseWidth = in.Pulsed.RateHz, in.Pulsed.Width
	}
	tr.DosimeterQuantumNoise = m.quantumNoise(k, m.scn.Dosimeter.IntegrationTime)
	tr.PhotometerQuantumNoise = m.quantumNoise(k, m.scn.Photometer.IntegrationTime)
	for _, fm := range in.FieldModes {
		//lint:ignore S1016 the scenario's field mode grows physics keys that the truth does not carry
		tr.Modes = append(tr.Modes, ModeTruth{Name: fm.Name, DiameterCM: fm.DiameterCM,
			ConversionFactor: fm.ConversionFactor, KermaRate: fm.KermaRate})
	}
	return tr
}

func meterTruth(s MeterSpec) MeterTruth {
	return MeterTruth{Protocol: s.Protocol, Serial: s.Serial, CalibrationError: s.CalibrationError,
		Noise: s.Noise, NoiseFloor: s.NoiseFloor, ResponseTime: s.ResponseTime,
		IntegrationTime: s.IntegrationTime, Range: s.Range, Unit: s.Unit}
}

// Truth is the simulated bench's answer key at one moment.
type Truth struct {
	At          time.Duration // simulated time since the bench started
	Beam        bool
	BeamOnCount int
	FieldMode   string
	Modes       []ModeTruth

	TubeVoltageKV      float64
	Phantom, LeadDisk  bool
	PhotometerR        float64 // fraction of the output radius
	PhotometerAngleDeg float64

	// ConversionFactor G of the selected mode, cd·m⁻² per µGy·s⁻¹.
	ConversionFactor float64
	// InputKermaRate at the input plane now (mean over pulses), µGy/s;
	// SettledInputKermaRate is where the brightness control is heading.
	InputKermaRate        float64
	SettledInputKermaRate float64
	// ChamberKermaRate is what an ideal chamber at its place sees now:
	// InputKermaRate × ChamberFactor (inverse square and backscatter).
	ChamberKermaRate float64
	ChamberFactor    float64
	// AirResponse is the vented chamber's reading relative to the truth
	// at the room's air (1/k_TP; 1 for a sealed chamber).
	AirResponse float64
	// CentreLuminance with the input open, and PhotometerLuminance at the
	// photometer's place (lead disk and vignetting included); both include
	// the dark luminance. cd/m².
	CentreLuminance     float64
	PhotometerLuminance float64
	DarkLuminance       float64
	// ContrastRatio of the beam-induced light (dark subtracted).
	ContrastRatio float64
	Vignetting    Vignetting

	BrightnessOn   bool
	BrightnessTime time.Duration // settling time constant
	PulseRateHz    float64       // 0 when continuous
	PulseWidth     time.Duration

	Dosimeter, Photometer MeterTruth
	// DosimeterLagged and PhotometerLagged are the meters' lagged true
	// values now (before calibration error and noise).
	DosimeterLagged, PhotometerLagged float64
	// DosimeterQuantumNoise is the relative quantum noise of one
	// dosimeter reading at the current rate.
	DosimeterQuantumNoise float64
	// PhotometerQuantumNoise is the same for the beam-induced part of
	// one photometer reading.
	PhotometerQuantumNoise float64
	// ActiveFaults are the faults in force now (filled by Bench).
	ActiveFaults []FaultSpec
}

// ModeTruth is one field mode's true figures.
type ModeTruth struct {
	Name             string
	DiameterCM       float64
	ConversionFactor float64 // cd·m⁻² per µGy·s⁻¹
	KermaRate        float64 // µGy/s at the input plane, reference kV
}

// MeterTruth is what the scenario says about a meter.
type MeterTruth struct {
	Protocol, Serial string
	CalibrationError float64
	Noise            float64
	NoiseFloor       float64
	ResponseTime     time.Duration
	IntegrationTime  time.Duration
	Range            RangeSpec
	Unit             string
}

// RelativeLuminance is the true output luminance at (rFrac, angleDeg)
// relative to the centre (beam-induced light, no lead disk).
func (t Truth) RelativeLuminance(rFrac, angleDeg float64) float64 {
	v := t.Vignetting
	return 1 - v.EdgeFalloff*rFrac*rFrac*(1+v.Asymmetry*math.Cos((angleDeg-v.AsymmetryAngleDeg)*math.Pi/180))
}

// Mode returns the truth of the named field mode.
func (t Truth) Mode(name string) (ModeTruth, bool) {
	for _, m := range t.Modes {
		if m.Name == name {
			return m, true
		}
	}
	return ModeTruth{}, false
}
