package calib

import (
	"math"
	"strings"
	"testing"

	"kermalux/drivers"
	"kermalux/drivers/units"
)

func TestKTP(t *testing.T) {
	tests := []struct {
		t, p, t0, p0 float64
		want         float64
		src          string
	}{
		// reference.md: arithmetic on the TRS-398 / TG-61 formula.
		// (297.15/293.15)·(101.325/98.0) = 1.013645·1.033929 = 1.04804
		{24, 98.0, 20, 101.325, 1.0480, "TRS-398 eq. for k_TP, T0 = 20 °C (reference.md)"},
		// (297.15/295.15)·(101.325/98.0) = 1.006776·1.033929 = 1.04093
		{24, 98.0, 22, 101.325, 1.0409, "TG-61 T0 = 22 °C (reference.md)"},
		// At the reference conditions the correction vanishes (by definition of k_TP).
		{20, 101.325, 20, 101.325, 1, "definition"},
		// Denver-like altitude: 83.0 kPa, 22 °C, T0 22 °C: 101.325/83.0 = 1.22078 (arithmetic).
		{22, 83.0, 22, 101.325, 1.22078, "arithmetic on the formula"},
	}
	for _, tc := range tests {
		if got := KTP(tc.t, tc.p, tc.t0, tc.p0); math.Abs(got-tc.want) > 5e-5 {
			t.Errorf("KTP(%v °C, %v kPa; T0 %v) = %.5f, want %.4f (%s)", tc.t, tc.p, tc.t0, got, tc.want, tc.src)
		}
	}
}

func TestInverseSquareAndBackscatter(t *testing.T) {
	// Inverse-square law: moving from 900 mm to 1000 mm from the source
	// scales the kerma rate by 0.81 (0.9²); doubling the distance quarters it.
	if got := InverseSquare(900, 1000); math.Abs(got-0.81) > 1e-12 {
		t.Errorf("InverseSquare(900, 1000) = %v, want 0.81", got)
	}
	if got := InverseSquare(500, 1000); math.Abs(got-0.25) > 1e-12 {
		t.Errorf("InverseSquare(500, 1000) = %v, want 0.25", got)
	}
	if got := BackscatterFactor(1.25); got != 0.8 {
		t.Errorf("BackscatterFactor(1.25) = %v, want 0.8", got)
	}
}

// own is the identity the meter of certificate c reports: its model
// and serial, as a dialect would return them.
func own(c *Certificate) *drivers.Identity {
	return &drivers.Identity{Model: c.Model, Serial: c.Serial}
}

func hasFlag(c Corrected, code FlagCode) bool {
	for _, f := range c.Flags {
		if f.Code == code {
			return true
		}
	}
	return false
}

func TestCorrectDosimeterOrderAndRecord(t *testing.T) {
	c := load(t, "veltrane-kr40-1187.yaml")
	s := Setup{
		Cert:        c,
		Meter:       own(c),
		Day:         day("2026-12-02"),
		BeamQuality: BeamQuality{Name: "RQA5"},
		Air:         Air{Temperature: 24, Pressure: 98.0},
		Geometry:    Geometry{SourceToChamber: 900, SourceToInput: 1000, OnFace: true, GridRemoved: true},
	}
	got := Correct(0.5, units.AirKermaRate, s)
	if !got.Calibrated || len(got.Flags) != 0 {
		t.Fatalf("flags %v", got.Flags)
	}
	names := []string{}
	for _, a := range got.Corrections {
		names = append(names, a.Name)
	}
	if strings.Join(names, ",") != "calibration_coefficient,k_tp,backscatter,inverse_square" {
		t.Errorf("order = %v", names)
	}
	// By hand: 0.5 × 1.008 (RQA5 row) × 1.04804 (k_TP above) / 1.27 (certificate B) × 0.81.
	want := 0.5 * 1.008 * 1.04804 / 1.27 * 0.81
	if math.Abs(got.Value-want) > 1e-5*want {
		t.Errorf("value = %v, want %v", got.Value, want)
	}
	if !strings.Contains(got.Corrections[2].Note, "grid removed") || got.Certificate != "NRML-26-0318" {
		t.Errorf("notes %+v certificate %q", got.Corrections, got.Certificate)
	}
}

func TestCorrectPhotometer(t *testing.T) {
	p := load(t, "vessoric-lm9-5521.yaml")
	got := Correct(100.5, units.Luminance, Setup{Cert: p, Meter: own(p), Day: day("2026-12-02"), Dark: &Dark{Value: 0.5}})
	// (100.5 − 0.5) × 1.012 = 101.2
	if !got.Calibrated || math.Abs(got.Value-101.2) > 1e-9 || len(got.Corrections) != 2 || got.Corrections[0].Name != CorrDark || got.Corrections[0].Offset != -0.5 {
		t.Errorf("got %+v", got)
	}
}

// An expired certificate, a beam quality outside the table and a missing
// pressure each leave the reading flagged and not calibrated.
func TestCorrectFlagsInsteadOfCalibrating(t *testing.T) {
	good := load(t, "veltrane-kr40-1187.yaml")
	old := load(t, "veltrane-kr40-1187-expired.yaml")
	base := Setup{Cert: good, Meter: own(good), Day: day("2026-12-02"), BeamQuality: BeamQuality{Name: "RQA5"}, Air: Air{Temperature: 21, Pressure: 100.9}}
	tests := []struct {
		name  string
		edit  func(*Setup)
		code  FlagCode
		words string
	}{
		{"expired certificate", func(s *Setup) { s.Cert = old }, FlagExpired, "expired"},
		{"no certificate", func(s *Setup) { s.Cert = nil }, FlagNoCertificate, "no calibration certificate"},
		{"quality above the table", func(s *Setup) { s.BeamQuality = BeamQuality{HVL: 14} }, FlagOutsideQuality, "outside"},
		{"quality not in a named table", func(s *Setup) { s.Cert = old; s.Day = day("2024-06-01"); s.BeamQuality = BeamQuality{Name: "RQA3"} }, FlagOutsideQuality, "RQA3"},
		{"missing pressure", func(s *Setup) { s.Air.Pressure = 0 }, FlagNoAirDensity, "pressure"},
		{"missing temperature", func(s *Setup) { s.Air.Temperature = math.NaN() }, FlagNoAirDensity, "temperature"},
		{"pressure in the wrong unit", func(s *Setup) { s.Air.Pressure = 1013 }, FlagNoAirDensity, "pressure"},
		{"on the face, no backscatter", func(s *Setup) { s.Cert = old; s.Day = day("2024-06-01"); s.Geometry.OnFace = true }, FlagNoBackscatter, "backscatter"},
		{"negative distance", func(s *Setup) { s.Geometry = Geometry{SourceToChamber: -5, SourceToInput: 1000} }, FlagGeometry, "positive"},
		{"photometer certificate on a dosimeter", func(s *Setup) { s.Cert = load(t, "vessoric-lm9-5521.yaml"); s.Meter = own(s.Cert) }, FlagWrongQuantity, "luminance"},
	}
	if c := Correct(1, units.AirKermaRate, base); !c.Calibrated {
		t.Fatalf("the unedited set-up must calibrate: %v", c.Flags)
	}
	for _, tc := range tests {
		s := base
		tc.edit(&s)
		c := Correct(1, units.AirKermaRate, s)
		if c.Calibrated || !hasFlag(c, tc.code) || !strings.Contains(strings.Join(FlagTexts(c.Flags), " "), tc.words) {
			t.Errorf("%s: calibrated %v flags %v; want %s mentioning %q", tc.name, c.Calibrated, c.Flags, tc.code, tc.words)
		}
	}
	// A sealed detector needs no air density: missing T and P are fine.
	h := load(t, "ondrakel-dx2-30417.yaml")
	c := Correct(1, units.AirKermaRate, Setup{Cert: h, Meter: own(h), Day: day("2026-12-02"), BeamQuality: BeamQuality{TubeVoltage: 70}})
	if !c.Calibrated || !hasFlag(c, FlagDueSoon) {
		t.Errorf("sealed detector, due in 16 days: calibrated %v flags %v", c.Calibrated, c.Flags)
	}
}

func TestCorrectedTypeBAndCollect(t *testing.T) {
	c := load(t, "veltrane-kr40-1187.yaml")
	s := Setup{Cert: c, Meter: own(c), Day: day("2026-12-02"), BeamQuality: BeamQuality{Name: "RQA5"},
		Air:      Air{Temperature: 24, Pressure: 98.0, TemperatureUnc: 0.3, PressureUnc: 0.1},
		Geometry: Geometry{SourceToChamber: 900, SourceToInput: 1000, DistanceUnc: 2}}
	var rs []Corrected
	for _, v := range []float64{0.50, 0.51, 0.49, 0.50} {
		rs = append(rs, Correct(v, units.AirKermaRate, s))
	}
	// Rows: coefficient 1.2 %; T 0.3/297.15 = 0.101 %; P 0.1/98 = 0.102 %;
	// distances 2·√((2/900)² + (2/1000)²) = 0.598 %; resolution
	// 0.001/√12 × (1.008·1.04804·0.81) µGy/s (factors carried through).
	want := []float64{0.012, 0.3 / 297.15, 0.1 / 98, 2 * math.Hypot(2.0/900, 2.0/1000)}
	tb := rs[0].TypeB
	if len(tb) != 5 {
		t.Fatalf("type B rows %+v", tb)
	}
	for i, w := range want {
		if math.Abs(tb[i].Rel-w) > 1e-9 {
			t.Errorf("row %d (%s) = %v, want %v", i, tb[i].Source, tb[i].Rel, w)
		}
	}
	if res := 0.001 / math.Sqrt(12) * 1.008 * 1.04804 * 0.81; math.Abs(tb[4].Abs-res) > 1e-5*res {
		t.Errorf("resolution row %v, want %v", tb[4].Abs, res)
	}
	m := Collect("input air kerma rate", "µGy/s", rs)
	if m.Samples.N != 4 || !m.Calibrated || len(m.TypeB) != 5 || math.Abs(m.Samples.Mean-rs[0].Value) > 1e-12 {
		t.Errorf("collected %+v", m)
	}
	// One flagged reading uncalibrates the run and its flag appears once.
	s.Air.Pressure = 0
	rs = append(rs, Correct(0.5, units.AirKermaRate, s), Correct(0.5, units.AirKermaRate, s))
	m = Collect("input air kerma rate", "µGy/s", rs)
	if m.Calibrated || len(m.Flags) != 1 {
		t.Errorf("calibrated %v flags %v", m.Calibrated, m.Flags)
	}
	if got := rs[0].RelStdUncB(); got < 0.012 || got > 0.0137 {
		t.Errorf("RelStdUncB = %v", got)
	}
}

func TestGridStateAlwaysRecorded(t *testing.T) {
	h := load(t, "ondrakel-dx2-30417.yaml")
	for _, removed := range []bool{true, false} {
		c := Correct(1, units.AirKermaRate, Setup{Cert: h, Meter: own(h), Day: day("2026-12-02"), BeamQuality: BeamQuality{TubeVoltage: 70}, Geometry: Geometry{GridRemoved: removed}})
		last := c.Corrections[len(c.Corrections)-1]
		want := map[bool]string{true: "grid removed", false: "grid in place"}[removed]
		if last.Name != CorrGeometry || last.Factor != 1 || !strings.Contains(last.Note, want) || c.Value != 1 {
			t.Errorf("grid removed %v: %+v", removed, c.Corrections)
		}
	}
}
