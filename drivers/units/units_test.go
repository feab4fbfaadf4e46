package units

import (
	"errors"
	"math"
	"testing"
)

func TestToCanonical(t *testing.T) {
	tests := []struct {
		q     Quantity
		value float64
		unit  string
		want  float64
		tol   float64 // relative
		src   string
	}{
		// 1 fL = 3.426 259 cd/m² (NIST SP 811, Appendix B.9).
		{Luminance, 1, "fL", 3.426259, 1e-6, "NIST SP 811 B.9"},
		{Luminance, 10, "ftL", 34.26259, 1e-6, "NIST SP 811 B.9"},
		{Luminance, 5, "nit", 5, 1e-12, "1 nit = 1 cd/m² (NIST SP 811)"},
		// 1 mR ↔ 8.76 µGy with W/e = 33.97 J/C, g = 0 (1 R = 2.58e-4 C/kg, NIST SP 811 B.9; W/e, ICRU 90).
		{AirKermaRate, 1, "mR/s", 8.764, 1e-3, "NIST SP 811 + ICRU W/e"},
		{AirKermaRate, 1, "R/min", 8764.26 / 60, 1e-4, "NIST SP 811 + ICRU W/e"},
		{AirKermaRate, 60, "mR/min", 8.764, 1e-3, "NIST SP 811 + ICRU W/e"},
		{AirKermaRate, 3.6, "mGy/h", 1, 1e-12, "SI prefixes"},
		{AirKermaRate, 0.06, "mGy/min", 1, 1e-12, "SI prefixes"},
		{AirKermaRate, 2, "uGy/s", 2, 1e-12, "ASCII micro"},
		{AirKermaRate, 2, "μGy/s", 2, 1e-12, "Greek mu"},
		{AirKerma, 1, "R", 8764.26, 1e-5, "NIST SP 811 + ICRU W/e"},
		// 1 mmHg = 133.322 4 Pa; 1 atm = 101.325 kPa (NIST SP 811 B.9).
		{Pressure, 760, "mmHg", 101.325, 1e-5, "NIST SP 811 B.9"},
		{Pressure, 1013.25, "hPa", 101.325, 1e-12, "SI prefixes"},
		{Pressure, 29.92, "inHg", 101.32, 1e-4, "NIST SP 811 B.9"},
		{Temperature, 293.15, "K", 20, 1e-12, "SI: T/°C = T/K − 273.15"},
		{Temperature, 68, "°F", 20, 1e-12, "NIST SP 811 B.9: t/°C = (t/°F − 32)/1.8"},
		{Length, 2.5, "cm", 25, 1e-12, "SI prefixes"},
	}
	for _, tc := range tests {
		got, err := ToCanonical(tc.q, tc.value, tc.unit)
		if err != nil {
			t.Errorf("%v %q: %v", tc.value, tc.unit, err)
			continue
		}
		if math.Abs(got-tc.want) > tc.tol*math.Abs(tc.want) {
			t.Errorf("%v %q = %v %s, want %v (%s)", tc.value, tc.unit, got, Canonical(tc.q), tc.want, tc.src)
		}
	}
}

func TestUnknownUnitIsAnError(t *testing.T) {
	for _, tc := range []struct {
		q    Quantity
		unit string
	}{
		{AirKermaRate, "furlong/fortnight"},
		{AirKermaRate, "cd/m2"}, // right table, wrong quantity
		{Luminance, "mR/s"},
		{AirKermaRate, "MR/s"}, // case matters: mega-roentgen is not milli
		{Luminance, "lux"},     // illuminance, not luminance
	} {
		_, err := ToCanonical(tc.q, 1, tc.unit)
		var ue *UnknownUnitError
		if !errors.As(err, &ue) {
			t.Errorf("%q as %s: got %v, want UnknownUnitError", tc.unit, tc.q, err)
		}
	}
}

func TestRoundTrip(t *testing.T) {
	for name, l := range table {
		v := 12.5
		c, err := ToCanonical(l.q, v, name)
		if err != nil {
			t.Fatal(err)
		}
		back, err := FromCanonical(l.q, c, name)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(back-v) > 1e-9*v {
			t.Errorf("%q: round trip %v -> %v -> %v", name, v, c, back)
		}
	}
}
