package convert

import "math"

// CoverageFactor is the coverage factor of the expanded uncertainties
// glowgate reports, U = 2·u_c (JCGM 100:2008, GUM, 6.2–6.3: about 95 %
// coverage for a normal distribution).
const CoverageFactor = 2

// UncertaintyInputs are the standard uncertainties that enter the
// uncertainty of a ratio temperature.
type UncertaintyInputs struct {
	// Noise is the relative standard uncertainty of each channel's signal
	// (short, long), dimensionless, e.g. from NoiseEstimator.Relative.
	Noise [2]float64
	// Correlation is the correlation coefficient r of the two channels'
	// noise, in [−1, 1], e.g. from NoiseEstimator.Correlation.
	Correlation float64
	// KRel is the relative standard uncertainty of the emissivity ratio
	// k, u(k)/k, dimensionless.
	KRel float64
	// Calibration is the standard uncertainty of the calibration, K.
	Calibration float64
}

// RatioUncertainty returns the expanded uncertainty U (kelvin, coverage
// factor 2) of a ratio temperature t (kelvin) measured with the channel
// models short and long, by the law of propagation of uncertainty of
// JCGM 100:2008 (GUM, 5.1.2 and 5.2.2) applied to ln R, R = S1/S2:
//
//	u_r(R)² = u1² + u2² − 2r·u1·u2 + (u(k)/k)²
//	∂lnR/∂T = S1'/S1 − S2'/S2                  [K⁻¹]
//	u(T)    = u_r(R) / |∂lnR/∂T|               [K]
//	U       = 2·√(u(T)² + u_cal²)              [K]
//
// with u1, u2 = in.Noise, r = in.Correlation, u(k)/k = in.KRel, u_cal =
// in.Calibration and S, S' from the models' SignalDeriv at t. For a
// monochromatic channel ∂lnL/∂T = (c2/(λT²))/(1 − exp(−c2/(λT))), so in
// Wien's limit ∂lnR/∂T = c2/(ΛT²) with Λ = λ1λ2/(λ2 − λ1): the ratio
// temperature is Λ/λ1 times more sensitive to a relative signal error
// than a brightness temperature. u1² + u2² − 2r·u1·u2 is formed as
// (u1 − u2)² + 2(1 − r)·u1·u2, which is ≥ 0 for r ≤ 1 and exactly 0 for
// r = 1 and u1 = u2 (noise common to both channels cancels in the ratio).
// For r > 0, raising one channel's noise toward the other's lowers u.
//
// It returns NaN when a model is nil, t is not finite and positive, an
// input is NaN or infinite, a standard uncertainty is negative, r is
// outside [−1, 1], or the models give no finite non-zero sensitivity
// ∂lnR/∂T at t. It does not allocate and never panics for non-nil models.
func RatioUncertainty(short, long Model, t float64, in UncertaintyInputs) float64 {
	u1, u2, r := in.Noise[0], in.Noise[1], in.Correlation
	switch {
	case short == nil || long == nil:
		return math.NaN()
	case !finite(t) || !(t > 0):
		return math.NaN()
	case !finite(u1) || !finite(u2) || !(u1 >= 0) || !(u2 >= 0):
		return math.NaN()
	case !(r >= -1 && r <= 1):
		return math.NaN()
	case !finite(in.KRel) || !(in.KRel >= 0):
		return math.NaN()
	case !finite(in.Calibration) || !(in.Calibration >= 0):
		return math.NaN()
	}
	s1, d1 := short.SignalDeriv(t)
	s2, d2 := long.SignalDeriv(t)
	return ExpandedUncertainty(d1/s1-d2/s2, in)
}

// ExpandedUncertainty is RatioUncertainty given the sensitivity
// sens = ∂lnR/∂T (per kelvin) instead of the models, for callers that have
// it already (Pyrometer.Sensitivity). NaN for a zero or non-finite
// sensitivity or inputs out of their domain.
func ExpandedUncertainty(sens float64, in UncertaintyInputs) float64 {
	u1, u2, r := in.Noise[0], in.Noise[1], in.Correlation
	switch {
	case !finite(sens) || sens == 0:
		return math.NaN()
	case !finite(u1) || !finite(u2) || !(u1 >= 0) || !(u2 >= 0):
		return math.NaN()
	case !(r >= -1 && r <= 1):
		return math.NaN()
	case !finite(in.KRel) || !(in.KRel >= 0):
		return math.NaN()
	case !finite(in.Calibration) || !(in.Calibration >= 0):
		return math.NaN()
	}
	du := u1 - u2
	ur := math.Sqrt(du*du + 2*(1-r)*u1*u2 + in.KRel*in.KRel)
	// Both terms are kelvins of ordinary size: no overflow to guard
	// against, so a plain root rather than math.Hypot.
	uT := ur / sens
	return CoverageFactor * math.Sqrt(uT*uT+in.Calibration*in.Calibration)
}
