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
// [Correct] applies, in this order, and records each step as an [Applied]:
//
//	photometer (luminance):
//	  1. dark          L' = M − M_dark            (beam-off reading subtracted)
//	  2. calibration   L  = N · L'                (certificate coefficient)
//	dosimeter (air kerma rate or air kerma):
//	  1. calibration   K' = N_K(Q) · M            (coefficient at beam quality Q)
//	  2. k_tp          K'' = k_TP · K'            (vented chambers only)
//	  3. backscatter   K''' = K'' / B             (chamber against the input face)
//	  4. inverse_square K = K''' · (d_chamber/d_input)²
//
// Unit normalisation happened earlier, in drivers: values arrive canonical.
// A reading that cannot be corrected fully (no certificate, an expired one,
// a beam quality outside the certificate's table, missing air density for a
// vented chamber) is never marked calibrated: it carries [Flag]s whose text
// can be spoken and printed.
package calib
