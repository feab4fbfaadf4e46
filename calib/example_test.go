package calib_test

import (
	"fmt"

	"kermalux/calib"
)

// The conversion factor of the worked ratio in the tests: 150 cd/m² over
// 1.0 µGy/s with certificate uncertainties of 2 % and 2.4 % (k = 2) and
// ten samples each. By hand (JCGM 100:2008 5.1.6): u_rel = 1.715 %,
// u_c = 2.57, ν_eff ≈ 458, k ≈ 2 + (2³+2)/(4·457) ≈ 2.005 (Table G.2
// lies between 2.025 at ν = 100 and 2.00 at ν = ∞), U ≈ 5.2.
func ExampleConversionFactor() {
	lum := calib.Measured{Name: "centre luminance", Unit: "cd/m²", Calibrated: true,
		Samples: calib.Summary{N: 10, Mean: 150, SD: 1.5},
		TypeB:   []calib.Component{{Source: "calibration coefficient", Rel: 0.01, Calibration: true}}}
	ker := calib.Measured{Name: "input air kerma rate", Unit: "µGy/s", Calibrated: true,
		Samples: calib.Summary{N: 10, Mean: 1.0, SD: 0.02},
		TypeB:   []calib.Component{{Source: "calibration coefficient", Rel: 0.012, Calibration: true}}}
	g := calib.ConversionFactor(lum, ker, 0)
	v := calib.Judge(g, 168, []calib.Limit{
		{Kind: calib.KindSpecification, Bound: calib.AtLeast, Value: 120},
		{Kind: calib.KindBaseline, Bound: calib.AtLeast, Value: 0.8},
	})
	fmt.Printf("G = %.1f ± %.1f %s (k = %.2f)\n", g.Value, g.ExpUnc, g.Unit, g.K)
	fmt.Printf("%s, decided by %s\n", v.Outcome, v.DecidedBy)
	// Output:
	// G = 150.0 ± 5.2 cd·m⁻²/(µGy·s⁻¹) (k = 2.01)
	// pass, decided by baseline minimum 80 % of baseline
}
