// Package calib turns corrected meter readings into judged figures of merit:
// it reads calibration certificates, applies the corrections a reading
// needs, computes the intensifier's figures of merit with their uncertainty
// budgets (JCGM 100:2008, the GUM) and judges them against limits.
//
// calib knows no serial ports and no panels. Apart from reading certificate
// files every function is pure.
//
// # Order of corrections
//
// [Correct] applies, in this order, and records each step as a [Correction]:
//
//	photometer (luminance):
//	  1. dark          L' = M − M_dark            (beam-off reading, meter's own scale)
//	  2. calibration   L  = N · L'                (certificate coefficient)
//	dosimeter (air kerma rate or air kerma):
//	  1. calibration   K' = N_K(Q) · M            (coefficient at beam quality Q)
//	  2. k_tp          K'' = k_TP · K'            (vented chambers only)
//	  3. backscatter   K''' = K'' / B             (chamber against the input face)
//	  4. inverse_square K = K''' · (d_chamber/d_input)²
//
// A certificate applies only to the meter that reported the model and
// serial it names ([Certificate.AppliesTo], [Setup.Meter]); for any other
// meter, or one not identified, nothing of it is applied. The dark is in
// the meter's own scale ([Dark]), its uncertainty from its spread and the
// display resolution ([DarkUncertainty]).
//
// Unit normalisation happened earlier, in drivers: values arrive canonical.
// A reading that cannot be corrected fully (no certificate, an expired one,
// a beam quality outside the certificate's table, missing air density for a
// vented chamber) is never marked calibrated: it carries [Flag]s whose text
// can be spoken and printed.
//
// # Uncertainty
//
// Every [Result] carries its value, combined standard uncertainty, expanded
// uncertainty, coverage factor, effective degrees of freedom and budget
// rows, following JCGM 100:2008:
//
//   - type A: the experimental standard deviation of the mean, s/√n (4.2.3),
//     with n − 1 degrees of freedom;
//   - type B: the certificate's expanded uncertainty over its coverage
//     factor (4.3.3), the display resolution δ as rectangular, δ/√12
//     (F.2.2.1), and the stated uncertainties of the thermometer, barometer
//     and distances through their sensitivities; all with infinite degrees
//     of freedom;
//   - products and ratios combine relative variances (5.1.6); a ratio read
//     with one meter (contrast ratio, uniformity, kerma rate scaling)
//     drops that meter's calibration coefficient, which cancels;
//   - the coverage factor is Student's t for 95.45 % ([Coverage]) at the
//     Welch–Satterthwaite effective degrees of freedom (G.4.1), taken as
//     they are (t is defined at any positive ν; no truncation), which is
//     2.00 for infinite degrees of freedom (Table G.2). [CoverageFactor] is
//     the one implementation: the engine's stopping rule calls it too.
//
// The two meters' samples are treated as uncorrelated, which overstates the
// uncertainty of the conversion factor when the tube output fluctuates
// (both meters then move together); this is the cautious side.
//
// # Judgement
//
// [Judge] compares the value itself with each limit (common practice,
// "simple acceptance"); a limit inside the expanded uncertainty marks the
// verdict marginal for review. A result that is not calibrated is never
// pass or fail, only info. A limit below the meter's range floor is never
// passed: the outcome is [NotMeasurable], with the reason.
package calib
