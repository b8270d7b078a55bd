package convert

import (
	"fmt"
	"math"
)

// SakumaHattori is the Sakuma–Hattori interpolation equation for a
// channel's blackbody signal,
//
//	S(T) = C / (exp(c2/(A·T + B)) − 1)
//
// with A in m, B in m·K, C in signal units and C2 = c2 in m·K (Sakuma &
// Hattori, Temperature: Its Measurement and Control in Science and Industry
// vol. 5, AIP 1982; the form recommended by CCT-WG5, "Uncertainty budgets
// for calibration of radiation thermometers below the silver point", 2008).
// A·T + B plays the part of an effective wavelength times temperature.
//
// The same c2 must be used when the coefficients are fitted and when the
// curve is inverted. Build one with NewSakumaHattori, or from a Band with
// Band.SakumaHattori; a literal with invalid fields gives NaN or 0, never a
// panic.
type SakumaHattori struct{ A, B, C, C2 float64 }

// NewSakumaHattori returns the curve with coefficients a (m), b (m·K),
// c (signal units) and c2 (m·K). It returns an error unless a > 0, c > 0,
// c2 > 0 and all four are finite.
func NewSakumaHattori(a, b, c, c2 float64) (*SakumaHattori, error) {
	switch {
	case !finite(a) || a <= 0:
		return nil, fmt.Errorf("convert: Sakuma–Hattori A %g m: must be finite and > 0", a)
	case !finite(b):
		return nil, fmt.Errorf("convert: Sakuma–Hattori B %g m·K: must be finite", b)
	case !finite(c) || c <= 0:
		return nil, fmt.Errorf("convert: Sakuma–Hattori C %g: must be finite and > 0", c)
	case !finite(c2) || c2 <= 0:
		return nil, fmt.Errorf("convert: Sakuma–Hattori c2 %g m·K: must be finite and > 0", c2)
	}
	return &SakumaHattori{A: a, B: b, C: c, C2: c2}, nil
}

// Signal returns S(T) at t kelvin; 0 when t ≤ 0 or A·t + B ≤ 0, NaN for
// NaN.
func (m *SakumaHattori) Signal(t float64) float64 {
	s, _ := m.SignalDeriv(t)
	return s
}

// SignalDeriv returns S(T) and
//
//	dS/dT = S · (1 + 1/(e^x − 1)) · x · A/(A·T + B),   x = c2/(A·T + B)
//
// in signal units and signal units per kelvin; both are 0 when t ≤ 0 or
// A·t + B ≤ 0 and NaN for NaN.
func (m *SakumaHattori) SignalDeriv(t float64) (s, ds float64) {
	if math.IsNaN(t) {
		return math.NaN(), math.NaN()
	}
	z := m.A*t + m.B
	if !(t > 0) || !(z > 0) {
		return 0, 0
	}
	x := m.C2 / z
	inv := 1 / math.Expm1(x)
	s = m.C * inv
	return s, m.C * x * inv * (1 + inv) * m.A / z
}

// Wavelength returns A, the limit of the effective wavelength A + B/T as
// T → ∞, in metres.
func (m *SakumaHattori) Wavelength() float64 { return m.A }

// Inverse returns the temperature whose signal is s, in closed form
//
//	T = c2 / (A · ln(C/S + 1)) − B/A        [K]
//
// It returns NaN when s is not finite and positive, or when the result is
// not a positive temperature (the curve is 0 there).
func (m *SakumaHattori) Inverse(s float64) float64 {
	if !finite(s) || s <= 0 {
		return math.NaN()
	}
	t := m.C2/(m.A*math.Log1p(m.C/s)) - m.B/m.A
	if !(t > 0) || math.IsInf(t, 0) {
		return math.NaN()
	}
	return t
}

// SakumaHattori returns the Sakuma–Hattori curve that approximates the
// band with the Saunders–White coefficients for a responsivity of mean
// wavelength λ0 and standard deviation σ,
//
//	A = λ0 (1 − 6σ²/λ0²),   B = c2 σ²/(2λ0²)
//
// (Saunders & White, Metrologia 40, 195, 2003). For the rectangular band
// λ0 = (λlo + λhi)/2 and σ² = (λhi − λlo)²/12. C is set so that the curve
// equals the band radiance at tRef kelvin. It returns an error when tRef
// is not finite and positive or the approximation breaks down
// (6σ² ≥ λ0²).
func (b *Band) SakumaHattori(tRef float64) (*SakumaHattori, error) {
	if !finite(tRef) || tRef <= 0 {
		return nil, fmt.Errorf("convert: Sakuma–Hattori reference temperature %g K: must be finite and > 0", tRef)
	}
	l0 := (b.lo + b.hi) / 2
	w := b.hi - b.lo
	v := w * w / 12
	a := l0 * (1 - 6*v/(l0*l0))
	bb := b.c2 * v / (2 * l0 * l0)
	c := b.Signal(tRef) * math.Expm1(b.c2/(a*tRef+bb))
	m, err := NewSakumaHattori(a, bb, c, b.c2)
	if err != nil {
		return nil, fmt.Errorf("convert: Sakuma–Hattori approximation of band [%g, %g] m: %w", b.lo, b.hi, err)
	}
	return m, nil
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// FitSakumaHattori returns the Sakuma–Hattori curve through three
// calibration points (t[i] kelvin, s[i] signal), as used to calibrate a
// channel against a blackbody at three or more temperatures (CCT-WG5,
// 2008), with the given c2 (m·K).
//
// It solves the three equations ln S(t_i) = ln s_i for (A, B, ln C) by
// Newton's method with step halving. The Jacobian, with x = c2/(A·t + B)
// and z = A·t + B, is
//
//	∂lnS/∂A = q·x·t/z,   ∂lnS/∂B = q·x/z,   ∂lnS/∂lnC = 1,   q = e^x/(e^x − 1)
//
// The first guess is Wien's law through the outer points with B = 0. It
// returns an error when the temperatures or signals are not finite,
// positive and strictly increasing, c2 is not finite and positive, or the
// iteration does not reach a residual of 1e-12 in ln S.
func FitSakumaHattori(t, s [3]float64, c2 float64) (*SakumaHattori, error) {
	if !finite(c2) || c2 <= 0 {
		return nil, fmt.Errorf("convert: Sakuma–Hattori fit c2 %g m·K: must be finite and > 0", c2)
	}
	var ls [3]float64
	for i := range t {
		if !finite(t[i]) || !(t[i] > 0) || !finite(s[i]) || !(s[i] > 0) {
			return nil, fmt.Errorf("convert: Sakuma–Hattori fit point %d (%g K, %g): need finite and > 0", i, t[i], s[i])
		}
		if i > 0 && !(t[i] > t[i-1] && s[i] > s[i-1]) {
			return nil, fmt.Errorf("convert: Sakuma–Hattori fit point %d (%g K, %g): temperatures and signals must increase", i, t[i], s[i])
		}
		ls[i] = math.Log(s[i])
	}
	a := c2 * (1/t[0] - 1/t[2]) / (ls[2] - ls[0])
	p := [3]float64{a, 0, ls[0] + c2/(a*t[0])} // A, B, ln C
	scale := [3]float64{a, a * t[1], 1}

	resid := func(p [3]float64) (r [3]float64, ok bool) {
		for i := range t {
			z := p[0]*t[i] + p[1]
			if !(z > 0) || !(p[0] > 0) {
				return r, false
			}
			r[i] = p[2] - math.Log(math.Expm1(c2/z)) - ls[i]
		}
		return r, true
	}
	norm := func(r [3]float64) float64 {
		return math.Max(math.Abs(r[0]), math.Max(math.Abs(r[1]), math.Abs(r[2])))
	}
	r, ok := resid(p)
	if !ok {
		return nil, fmt.Errorf("convert: Sakuma–Hattori fit: no Wien first guess for points %v K, %v", t, s)
	}
	for range 100 {
		if norm(r) <= 1e-13 {
			break
		}
		var jac [3][3]float64
		for i := range t {
			z := p[0]*t[i] + p[1]
			x := c2 / z
			q := 1 + 1/math.Expm1(x)
			jac[i] = [3]float64{q * x * t[i] / z * scale[0], q * x / z * scale[1], scale[2]}
		}
		d, ok := solve3(jac, [3]float64{-r[0], -r[1], -r[2]})
		if !ok {
			break
		}
		step := 1.0
		for range 40 {
			var pn [3]float64
			for j := range p {
				pn[j] = p[j] + step*d[j]*scale[j]
			}
			if rn, ok := resid(pn); ok && norm(rn) < norm(r) {
				p, r = pn, rn
				break
			}
			step /= 2
		}
		if step < 1e-12 {
			break
		}
	}
	if norm(r) > 1e-12 {
		return nil, fmt.Errorf("convert: Sakuma–Hattori fit to %v K, %v: no convergence (residual %g in ln S)", t, s, norm(r))
	}
	m, err := NewSakumaHattori(p[0], p[1], math.Exp(p[2]), c2)
	if err != nil {
		return nil, fmt.Errorf("convert: Sakuma–Hattori fit to %v K, %v: %w", t, s, err)
	}
	return m, nil
}

// solve3 solves the 3×3 system a·x = b by Gaussian elimination with
// partial pivoting; ok is false for a singular matrix.
func solve3(a [3][3]float64, b [3]float64) (x [3]float64, ok bool) {
	for c := range 3 {
		piv := c
		for r := c + 1; r < 3; r++ {
			if math.Abs(a[r][c]) > math.Abs(a[piv][c]) {
				piv = r
			}
		}
		if a[piv][c] == 0 || !finite(a[piv][c]) {
			return x, false
		}
		a[c], a[piv] = a[piv], a[c]
		b[c], b[piv] = b[piv], b[c]
		for r := c + 1; r < 3; r++ {
			f := a[r][c] / a[c][c]
			for k := c; k < 3; k++ {
				a[r][k] -= f * a[c][k]
			}
			b[r] -= f * b[c]
		}
	}
	for r := 2; r >= 0; r-- {
		v := b[r]
		for k := r + 1; k < 3; k++ {
			v -= a[r][k] * x[k]
		}
		x[r] = v / a[r][r]
	}
	return x, finite(x[0]) && finite(x[1]) && finite(x[2])
}
