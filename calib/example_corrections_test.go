package calib_test

import (
	"fmt"

	"kermalux/calib"
)

// A vented chamber calibrated at the IAEA TRS-398 reference conditions
// (T0 = 20 °C, P0 = 101.325 kPa) read in a room at 22 °C and 98.0 kPa.
// By hand from TRS-398 eq. (9): (295.15 / 293.15) · (101.325 / 98.0)
// = 1.00682 · 1.03393 = 1.0410.
func ExampleKTP() {
	fmt.Printf("k_TP = %.4f\n", calib.KTP(22, 98.0, 20, 101.325))
	// Output:
	// k_TP = 1.0410
}

// Student's t for a 95.45 % interval (JCGM 100:2008 Table G.2): 2.28 at
// ν = 10, 2.09 at ν = 30, 2.05 at ν = 50 and 2.00 for infinite degrees of freedom.
func ExampleCoverageFactor() {
	for _, dof := range []float64{10, 30, 50, 0} {
		fmt.Printf("%.2f\n", calib.CoverageFactor(dof, calib.Coverage))
	}
	// Output:
	// 2.28
	// 2.09
	// 2.05
	// 2.00
}

// A chamber 600 mm from the focal spot and the intensifier's input plane
// at 1000 mm: the kerma rate at the input is (600/1000)² = 0.36 of the
// chamber's (inverse-square law, point source).
func ExampleInverseSquare() {
	fmt.Printf("%.2f\n", calib.InverseSquare(600, 1000))
	// Output:
	// 0.36
}
