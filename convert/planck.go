package convert

import (
	"fmt"
	"math"
	"strings"
)

// Radiation constants.
const (
	// C2ITS90 is the second radiation constant c2 = 0.014388 m·K as the
	// International Temperature Scale of 1990 defines it for radiation
	// thermometry (Preston-Thomas, Metrologia 27, 3, 1990). It is the default
	// throughout glowgate.
	C2ITS90 = 0.014388

	// C2CODATA2018 is c2 = hc/k = 1.438776877e-2 m·K from the exact SI
	// values of h, c and k (CODATA 2018, Tiesinga et al., Rev. Mod. Phys. 93,
	// 025010, 2021).
	C2CODATA2018 = 1.438776877e-2

	// C1L is the first radiation constant for spectral radiance,
	// c1L = 2hc² = 1.191042972e-16 W·m²·sr⁻¹ (CODATA 2018, rounded to ten
	// significant digits).
	C1L = 1.191042972e-16
)

// C2ByName returns the second radiation constant, m·K, that name stands
// for: "its90" for C2ITS90 (the default of glowgate, Preston-Thomas 1990)
// and "codata2018" (alias "codata") for C2CODATA2018. Case does not matter.
// Use the same value when a calibration is fitted and when it is inverted.
func C2ByName(name string) (float64, error) {
	switch strings.ToLower(name) {
	case "its90":
		return C2ITS90, nil
	case "codata2018", "codata":
		return C2CODATA2018, nil
	}
	return 0, fmt.Errorf("convert: c2 name %q: want its90, codata2018 or codata", name)
}

// Planck returns the blackbody spectral radiance per unit wavelength,
//
//	L(λ, T) = c1L λ⁻⁵ / (exp(c2/(λT)) − 1)        [W·m⁻³·sr⁻¹]
//
// with lambda λ in m, t in K and c2 in m·K (Planck's law; c1L = C1L). The
// denominator is evaluated with math.Expm1, so the result keeps full
// precision in the Rayleigh–Jeans region (c2/λT ≪ 1).
//
// Planck returns 0 when lambda ≤ 0, t ≤ 0 or c2 ≤ 0 (no radiance), 0 when
// exp(c2/λT) overflows (λT far below c2/709), and NaN when any argument is
// NaN.
func Planck(lambda, t, c2 float64) float64 {
	if math.IsNaN(lambda) || math.IsNaN(t) || math.IsNaN(c2) {
		return math.NaN()
	}
	if lambda <= 0 || t <= 0 || c2 <= 0 || math.IsInf(lambda, 1) {
		return 0
	}
	x := c2 / (lambda * t)
	l2 := lambda * lambda
	return C1L / (l2 * l2 * lambda) / math.Expm1(x)
}

// Wien returns Wien's approximation to Planck's law,
//
//	L_W(λ, T) = c1L λ⁻⁵ exp(−c2/(λT))        [W·m⁻³·sr⁻¹]
//
// Its relative error against Planck is exactly L_W/L − 1 = −exp(−c2/λT):
// under 1 % for λT < 3000 µm·K and under 0.1 % for λT < 2000 µm·K. It is
// here for cross-checks only; glowgate never reports a temperature from
// Wien's law alone. Domain handling is that of Planck.
func Wien(lambda, t, c2 float64) float64 {
	if math.IsNaN(lambda) || math.IsNaN(t) || math.IsNaN(c2) {
		return math.NaN()
	}
	if lambda <= 0 || t <= 0 || c2 <= 0 || math.IsInf(lambda, 1) {
		return 0
	}
	l2 := lambda * lambda
	return C1L / (l2 * l2 * lambda) * math.Exp(-c2/(lambda*t))
}
