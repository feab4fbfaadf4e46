package benchsim

import (
	"math"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"
)

// quietYAML is a noise-free bench for physics checks: calibration errors
// 0, no quantum noise, so the meters' clean values are the physics alone.
const quietYAML = `
seed: 7
intensifier:
  serial: TEST-1
  field_modes:
    - {name: 32cm, diameter_cm: 32, conversion_factor: 150, kerma_rate: 0.5}
    - {name: 16cm, diameter_cm: 16}
  vignetting: {edge_falloff: 0.2}
  contrast_ratio: 16
  dark_luminance: 0.05
  brightness_control: {on: false}
dosimeter:
  response_time: 0.3s
photometer:
  response_time: 0.5s
`

func quiet(t *testing.T, edit func(s *Scenario)) *Model {
	t.Helper()
	s, err := ParseScenario("quiet.yaml", []byte(quietYAML))
	if err != nil {
		t.Fatal(err)
	}
	if edit != nil {
		edit(s)
	}
	m, err := NewModel(s)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

const sec = time.Second

func near(t *testing.T, what string, got, want, relTol float64) {
	t.Helper()
	if math.Abs(got-want) > relTol*math.Abs(want) {
		t.Errorf("%s = %.6g, want %.6g (±%.2g%%)", what, got, want, relTol*100)
	}
}

// TestConversionFactorRecovered: the conversion factor is G = L / K̇, the
// luminance over the input-plane air kerma rate (IEC 61262-2 definition,
// dark luminance subtracted). Read noise-free after the meters settle, the
// model must give back the scenario's G in every mode; the 16 cm mode's G
// was left out and must follow G ∝ d² (common practice for magnified
// modes): 150 · (16/32)² = 37.5, with K̇ ∝ 1/d²: 0.5 · 4 = 2.0 µGy/s.
func TestConversionFactorRecovered(t *testing.T) {
	for _, tc := range []struct {
		mode  string
		g, kr float64
	}{{"32cm", 150, 0.5}, {"16cm", 37.5, 2.0}} {
		m := quiet(t, nil)
		if err := m.SetFieldMode(0, tc.mode); err != nil {
			t.Fatal(err)
		}
		m.SetBeam(sec, true)
		at := 20 * sec // 40 photometer time constants: settled to e^-40
		l := m.LumReading(at).Clean
		k := m.DoseReading(at).Clean
		near(t, tc.mode+" kerma rate", k, tc.kr, 1e-9)
		near(t, tc.mode+" G", (l-0.05)/k, tc.g, 1e-9)
	}
}

// TestUniformity: with L(r) = L0·(1 − a·r²) and a = 0.2, the luminance at
// 0.9 of the radius relative to the centre is 1 − 0.2·0.81 = 0.838 (hand
// arithmetic), within the 75–90 % edge range typical of intensifiers
// (reference.md, common practice). Asymmetry b = 0.1 towards 90°: up is
// 1 − 0.2·0.81·1.1 = 0.8218, down 1 − 0.2·0.81·0.9 = 0.8542.
func TestUniformity(t *testing.T) {
	for _, tc := range []struct {
		asym, angle, want float64
	}{{0, 0, 0.838}, {0, 180, 0.838}, {0.1, 90, 0.8218}, {0.1, 270, 0.8542}, {0.1, 0, 0.838}} {
		m := quiet(t, func(s *Scenario) {
			s.Intensifier.Vignetting.Asymmetry = tc.asym
			s.Intensifier.Vignetting.AsymmetryAngleDeg = 90
			s.Intensifier.DarkLuminance = 0
		})
		m.SetBeam(0, true)
		centre := m.LumReading(20 * sec).Clean
		if err := m.SetPhotometerPosition(20*sec, 0.9, tc.angle); err != nil {
			t.Fatal(err)
		}
		edge := m.LumReading(40 * sec).Clean
		near(t, "relative luminance", edge/centre, tc.want, 1e-6)
		near(t, "truth relative luminance", m.Truth(40*sec).RelativeLuminance(0.9, tc.angle), tc.want, 1e-12)
	}
}

// TestContrastRatio: CR = L_open / L_disk at the centre with the lead disk
// at the input centre (IEC 61262-6 definition), dark subtracted; here 16.
// Without the dark subtraction the ratio is lower:
// (75 + 0.05)/(75/16 + 0.05) = 15.84 (hand arithmetic, G·K̇ = 150·0.5).
func TestContrastRatio(t *testing.T) {
	m := quiet(t, nil)
	m.SetBeam(0, true)
	open := m.LumReading(20 * sec).Clean
	m.SetLeadDisk(20*sec, true)
	disk := m.LumReading(40 * sec).Clean
	near(t, "contrast ratio, dark subtracted", (open-0.05)/(disk-0.05), 16, 1e-9)
	near(t, "contrast ratio with dark", open/disk, 75.05/(75.0/16+0.05), 1e-9)
	// Off-centre the disk's shadow is not seen.
	if err := m.SetPhotometerPosition(40*sec, 0.5, 0); err != nil {
		t.Fatal(err)
	}
	off := m.LumReading(60 * sec).Clean
	near(t, "off-centre luminance with disk", off, 75*(1-0.2*0.25)+0.05*(1-0.2*0.25), 1e-9)
}

// TestInverseSquare: a chamber 900 mm from the focus with the input plane
// at 1000 mm reads (1000/900)² = 1.234568 times the input-plane rate
// (inverse-square law for a point source; arithmetic); lying against the
// face with a backscatter factor of 1.05 multiplies that by 1.05.
func TestInverseSquare(t *testing.T) {
	for _, tc := range []struct {
		against bool
		want    float64
	}{{false, 0.5 * 1.2345679}, {true, 0.5 * 1.2345679 * 1.05}} {
		m := quiet(t, func(s *Scenario) {
			s.Dosimeter.Chamber = &ChamberSpec{ChamberFromFocusMM: 900, InputFromFocusMM: 1000,
				AgainstFace: tc.against, BackscatterFactor: 1.05}
		})
		m.SetBeam(0, true)
		near(t, "chamber reading", m.DoseReading(20*sec).Clean, tc.want, 1e-6)
		near(t, "truth input rate", m.Truth(20*sec).InputKermaRate, 0.5, 1e-12)
	}
}

// TestBrightnessSettling: under automatic brightness control the input
// rate approaches its target as K∞ − (K∞ − K0)·exp(−t/τ). A straight-line
// fit (gonum stat.LinearRegression) of ln(K∞ − K) against t must give
// slope −1/τ; τ = 0.8 s, start at 30 % of target.
func TestBrightnessSettling(t *testing.T) {
	m := quiet(t, func(s *Scenario) {
		s.Intensifier.Brightness = BrightnessSpec{On: true, TimeConstant: 800 * time.Millisecond, StartFraction: 0.3}
	})
	m.SetBeam(0, true)
	var xs, ys []float64
	for ms := 0; ms <= 3000; ms += 100 {
		at := time.Duration(ms) * time.Millisecond
		k := m.Truth(at).InputKermaRate
		xs = append(xs, at.Seconds())
		ys = append(ys, math.Log(0.5-k))
	}
	alpha, beta := stat.LinearRegression(xs, ys, nil, false)
	near(t, "time constant", -1/beta, 0.8, 1e-6)
	near(t, "start deficit", math.Exp(alpha), 0.5*0.7, 1e-6)
	// And with the control off, the rate jumps to the target at once.
	q := quiet(t, nil)
	q.SetBeam(0, true)
	near(t, "manual mode rate", q.Truth(time.Millisecond).InputKermaRate, 0.5, 1e-12)
}

// TestMeterFirstOrderResponse: a first-order lag's step response is
// 1 − exp(−t/τ): 63.21 % at t = τ, 95.02 % at 3τ (from memory; standard
// result of a first-order linear system). The dosimeter (τ = 0.3 s) and
// photometer (τ = 0.5 s) see the beam switched on at t = 1 s.
func TestMeterFirstOrderResponse(t *testing.T) {
	for _, tc := range []struct {
		n    float64
		want float64
	}{{1, 0.6321206}, {3, 0.9502129}} {
		m := quiet(t, func(s *Scenario) { s.Intensifier.DarkLuminance = 0 })
		m.SetBeam(sec, true)
		d := m.DoseReading(sec + time.Duration(tc.n*0.3*float64(sec))).Clean
		near(t, "dosimeter step response", d/0.5, tc.want, 1e-6)
		m = quiet(t, func(s *Scenario) { s.Intensifier.DarkLuminance = 0 })
		m.SetBeam(sec, true)
		l := m.LumReading(sec + time.Duration(tc.n*0.5*float64(sec))).Clean
		near(t, "photometer step response", l/75, tc.want, 1e-6)
	}
}

// TestPulsedRipple: pulses of width w every P at amplitude A = P/w (mean 1)
// through a first-order lag τ settle to a periodic ripple with
//
//	y_max = A·(1 − e^(−w/τ)) / (1 − e^(−P/τ)),  y_min = y_max·e^(−(P−w)/τ)
//
// (steady state of the lag, derived by summing the geometric series of
// pulse responses; hand derivation). 15 pulses/s, 8 ms, τ = 20 ms.
func TestPulsedRipple(t *testing.T) {
	m := quiet(t, func(s *Scenario) {
		s.Intensifier.Pulsed = &PulsedSpec{RateHz: 15, Width: 8 * time.Millisecond}
		s.Dosimeter.ResponseTime = 20 * time.Millisecond
		s.Dosimeter.IntegrationTime = 20 * time.Millisecond
		s.Photometer.ResponseTime = 20 * time.Millisecond
	})
	m.SetBeam(0, true)
	P, w, tau := 1.0/15, 0.008, 0.020
	A := P / w
	ymax := A * (1 - math.Exp(-w/tau)) / (1 - math.Exp(-P/tau))
	ymin := ymax * math.Exp(-(P-w)/tau)
	lo, hi := math.Inf(1), math.Inf(-1)
	var sum float64
	n := 0
	start := 10 * sec
	for us := 0; us < int(P*1e6*15); us += 250 { // 15 periods, every 0.25 ms
		y := m.DoseReading(start+time.Duration(us)*time.Microsecond).Clean / 0.5
		lo, hi = min(lo, y), max(hi, y)
		sum += y
		n++
	}
	near(t, "ripple maximum", hi, ymax, 0.01) // 0.25 ms sampling misses the peak by < 1 %
	near(t, "ripple minimum", lo, ymin, 0.01)
	near(t, "mean over whole periods", sum/float64(n), 1, 0.01)
	// A slow meter (τ = 0.3 s) sees almost none of it.
	slow := quiet(t, func(s *Scenario) { s.Intensifier.Pulsed = &PulsedSpec{RateHz: 15, Width: 8 * time.Millisecond} })
	slow.SetBeam(0, true)
	lo, hi = math.Inf(1), math.Inf(-1)
	for us := 0; us < int(P*1e6); us += 250 {
		y := slow.DoseReading(start+time.Duration(us)*time.Microsecond).Clean / 0.5
		lo, hi = min(lo, y), max(hi, y)
	}
	tauS := 0.3
	ymaxS := A * (1 - math.Exp(-w/tauS)) / (1 - math.Exp(-P/tauS))
	near(t, "slow meter ripple maximum", hi, ymaxS, 0.002)
}

// TestNoiseStatistics: the relative standard deviation of 4000 readings
// at a steady rate matches the configured level. A sample standard
// deviation from N normal draws has a relative standard error of about
// 1/sqrt(2(N−1)) = 1.1 % (from memory; large-sample result), so 5 % is a
// tolerance of more than four standard errors. The mean must be the true
// value × (1 + calibration error) within 4 standard errors of the mean.
// Quantum noise follows 1/sqrt(K·T): quadrupling the rate halves it.
func TestNoiseStatistics(t *testing.T) {
	sample := func(m *Model, n int, read func(time.Duration) float64) (mean, rsd float64) {
		xs := make([]float64, n)
		for i := range xs {
			xs[i] = read(20*sec + time.Duration(i)*100*time.Millisecond)
		}
		mean, sd := stat.MeanStdDev(xs, nil)
		return mean, sd / mean
	}
	m := quiet(t, func(s *Scenario) {
		s.Dosimeter.Noise = 0.02
		s.Dosimeter.CalibrationError = 0.03
		s.Photometer.Noise = 0.01
	})
	m.SetBeam(0, true)
	const n = 4000
	mean, rsd := sample(m, n, func(at time.Duration) float64 { return m.DoseReading(at).Value })
	near(t, "dosimeter relative noise", rsd, 0.02, 0.05)
	near(t, "dosimeter mean", mean, 0.5*1.03, 4*0.02/math.Sqrt(n))
	_, rsd = sample(m, n, func(at time.Duration) float64 { return m.LumReading(at).Value })
	near(t, "photometer relative noise", rsd, 0.01, 0.05)

	q := func(rate float64) float64 {
		m := quiet(t, func(s *Scenario) {
			s.Intensifier.FieldModes[0].KermaRate = rate
			s.Intensifier.QuantumNoise = QuantumNoiseSpec{Relative: 0.01, AtKermaRate: 1, Over: sec}
			s.Dosimeter.IntegrationTime = 250 * time.Millisecond
		})
		m.SetBeam(0, true)
		_, rsd := sample(m, n, func(at time.Duration) float64 { return m.DoseReading(at).Value })
		return rsd
	}
	// At 1 µGy/s over 0.25 s: 0.01·sqrt(1·1/(1·0.25)) = 0.02 (arithmetic).
	q1, q4 := q(1), q(4)
	near(t, "quantum noise at 1 µGy/s", q1, 0.02, 0.05)
	near(t, "quantum noise ratio 1 to 4 µGy/s", q4/q1, 0.5, 0.07)
}

// TestDeterministic: the same seed and the same control calls at the same
// times give the same readings; another seed gives others.
func TestDeterministic(t *testing.T) {
	run := func(seed int64) []float64 {
		m := quiet(t, func(s *Scenario) {
			s.Seed = seed
			s.Dosimeter.Noise, s.Photometer.Noise = 0.01, 0.01
			s.Intensifier.QuantumNoise.Relative = 0.01
		})
		var out []float64
		for i := range 200 {
			at := time.Duration(i) * 50 * time.Millisecond
			switch i {
			case 20:
				m.SetBeam(at, true)
			case 80:
				_ = m.SetFieldMode(at, "16cm")
			case 120:
				m.SetLeadDisk(at, true)
			case 160:
				m.SetBeam(at, false)
			}
			out = append(out, m.DoseReading(at).Value, m.LumReading(at).Value)
		}
		return out
	}
	a, b, c := run(11), run(11), run(12)
	same := 0
	for i := range a {
		if a[i] != b[i] {
			t.Fatalf("reading %d differs between runs with one seed: %v vs %v", i, a[i], b[i])
		}
		if a[i] == c[i] {
			same++
		}
	}
	if same > len(a)/10 {
		t.Errorf("%d of %d readings equal with another seed", same, len(a))
	}
}

// TestManualModeScaling: without brightness control the input rate scales
// as (kV/70)^2 by default, and the phantom multiplies it by its
// transmission: 0.5·(80/70)² = 0.653061 (arithmetic).
func TestManualModeScaling(t *testing.T) {
	m := quiet(t, func(s *Scenario) { s.Intensifier.PhantomTransmission = 0.1 })
	m.SetBeam(0, true)
	if err := m.SetTubeVoltage(sec, 80); err != nil {
		t.Fatal(err)
	}
	near(t, "80 kV rate", m.Truth(2*sec).InputKermaRate, 0.6530612, 1e-6)
	m.SetPhantom(2*sec, true)
	near(t, "80 kV with phantom", m.Truth(3*sec).InputKermaRate, 0.06530612, 1e-6)
	if err := m.SetTubeVoltage(3*sec, 200); err == nil {
		t.Error("200 kV accepted")
	}
	if err := m.SetFieldMode(3*sec, "9cm"); err == nil {
		t.Error("unknown field mode accepted")
	}
}

// TestBrightnessSwitch: switching the control on during a manual-mode
// exposure at 80 kV brings the rate from 0.5·(80/70)² = 0.6531 back to the
// mode's 0.5 µGy/s with the control's time constant (0.4 s by default):
// after one time constant the deficit is e⁻¹ of the step (arithmetic).
func TestBrightnessSwitch(t *testing.T) {
	m := quiet(t, nil)
	m.SetBeam(0, true)
	if err := m.SetTubeVoltage(0, 80); err != nil {
		t.Fatal(err)
	}
	m.SetBrightnessControl(sec, true)
	start := 0.5 * (80.0 / 70) * (80.0 / 70)
	near(t, "rate one time constant later", m.Truth(sec+400*time.Millisecond).InputKermaRate,
		0.5+(start-0.5)*math.Exp(-1), 1e-9)
	if !m.Truth(2 * sec).BrightnessOn {
		t.Error("truth says the control is off")
	}
}

// TestScheduledControls: a control call for a later time takes effect
// then; one for an earlier time acts at the time reached. With the beam
// scheduled on at 1 s, the dosimeter (τ = 0.3 s) reads 0 before and
// 0.5·(1 − e⁻¹) at 1.3 s (first-order step response, from memory).
func TestScheduledControls(t *testing.T) {
	m := quiet(t, nil)
	m.SetBeam(sec, true)
	m.SetBeam(3*sec, false)
	if err := m.SetFieldMode(2*sec, "16cm"); err != nil {
		t.Fatal(err)
	}
	if v := m.DoseReading(900 * time.Millisecond).Clean; v != 0 {
		t.Errorf("before the scheduled beam-on: %g", v)
	}
	near(t, "0.3 s after the scheduled beam-on", m.DoseReading(1300*time.Millisecond).Clean, 0.5*(1-math.Exp(-1)), 1e-6)
	if tr := m.Truth(2500 * time.Millisecond); tr.FieldMode != "16cm" || !tr.Beam || tr.BeamOnCount != 1 {
		t.Errorf("at 2.5 s: mode %s beam %v count %d", tr.FieldMode, tr.Beam, tr.BeamOnCount)
	}
	if m.Truth(3500 * time.Millisecond).Beam {
		t.Error("scheduled beam-off did not happen")
	}
	// Time never runs back: a reading asked for 1 s now is at 3.5 s.
	if tr := m.Truth(sec); tr.At != 3500*time.Millisecond || tr.Beam {
		t.Errorf("truth for an earlier time: at %v beam %v", tr.At, tr.Beam)
	}
}

// A vented chamber at 24 °C and 98.0 kPa, calibrated at 20 °C and
// 101.325 kPa, reads the true kerma rate divided by k_TP = 1.0480
// (reference.md: arithmetic on the IAEA TRS-398 formula); a sealed one
// reads it unchanged.
func TestVentedChamberFollowsAirDensity(t *testing.T) {
	for _, tc := range []struct {
		name   string
		vented *VentedSpec
		want   float64
	}{
		{"vented, TRS-398 reference", &VentedSpec{ReferenceTemperatureC: 20, ReferencePressureKPa: 101.325}, 1 / 1.0480},
		{"vented, TG-61 reference", &VentedSpec{ReferenceTemperatureC: 22, ReferencePressureKPa: 101.325}, 1 / 1.0409},
		{"sealed", nil, 1},
	} {
		scn := &Scenario{Air: &AirSpec{TemperatureC: 24, PressureKPa: 98.0},
			Dosimeter: MeterSpec{Chamber: &ChamberSpec{ChamberFromFocusMM: 1000, InputFromFocusMM: 1000, Vented: tc.vented}}}
		m := &Model{scn: scn}
		if got := m.airResponse(); math.Abs(got-tc.want) > 5e-5 {
			t.Errorf("%s: reads %.5f × true, want %.5f", tc.name, got, tc.want)
		}
	}
}
