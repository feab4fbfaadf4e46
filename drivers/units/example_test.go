package units_test

import (
	"fmt"

	"kermalux/drivers/units"
)

// An old dosimeter printing exposure rate: 1 mR/s is 2.58e-7 C/kg/s (NIST
// SP 811, B.9: 1 R = 2.58e-4 C/kg exactly) times W/e = 33.97 J/C (ICRU
// Report 90), i.e. 8.764 µGy/s of air kerma rate.
func ExampleToCanonical() {
	v, err := units.ToCanonical(units.AirKermaRate, 1, "mR/s")
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%.3f %s\n", v, units.Canonical(units.AirKermaRate))
	// Output:
	// 8.764 µGy/s
}

// A photometer printing foot-lamberts: 1 fL = (1/π) cd/ft² = 3.426 cd/m²
// (NIST SP 811, B.9: 1 footlambert = 3.426 259 cd/m²).
func ExampleToCanonical_footLamberts() {
	v, _ := units.ToCanonical(units.Luminance, 10, "fL")
	fmt.Printf("%.2f %s\n", v, units.Canonical(units.Luminance))
	// Output:
	// 34.26 cd/m²
}
