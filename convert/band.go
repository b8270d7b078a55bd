package convert

import (
	"fmt"
	"math"
)

// Band is the blackbody response of an ideal channel: a rectangular
// spectral band [Lo, Hi] with unit responsivity,
//
//	S(T) = ∫_{λlo}^{λhi} L(λ, T) dλ        [W·m⁻²·sr⁻¹]
//
// with L Planck's spectral radiance. The integral is evaluated in the
// wavenumber-like variable ν = 1/λ, where it reads
//
//	S(T) = c1L ∫_{1/λhi}^{1/λlo} ν³ / (exp(c2ν/T) − 1) dν
//
// and the integrand is analytic on the band (its only singularities are the
// poles ν = 2πim·T/c2, m ≠ 0, on the imaginary axis). It is integrated by a
// fixed-node Gauss–Legendre rule whose nodes NewBand computes once.
//
// The number of nodes depends on T: Signal uses the smallest rule of a
// ladder (3 … 128 nodes, then composite rules of up to 64 panels of 64
// nodes for very wide bands at very low temperatures) that passes two
// error estimates at T, each aiming at 1e-15 relative:
//
//   - the Gauss–Legendre remainder f^{(2n)}(ξ)·(2h)^{2n+1}(n!)⁴ /
//     ((2n+1)((2n)!)³) (Abramowitz & Stegun 25.4.29) for the factor
//     exp(−c2ν/T), which is about π(β/2)^{2n}/(2n)! relative with
//     β = c2·h/T and h the half-width of the band in ν (divided by a
//     margin of 100 that the tests show it overstates);
//   - the Bernstein-ellipse bound 100·ρ^{−2n} for the nearest pole ν =
//     2πiT/c2, ρ the parameter of the ellipse through it.
//
// For the 50 nm bands near 1 µm that is 4–7 nodes between 350 K and
// 4500 K. The tests check the result against adaptive quadrature
// (scipy.integrate.quad) and composite Gauss–Legendre rules (gonum) to
// 1e-12 relative for bands from 2 nm to two decades wide, 50 K to 30 000 K;
// the largest deviation seen is below 1e-13.
//
// A Band is immutable after NewBand and safe for concurrent use.
type Band struct {
	lo, hi, c2 float64
	rules      []bandRule // ascending node count, descending tMin
}

// bandRule is one Gauss–Legendre rule mapped onto the band: the radiance
// at node j is w[j] / (exp(x[j]/T) − 1).
type bandRule struct {
	tMin float64   // lowest temperature, K, at which the rule meets its error estimate
	x    []float64 // c2·ν_j in K: x[j]/T = c2/(λ_j T)
	w    []float64 // c1L·ν_j³·h·w_j, W·m⁻²·sr⁻¹
}

const (
	// bandTol is the relative error the node-count estimates aim at.
	bandTol = 1e-15
	// bandExpMargin divides the remainder estimate for the exponential
	// factor, which overstates the error about a hundredfold: the factor
	// ν³ in the integrand partly offsets the slope of exp(−c2ν/T).
	bandExpMargin = 100.0
	// bandPoleMargin multiplies the pole bound ρ^{−2n} as a safety margin.
	bandPoleMargin = 100.0
	// bandFloorT: rules are added until one meets its estimate down to
	// this temperature (or the ladder ends).
	bandFloorT = 10.0
	// bandPanelNodes and bandMaxPanels shape the composite rules that
	// follow the single-panel ladder.
	bandPanelNodes = 64
	bandMaxPanels  = 64
)

// NewBand returns the ideal rectangular band [lo, hi] (metres) for the
// second radiation constant c2 (m·K, normally C2ITS90). It returns an error
// when lo ≤ 0, hi ≤ lo, c2 ≤ 0 or any argument is NaN or infinite.
func NewBand(lo, hi, c2 float64) (*Band, error) {
	switch {
	case math.IsNaN(lo) || math.IsInf(lo, 0) || lo <= 0:
		return nil, fmt.Errorf("convert: band lower edge %g m: must be finite and > 0", lo)
	case math.IsNaN(hi) || math.IsInf(hi, 0) || hi <= lo:
		return nil, fmt.Errorf("convert: band upper edge %g m: must be finite and > lower edge %g m", hi, lo)
	case math.IsNaN(c2) || math.IsInf(c2, 0) || c2 <= 0:
		return nil, fmt.Errorf("convert: band c2 %g m·K: must be finite and > 0", c2)
	}
	va, vb := 1/hi, 1/lo
	if !(vb > va) {
		return nil, fmt.Errorf("convert: band [%g, %g] m: too narrow to integrate", lo, hi)
	}
	b := &Band{lo: lo, hi: hi, c2: c2}
	// One panel with ever more nodes; then, for very wide bands at very low
	// temperatures, ever more equal panels (in ν) of bandPanelNodes nodes.
	for _, n := range [...]int{3, 4, 5, 6, 7, 8, 9, 10, 12, 14, 16, 20, 24, 28, 32, 40, 48, 64, 80, 96, 128} {
		b.rules = append(b.rules, newBandRule(1, n, va, vb, c2))
		if b.rules[len(b.rules)-1].tMin <= bandFloorT {
			return b, nil
		}
	}
	for p := 2; p <= bandMaxPanels; p *= 2 {
		b.rules = append(b.rules, newBandRule(p, bandPanelNodes, va, vb, c2))
		if b.rules[len(b.rules)-1].tMin <= bandFloorT {
			break
		}
	}
	return b, nil
}

// newBandRule maps p equal panels of the n-point Gauss–Legendre rule onto
// the ν-interval [va, vb].
func newBandRule(p, n int, va, vb, c2 float64) bandRule {
	s, ws := gaussLegendre(n)
	r := bandRule{x: make([]float64, 0, p*n), w: make([]float64, 0, p*n)}
	width := (vb - va) / float64(p)
	for i := range p {
		a := va + float64(i)*width
		m, h := a+width/2, width/2
		r.tMin = math.Max(r.tMin, ruleMinT(n, m, h, c2))
		for j := range s {
			v := m + h*s[j]
			r.x = append(r.x, c2*v)
			r.w = append(r.w, C1L*v*v*v*h*ws[j])
		}
	}
	return r
}

// ruleMinT returns the lowest temperature at which the n-point rule on the
// ν-interval m ± h meets bandTol by the two estimates in the Band doc.
func ruleMinT(n int, m, h, c2 float64) float64 {
	// Exponential factor: largest β with
	// ln π + 2n ln(β/2) − ln (2n)! + ln max(1, β) − ln margin ≤ ln bandTol.
	lg, _ := math.Lgamma(float64(2*n + 1))
	est := func(beta float64) float64 {
		return math.Log(math.Pi/bandExpMargin) + float64(2*n)*math.Log(beta/2) - lg + math.Log(math.Max(1, beta))
	}
	lo, hi := 0.0, 10*float64(n)
	for range 100 {
		mid := (lo + hi) / 2
		if est(mid) <= math.Log(bandTol) {
			lo = mid
		} else {
			hi = mid
		}
	}
	tExp := c2 * h / lo

	// Nearest pole ν = i·2πT/c2: the rule needs it outside the Bernstein
	// ellipse of parameter ρ = (margin/tol)^{1/(2n)} around the interval.
	rho := math.Pow(bandPoleMargin/bandTol, 1/float64(2*n))
	ae, be := (rho+1/rho)/2, (rho-1/rho)/2
	mu := m / h
	tPole := 0.0
	if mu < ae {
		y := h * be * math.Sqrt(1-mu*mu/(ae*ae))
		tPole = c2 * y / (2 * math.Pi)
	}
	return math.Max(tExp, tPole)
}

// ruleAt returns the cheapest rule of a ladder (ascending node count,
// descending tMin) valid at t, or the ladder's last rule below its floor.
func ruleAt(rules []bandRule, t float64) *bandRule {
	for i := range rules {
		if t >= rules[i].tMin {
			return &rules[i]
		}
	}
	return &rules[len(rules)-1]
}

// signalDeriv evaluates the rule at 1/t = it (t > 0 and finite):
//
//	x_j = X_j/T,  S = Σ W_j / (e^{x_j} − 1),
//	dS/dT = (1/T) Σ W_j x_j e^{x_j} / (e^{x_j} − 1)²
//
// (the derivative of Planck's law, ∂L/∂T = L·(x/T)·e^x/(e^x − 1)). For
// x ≥ 0.5 the denominator is formed as exp(x) − 1, which is then within
// 3 ulp of expm1(x); below it math.Expm1 is used.
func (r *bandRule) signalDeriv(it float64) (s, ds float64) {
	w := r.w[:len(r.x)]
	for j, xj := range r.x {
		x := xj * it
		var d float64
		if x >= 0.5 {
			d = math.Exp(x) - 1
		} else {
			d = math.Expm1(x)
		}
		inv := 1 / d
		s += w[j] * inv
		// e^x/d² = (d+1)/d² = inv(1 + inv); finite when e^x overflows.
		ds += w[j] * x * inv * (1 + inv)
	}
	return s, ds * it
}

// Lo returns the lower band edge, m.
func (b *Band) Lo() float64 { return b.lo }

// Hi returns the upper band edge, m.
func (b *Band) Hi() float64 { return b.hi }

// C2 returns the second radiation constant the band was built with, m·K.
func (b *Band) C2() float64 { return b.c2 }

// Wavelength returns the centre of the band, (λlo + λhi)/2, in metres.
func (b *Band) Wavelength() float64 { return (b.lo + b.hi) / 2 }

// Signal returns the band radiance S(T) in W·m⁻²·sr⁻¹ at t kelvin: 0 for
// t ≤ 0, NaN for NaN, +Inf for +Inf.
func (b *Band) Signal(t float64) float64 {
	s, _ := b.SignalDeriv(t)
	return s
}

// SignalDeriv returns the band radiance S(T) (W·m⁻²·sr⁻¹) and its
// temperature derivative dS/dT (W·m⁻²·sr⁻¹·K⁻¹), from one pass over the
// nodes:
//
//	x_j = c2ν_j/T,  S = Σ W_j / (e^{x_j} − 1),
//	dS/dT = (1/T) Σ W_j x_j e^{x_j} / (e^{x_j} − 1)²
//
// (the derivative of Planck's law, ∂L/∂T = L·(x/T)·e^x/(e^x − 1)). For
// x ≥ 0.5 the denominator is formed as exp(x) − 1, which is then within
// 3 ulp of expm1(x); below it math.Expm1 is used. Both results are 0 for
// t ≤ 0 and NaN for NaN.
func (b *Band) SignalDeriv(t float64) (s, ds float64) { return signalDeriv(b.rules, t) }

// signalDeriv is SignalDeriv of a channel whose quadrature is rules: the
// rule for t, with t's edge cases (0 for t ≤ 0, NaN for NaN, +Inf for
// +Inf).
func signalDeriv(rules []bandRule, t float64) (s, ds float64) {
	if !(t > 0) {
		if math.IsNaN(t) {
			return math.NaN(), math.NaN()
		}
		return 0, 0
	}
	if math.IsInf(t, 1) {
		return math.Inf(1), math.Inf(1)
	}
	return ruleAt(rules, t).signalDeriv(1 / t)
}
