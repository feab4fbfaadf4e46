package calib

import (
	"math"
	"strings"
	"testing"

	"kermalux/drivers/units"
)

func TestRQATable(t *testing.T) {
	// IEC 61267 RQA qualities as listed in /work/shared/reference.md (tube
	// voltage, added Al; HVL of the 2005 edition). Edition caveat: the
	// 1994 edition's HVLs differ; these were not read in the standard
	// itself (verify before relying on them).
	want := map[string][3]float64{
		"RQA3": {50, 10, 3.8}, "RQA5": {70, 21, 6.8}, "RQA7": {90, 30, 9.2}, "RQA9": {120, 40, 11.6},
	}
	want94 := map[string]float64{"RQA3": 4.0, "RQA5": 7.1, "RQA7": 9.1, "RQA9": 11.5}
	for name, w := range want {
		q, ok := RQA(strings.ToLower(name))
		if !ok || q.TubeVoltage != w[0] || q.AddedAl != w[1] || q.HVL != w[2] {
			t.Errorf("%s = %+v, want %v", name, q, w)
		}
		if RQA1994HVL[name] != want94[name] {
			t.Errorf("%s 1994 HVL = %v, want %v", name, RQA1994HVL[name], want94[name])
		}
	}
	if _, ok := RQA("RQA6"); ok {
		t.Error("RQA6 is not an IEC 61267 quality")
	}
}

func TestLegacyConversionFactor(t *testing.T) {
	// 1 mR ↔ 8.764 µGy (1 R = 2.58e-4 C/kg, NIST SP 811 B.9; W/e = 33.97 J/C,
	// ICRU 90; g = 0), so G(per mR/s) = 8.76 × G(per µGy/s) (reference.md).
	if got := LegacyConversionFactor(1); math.Abs(got-8.764) > 0.001 {
		t.Errorf("legacy factor = %v, want 8.764", got)
	}
	// A screen at 100 cd/m² under 0.1 mR/s has G = 1000 cd·m⁻²/(mR·s⁻¹).
	k, _ := units.ToCanonical(units.AirKermaRate, 0.1, "mR/s")
	r := ConversionFactor(meas(100, 5, 1), meas(k, 5, 0.01), 0)
	if d := r.Detail.(*ConversionDetail); math.Abs(d.Legacy-1000) > 1e-9 {
		t.Errorf("legacy G = %v, want 1000", d.Legacy)
	}
}

func meas(mean float64, n int, sd float64) Measured {
	return Measured{Name: "m", Samples: Summary{N: n, Mean: mean, SD: sd}, Calibrated: true}
}

// The conversion factor does not depend on the units the meters printed:
// luminance in fL and kerma rate in mR/s give the same G once normalised.
func TestConversionFactorUnitInvariance(t *testing.T) {
	// 1 fL = 3.426 259 cd/m² (NIST SP 811 B.9): 44.0 fL = 150.755 cd/m².
	lfl, _ := units.ToCanonical(units.Luminance, 44.0, "fL")
	if math.Abs(lfl-44*3.426259) > 1e-4 {
		t.Fatalf("44 fL = %v cd/m²", lfl)
	}
	// 0.1141 mR/s = 1.0000 µGy/s (8.764 µGy per mR).
	kmr, _ := units.ToCanonical(units.AirKermaRate, 1/8.76426, "mR/s")
	a := ConversionFactor(meas(lfl, 10, 0.01*lfl), meas(kmr, 10, 0.01*kmr), 0)
	b := ConversionFactor(meas(44*3.426259, 10, 0.01*44*3.426259), meas(1.0, 10, 0.01), 0)
	if math.Abs(a.Value-b.Value) > 1e-4*b.Value || math.Abs(a.StdUnc-b.StdUnc) > 1e-4*b.StdUnc {
		t.Errorf("G from fL, mR/s = %v ± %v; from cd/m², µGy/s = %v ± %v", a.Value, a.StdUnc, b.Value, b.StdUnc)
	}
	// And scaling both meters' units by the same factor leaves G alone.
	for _, s := range []float64{1e-3, 0.5, 7, 1e4} {
		c := ConversionFactor(meas(150*s, 10, 1.5*s), meas(1, 10, 0.01), 0)
		d := ConversionFactor(meas(150, 10, 1.5), meas(1/s, 10, 0.01/s), 0)
		if math.Abs(c.Value/s-150) > 1e-9 || math.Abs(d.Value/s-150) > 1e-9 || math.Abs(c.StdUnc/c.Value-d.StdUnc/d.Value) > 1e-12 {
			t.Errorf("scale %v: %v, %v", s, c.Value, d.Value)
		}
	}
}

func spots(values map[string]float64) []Spot {
	// centre plus 0.5 r and 0.9 r on two diameters (up, down, left, right)
	pos := []struct {
		label  string
		r, ang float64
	}{
		{"centre", 0, 0},
		{"up 0.5", 0.5, 90}, {"down 0.5", 0.5, 270}, {"left 0.5", 0.5, 180}, {"right 0.5", 0.5, 0},
		{"up 0.9", 0.9, 90}, {"down 0.9", 0.9, 270}, {"left 0.9", 0.9, 180}, {"right 0.9", 0.9, 0},
	}
	var out []Spot
	for _, p := range pos {
		v, ok := values[p.label]
		if !ok {
			v = values["*"]
		}
		out = append(out, Spot{Label: p.label, Radius: p.r, Angle: p.ang, Luminance: Measured{Name: p.label, Unit: "cd/m²",
			Samples: Summary{N: 5, Mean: v, SD: 0.01 * v}, Calibrated: true,
			TypeB: []Component{{Source: "calibration coefficient", Rel: 0.01, Calibration: true}, ResolutionComponent(0.01)}}})
	}
	return out
}

func TestUniformity(t *testing.T) {
	// A perfectly flat screen has zero non-uniformity and edge/centre 1.
	flat, err := Uniformity(spots(map[string]float64{"*": 120}), 0)
	if err != nil || flat.Value != 0 || flat.Detail.(*UniformityDetail).EdgeToCentre != 1 {
		t.Errorf("flat: %v, %+v", err, flat)
	}
	// Worked by hand: centre 200, 0.5 r 190 (all four), 0.9 r 170, 160, 170, 170.
	//   NU = (200 − 160)/(200 + 160) = 0.1111; edge mean = 167.5 → 0.8375 of centre.
	vals := map[string]float64{"centre": 200, "*": 190, "up 0.9": 170, "down 0.9": 160, "left 0.9": 170, "right 0.9": 170}
	r, err := Uniformity(spots(vals), 0)
	if err != nil {
		t.Fatal(err)
	}
	d := r.Detail.(*UniformityDetail)
	if math.Abs(r.Value-40.0/360) > 1e-12 || math.Abs(d.EdgeToCentre-0.8375) > 1e-12 || d.MinAt != "down 0.9" || d.MaxAt != "centre" {
		t.Errorf("NU = %v, edge/centre %v, max at %q, min at %q", r.Value, d.EdgeToCentre, d.MaxAt, d.MinAt)
	}
	if len(d.Profile) != 3 || d.Profile[1].Radius != 0.5 || d.Profile[1].Mean != 190 || d.Profile[2].N != 4 {
		t.Errorf("profile %+v", d.Profile)
	}
	// Uncertainty by hand (5.1.2): u(L) = 0.01·L/√5 (type A) and 0.01/√12 (resolution);
	// the calibration coefficient cancels. c_max = 2·160/360², c_min = −2·200/360².
	uMax := math.Hypot(2/math.Sqrt(5), 0.01/math.Sqrt(12))
	uMin := math.Hypot(1.6/math.Sqrt(5), 0.01/math.Sqrt(12))
	want := math.Hypot(2*160/(360*360.0)*uMax, 2*200/(360*360.0)*uMin)
	if math.Abs(r.StdUnc-want) > 1e-9*want || !r.Calibrated || len(r.Budget) != 4 {
		t.Errorf("u = %v, want %v; calibrated %v; %d rows", r.StdUnc, want, r.Calibrated, len(r.Budget))
	}
	// Errors: no centre, radius outside 0..1.
	s := spots(vals)
	s[0].Radius = 0.1
	if _, err := Uniformity(s, 0); err == nil {
		t.Error("no centre reading must be an error")
	}
	s[0].Radius = 1.2
	if _, err := Uniformity(s, 0); err == nil {
		t.Error("radius 1.2 must be an error")
	}
}

func TestContrastRatioCancelsPhotometerCalibration(t *testing.T) {
	expired := Flag{FlagExpired, "certificate CPS-1 for the Vessoric LM-9 expired on 2025-01-01: reading not calibrated"}
	open := Measured{Name: "open", Samples: Summary{N: 6, Mean: 180, SD: 1.8}, TypeB: []Component{{Rel: 0.01, Calibration: true}}, Flags: []Flag{expired}}
	disk := Measured{Name: "disk", Samples: Summary{N: 6, Mean: 9, SD: 0.18}, TypeB: []Component{{Rel: 0.01, Calibration: true}}, Flags: []Flag{expired}}
	r := ContrastRatio(open, disk, 23, 230, 0)
	// CR = 180/9 = 20; u_rel² = (0.01/√6)² + (0.02/√6)² (calibration cancels) → u_rel = 0.0091287.
	if math.Abs(r.Value-20) > 1e-12 || math.Abs(r.StdUnc/r.Value-math.Sqrt(0.0005/6)) > 1e-12 {
		t.Errorf("CR = %v ± %v", r.Value, r.StdUnc)
	}
	if !r.Calibrated || len(r.Flags) != 0 || len(r.Budget) != 2 {
		t.Errorf("calibrated %v flags %v budget %d", r.Calibrated, r.Flags, len(r.Budget))
	}
	// A 30 mm disk in a 230 mm field is noted (13 %), not refused.
	r = ContrastRatio(open, disk, 30, 230, 0)
	if len(r.Flags) != 1 || r.Flags[0].Code != FlagDiskSize || !r.Calibrated {
		t.Errorf("flags %v", r.Flags)
	}
}

func TestConversionFactorUncalibratedInput(t *testing.T) {
	old := load(t, "veltrane-kr40-1187-expired.yaml")
	k := Correct(1, units.AirKermaRate, Setup{Cert: old, Meter: own(old), Day: day("2026-12-02"), BeamQuality: BeamQuality{Name: "RQA5"}, Air: Air{Temperature: 21, Pressure: 100}})
	in := Measured{Name: "K", Samples: Summary{N: 5, Mean: k.Value, SD: 0.01}, Calibrated: k.Calibrated, Flags: k.Flags}
	r := ConversionFactor(meas(150, 5, 1), in, 0)
	if r.Calibrated || len(r.Flags) == 0 || r.Flags[0].Code != FlagExpired {
		t.Errorf("calibrated %v flags %v", r.Calibrated, r.Flags)
	}
}

func TestModeScaling(t *testing.T) {
	modes := []Mode{
		{Name: "32 cm", FieldDiameter: 320, Kerma: meas(0.40, 8, 0.004)},
		{Name: "22 cm", FieldDiameter: 220, Kerma: meas(0.80, 8, 0.008)},
		{Name: "16 cm", FieldDiameter: 160, Kerma: meas(1.60, 8, 0.016)},
	}
	rs, err := ModeScaling(modes, 0)
	if err != nil || len(rs) != 2 {
		t.Fatalf("%v %d", err, len(rs))
	}
	// Expected by the (d_full/d_mode)² rule: (320/220)² = 2.1157, (320/160)² = 4.
	d := rs[1].Detail.(*ScalingDetail)
	if rs[1].Value != 4 || d.Expected != 4 || d.OfExpected != 1 || d.Reference != "32 cm" {
		t.Errorf("16 cm: %v %+v", rs[1].Value, d)
	}
	if d := rs[0].Detail.(*ScalingDetail); math.Abs(d.Expected-2.115702) > 1e-6 || math.Abs(d.OfExpected-2/2.115702) > 1e-6 {
		t.Errorf("22 cm: %+v", d)
	}
	if _, err := ModeScaling(modes[:1], 0); err == nil {
		t.Error("one mode must be an error")
	}
}

// Property: the non-uniformity lies in [0, 1) and does not change when
// every luminance is scaled by one factor (a photometer's calibration
// coefficient cancels in it); the contrast ratio likewise.
func TestUniformityScaleInvariance(t *testing.T) {
	vals := map[string]float64{"centre": 200, "*": 190, "up 0.9": 170, "down 0.9": 150, "left 0.9": 175, "right 0.9": 160}
	base, err := Uniformity(spots(vals), 0)
	if err != nil {
		t.Fatal(err)
	}
	for _, f := range []float64{0.01, 0.9, 3.426259, 1000} {
		scaled := map[string]float64{}
		for k, v := range vals {
			scaled[k] = v * f
		}
		r, err := Uniformity(spots(scaled), 0)
		if err != nil || r.Value < 0 || r.Value >= 1 || math.Abs(r.Value-base.Value) > 1e-12 {
			t.Errorf("scale %v: NU %v vs %v (%v)", f, r.Value, base.Value, err)
		}
		a := ContrastRatio(meas(180*f, 6, 1.8*f), meas(9*f, 6, 0.09*f), 23, 230, 0)
		if math.Abs(a.Value-20) > 1e-9 || math.Abs(a.StdUnc/a.Value-math.Hypot(0.01, 0.01)/math.Sqrt(6)) > 1e-12 {
			t.Errorf("scale %v: CR %v ± %v", f, a.Value, a.StdUnc)
		}
	}
}
