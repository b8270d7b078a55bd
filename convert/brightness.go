package convert

import "math"

// Model is a channel's blackbody response: the signal the channel gives
// when it views a blackbody at temperature T. Signal must increase with T.
type Model interface {
	// Signal returns the blackbody signal at t kelvin (≥ 0; 0 for t ≤ 0).
	Signal(t float64) float64
	// SignalDeriv returns the signal and its derivative dS/dT at t kelvin.
	SignalDeriv(t float64) (s, ds float64)
	// Wavelength returns the effective (centre) wavelength in metres.
	Wavelength() float64
}

// Solver settings shared by the brightness and ratio solvers.
const (
	// solveRelTol ends the Newton iteration once a Newton step changes 1/T
	// by less than this fraction. Newton's error after a step of relative
	// size δ is about (u·g''/(2g'))·δ², and g is nearly linear in u = 1/T
	// (exactly so in Wien's approximation), so the temperature is then
	// good to far better than 1e-12 relative.
	solveRelTol = 1e-8
	// solveBisectTol ends the iteration once bisection has narrowed the
	// bracket in u to this fraction.
	solveBisectTol = 1e-14
	// solveMaxIter bounds the iterations; bisection alone gains 2⁻¹ per
	// step, so this is far more than a bracket of float64 needs.
	solveMaxIter = 200
)

// BrightnessTemperature returns the temperature T in [lo, hi] (kelvin) at
// which the channel's blackbody signal equals s, m.Signal(T) = s: the
// temperature of the blackbody that gives the same signal (brightness or
// radiance temperature).
//
// It solves ln S(T) = ln s by Newton's method in u = 1/T, where ln S is
// nearly linear (exactly so in Wien's approximation, ln S = const − c2/(λT)),
// safeguarded by bisection inside the bracket. It returns ok = false when
// m is nil, s is not finite and positive, the bracket is not
// 0 < lo < hi < ∞, or s lies outside [S(lo), S(hi)].
func BrightnessTemperature(m Model, s, lo, hi float64) (t float64, ok bool) {
	if m == nil || !finite(s) || s <= 0 || !finite(lo) || !finite(hi) || !(lo > 0) || !(hi > lo) {
		return math.NaN(), false
	}
	sLo, sHi := m.Signal(lo), m.Signal(hi)
	switch {
	case !(s >= sLo && s <= sHi):
		return math.NaN(), false
	case s == sLo:
		return lo, true
	case s == sHi:
		return hi, true
	}
	uLo, uHi := 1/hi, 1/lo
	lnS := math.Log(s)
	// First guess: ln S linear in 1/T between the ends of the bracket
	// (Wien's law through the two end points); the bracket's upper end when
	// S(lo) underflows.
	u := uLo
	if lnLo, lnHi := math.Log(sLo), math.Log(sHi); finite(lnLo) {
		u = uLo + (lnHi-lnS)/(lnHi-lnLo)*(uHi-uLo)
	}
	t = solveLn(m, lnS, uLo, uHi, u)
	if math.IsNaN(t) {
		return math.NaN(), false
	}
	return t, true
}

// solveLn solves g(u) = ln S(1/u) − lnS = 0 for u in [uLo, uHi] by
// Newton's method, dg/du = −T²·(dS/dT)/S, safeguarded by bisection, from
// the first guess u. g must decrease in u (S increase with T) and change
// sign on the bracket. It returns T = 1/u, or NaN when the iteration does
// not end.
func solveLn(m Model, lnS, uLo, uHi, u float64) float64 {
	for range solveMaxIter {
		t := 1 / u
		s, ds := m.SignalDeriv(t)
		g := math.Log(s) - lnS
		dg := -ds / s * t * t
		switch {
		case g > 0:
			uLo = u
		case g < 0:
			uHi = u
		case g == 0:
			return t
		default:
			return math.NaN()
		}
		du := -g / dg
		if math.Abs(du) <= solveRelTol*u {
			return 1 / (u + du)
		}
		un := u + du
		if !(un > uLo && un < uHi) {
			un = (uLo + uHi) / 2
			if uHi-uLo <= solveBisectTol*u {
				return 1 / un
			}
		}
		u = un
	}
	return math.NaN()
}
