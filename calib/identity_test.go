package calib

import (
	"math"
	"strings"
	"testing"

	"kermalux/drivers"
	"kermalux/drivers/units"
)

// TestCertificateAppliesOnlyToItsMeter (observation 5: a meter that
// identified as another serial, once as another model, got the
// certificate and a calibrated pass): a certificate belongs to the model
// and serial it names (common practice: a calibration laboratory
// certifies one instrument, by serial number).
func TestCertificateAppliesOnlyToItsMeter(t *testing.T) {
	c := load(t, "veltrane-kr40-1187.yaml") // Veltrane KR-40, serial KR40-1187
	for _, tc := range []struct {
		name  string
		id    drivers.Identity
		words string // "" = applies
	}{
		{"maker and model apart, as the dialect splits them", drivers.Identity{Maker: "VELTRANE", Model: "KR-40", Serial: "KR40-1187", Firmware: "2.1"}, ""},
		{"model as printed on the certificate", drivers.Identity{Model: "Veltrane KR-40", Serial: " kr40-1187 "}, ""},
		{"another serial", drivers.Identity{Maker: "VELTRANE", Model: "KR-40", Serial: "KR40-1188"}, "reports serial KR40-1188"},
		{"another model", drivers.Identity{Maker: "VELTRANE", Model: "KR-60", Serial: "KR40-1187"}, "is a VELTRANE KR-60"},
		{"no serial reported", drivers.Identity{Maker: "VELTRANE", Model: "KR-40"}, "did not report its serial"},
		{"nothing reported", drivers.Identity{}, "did not report its model"},
	} {
		err := c.AppliesTo(tc.id)
		switch {
		case tc.words == "" && err != nil:
			t.Errorf("%s: %v", tc.name, err)
		case tc.words != "" && (err == nil || !strings.Contains(err.Error(), tc.words)):
			t.Errorf("%s: error %v, want one saying %q", tc.name, err, tc.words)
		}
	}
	// A reading from another meter gets none of the certificate: no
	// coefficient, no k_TP from its chamber, not calibrated, and says why.
	s := Setup{Cert: c, Day: day("2026-12-02"), BeamQuality: BeamQuality{Name: "RQA5"}, Air: Air{Temperature: 21, Pressure: 100.9},
		Meter: &drivers.Identity{Maker: "VELTRANE", Model: "KR-40", Serial: "KR40-0921"}}
	got := Correct(0.5, units.AirKermaRate, s)
	if got.Calibrated || !hasFlag(got, FlagOtherMeter) || got.Value != 0.5 || hasCorrection(got.Corrections, CorrCoefficient) || hasCorrection(got.Corrections, CorrKTP) {
		t.Errorf("another meter: calibrated %v value %v applied %+v flags %v", got.Calibrated, got.Value, got.Corrections, got.Flags)
	}
	s.Meter = nil
	if got := Correct(0.5, units.AirKermaRate, s); got.Calibrated || !hasFlag(got, FlagNotIdentified) {
		t.Errorf("not identified: calibrated %v flags %v", got.Calibrated, got.Flags)
	}
}

// TestDarkUncertaintyHasResolution (observation 6: "0.0300031 ± 0.0000054
// cd/m²" from a meter with 0.01 resolution): the display's rectangular
// part δ/√12 (JCGM 100:2008 F.2.2.1) stays whatever the number of
// readings. Check values by hand: 0.01/√12 = 0.0028868; with s = 0.004
// over n = 16, s/√n = 0.001 and u = √(0.001² + 0.0028868²) = 0.0030551.
func TestDarkUncertaintyHasResolution(t *testing.T) {
	u, dof := DarkUncertainty(Summary{N: 1000, Mean: 0.0300031, SD: 0.00017}, 0.01)
	if math.Abs(u-math.Hypot(0.00017/math.Sqrt(1000), 0.01/math.Sqrt(12))) > 1e-12 || u < 0.0028 {
		t.Errorf("u = %v, want at least the resolution's 0.0029", u)
	}
	if dof != 0 && dof < 1e4 {
		t.Errorf("ν = %v: the resolution's part (infinite ν) dominates", dof)
	}
	if u, _ := DarkUncertainty(Summary{N: 16, Mean: 0.03, SD: 0.004}, 0.01); math.Abs(u-0.0030551) > 5e-7 {
		t.Errorf("u = %.7f, want 0.0030551", u)
	}
	if u, _ := DarkUncertainty(Summary{N: 50, Mean: 0.03, SD: 0}, 0.01); math.Abs(u-0.0028868) > 5e-7 {
		t.Errorf("constant readings: u = %.7f, want 0.0028868", u)
	}
}

// TestDarkSubtractedInRawScale (observation 6: the photometer's dark,
// already multiplied by its coefficient, was subtracted from the raw
// reading and the coefficient applied again): L = N·(M − M_dark) with
// M_dark as the meter read it, and the dark's uncertainty carried through
// N. By hand with the certificate's N = 1.012: (100.5 − 0.5) × 1.012 =
// 101.2; u = 0.003 × 1.012 = 0.003036.
func TestDarkSubtractedInRawScale(t *testing.T) {
	p := load(t, "vessoric-lm9-5521.yaml")
	got := Correct(100.5, units.Luminance, Setup{Cert: p, Meter: own(p), Day: day("2026-12-02"), Dark: &Dark{Value: 0.5, StdUnc: 0.003, DoF: 9}})
	if math.Abs(got.Value-101.2) > 1e-9 || got.Corrections[0].Name != CorrDark || got.Corrections[1].Name != CorrCoefficient {
		t.Fatalf("got %v, applied %+v", got.Value, got.Corrections)
	}
	var found bool
	for _, b := range got.TypeB {
		if strings.Contains(b.Source, "dark") {
			found = true
			if math.Abs(b.Abs-0.003036) > 1e-9 || b.DoF != 9 || b.Calibration {
				t.Errorf("dark component %+v, want 0.003036 cd/m² with 9 degrees of freedom", b)
			}
		}
	}
	if !found {
		t.Errorf("no dark component in %+v", got.TypeB)
	}
}

// TestLevelCarriesResolution (observation 6): a dark level's expanded
// uncertainty is never below what the display resolution allows, 2·δ/√12
// (JCGM 100:2008 F.2.2.1 at k ≈ 2): 0.0058 cd/m² for δ = 0.01, where the
// spread of 1000 readings alone gave ±0.0000054.
func TestLevelCarriesResolution(t *testing.T) {
	m := Measured{Name: "photometer dark", Unit: "cd/m²", Samples: Summary{N: 1000, Mean: 0.0300031, SD: 0.00017}, Calibrated: true,
		TypeB: []Component{ResolutionComponent(0.01)}}
	r := Level(QDarkLevel, m, 0)
	if r.ExpUnc < 2*0.01/math.Sqrt(12)*0.999 || r.Value != 0.0300031 || len(r.Budget) != 2 {
		t.Errorf("dark level %v ± %v (k %v), budget %+v", r.Value, r.ExpUnc, r.K, r.Budget)
	}
	// A level of exactly zero is a value, not a failed input.
	m.Samples = Summary{N: 20, Mean: 0, SD: 0}
	if r := Level(QDarkLevel, m, 0); !r.Calibrated || math.Abs(r.StdUnc-0.01/math.Sqrt(12)) > 1e-12 {
		t.Errorf("zero level: calibrated %v u %v flags %v", r.Calibrated, r.StdUnc, r.Flags)
	}
}

// TestPositionDark (observation 6: one centre dark subtracted at every
// position made non-uniformity 5.7-9.3 U high with vignetted dark light):
// a position without its own dark gets the middle of "centre dark
// unchanged" and "centre dark scaled by the position's light", with the
// rectangular uncertainty over the two (JCGM 100:2008 4.3.7). By hand:
// D = 0.3, centre 100.3, position 80.3 give ρ = 80/100 = 0.8, D_pos =
// 0.3·1.8/2 = 0.27 and u = 0.3·0.2/(2√3) = 0.017321.
func TestPositionDark(t *testing.T) {
	d, u := PositionDark(0.3, 80.3, 100.3)
	if math.Abs(d-0.27) > 1e-12 || math.Abs(u-0.017321) > 5e-7 {
		t.Errorf("PositionDark = %v ± %v, want 0.27 ± 0.017321", d, u)
	}
	// The truth under either model lies within √3·u of the estimate.
	for _, truth := range []float64{0.3, 0.3 * 0.8} {
		if math.Abs(truth-d) > math.Sqrt(3)*u+1e-12 {
			t.Errorf("model %v lies outside the interval %v ± √3·%v", truth, d, u)
		}
	}
	if d, u := PositionDark(0.3, 100.3, 100.3); d != 0.3 || u != 0 {
		t.Errorf("at the centre's level: %v ± %v, want the centre dark", d, u)
	}
}
