package engine

import (
	"math"
	"testing"
	"time"

	"kermalux/calib"
	"kermalux/drivers"
	"kermalux/drivers/units"
)

// The thermometer's and barometer's uncertainties enter the type B part of
// a vented chamber's corrected reading through k_TP ∝ (273.15 + T)/P: by
// the law of propagation for a product (JCGM 100:2008 5.1.6) their relative
// variances, u_T²/(273.15 + T)² and u_P²/P², add to the certificate's.
func TestCorrectorAddsAirInstruments(t *testing.T) {
	cert, err := calib.LoadCertificate("../../testdata/certificates/veltrane-kr40-1187.yaml")
	if err != nil {
		t.Fatal(err)
	}
	day := time.Date(2026, 12, 2, 10, 0, 0, 0, time.UTC)
	r := drivers.Reading{Quantity: units.AirKermaRate, Value: 0.45, Unit: "µGy/s", Status: drivers.StatusOK, Wall: day}
	c := Conditions{BeamQuality: "RQA5", Values: map[string]float64{"temperature": 23.5, "pressure": 99.2}}
	own := &drivers.Identity{Maker: "VELTRANE", Model: "KR-40", Serial: cert.Serial}
	plain := CalibCorrector{Cert: cert, Day: day, Geometry: calib.Geometry{GridRemoved: true}, Meter: own}.Correct(r, c)
	uT, uP := 0.5/math.Sqrt(3), 0.2/math.Sqrt(3)
	with := CalibCorrector{Cert: cert, Day: day, Geometry: calib.Geometry{GridRemoved: true}, TemperatureUnc: uT, PressureUnc: uP, Meter: own}.Correct(r, c)
	if !plain.Calibrated || !with.Calibrated {
		t.Fatalf("not calibrated: %v %v", plain.Flags, with.Flags)
	}
	want := math.Pow(uT/(273.15+23.5), 2) + math.Pow(uP/99.2, 2)
	got := with.RelStdUncB*with.RelStdUncB - plain.RelStdUncB*plain.RelStdUncB
	if math.Abs(got-want) > 1e-3*want {
		t.Errorf("added relative variance %.4g, want %.4g", got, want)
	}
}
