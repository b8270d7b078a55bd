package convert

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/integrate/quad"
)

// Responsivity is the blackbody response of a channel with a tabulated
// relative spectral responsivity R(λ): linear between the table's points,
// zero outside them,
//
//	S(T) = ∫ R(λ) L(λ, T) dλ        [R units × W·m⁻²·sr⁻¹]
//
// with L Planck's spectral radiance. The integral is a sum over the
// table's intervals [λ_k, λ_{k+1}] (those where R is not zero at both
// ends), each integrated by a fixed Gauss–Legendre rule in λ with nodes
// and weights from gonum (integrate/quad.Legendre), split into equal
// panels where one rule would need more than 32 nodes.
//
// The node counts depend on T, as for Band: the integrand's steepness in
// λ grows with x = c2/(λT), so NewResponsivity builds a ladder of rules,
// rule l valid for x_min = c2/(λ_min T) ≤ 12.5·2^l, l = 0 … 5 (λ_min the
// shortest wavelength with R > 0; 42 K and up for λ_min = 0.85 µm). For
// each rule and each interval it takes the fewest nodes whose integral
// matches an adaptive reference (gonum Gauss–Legendre of 20 and 40 nodes,
// bisected until they agree to 1e-14) within 1e-11/m of the whole
// integral (m intervals) at every x_min = x_l·2^{−j} down to 0.02, which
// covers the hot end up to the Rayleigh–Jeans limit. The whole integral is
// then within about 1e-11 relative of the reference; below the last rule's
// temperature the last rule is used unchecked. The tests compare a
// rectangular table with Band (1e-9) and a triangular one with
// scipy.integrate.quad.
//
// Wavelength is the responsivity-weighted centroid ∫λR dλ / ∫R dλ.
//
// A Responsivity is immutable after NewResponsivity and safe for
// concurrent use.
type Responsivity struct {
	c2       float64
	centroid float64
	floorT   float64    // lowest temperature the ladder was checked at, K
	rules    []bandRule // ascending node count, descending tMin
}

// Settings of the node-count choice.
const (
	// respTol is the relative error of the whole integral aimed at.
	respTol = 1e-11
	// respRefTol ends the bisection of the adaptive reference.
	respRefTol = 1e-14
	// respX0 is x_min = c2/(λ_min T) of the first rule; rule l is checked
	// up to respX0·2^l.
	respX0 = 12.5
	// respLevels is the number of rules in the ladder.
	respLevels = 6
	// respXHot is the smallest x_min checked (the hot end).
	respXHot = 0.02
	// respPanelNodes is the node count of a panel of a composite rule.
	respPanelNodes = 32
	// respMaxPanels bounds the panels of one interval.
	respMaxPanels = 64
)

// respSegment is one table interval with R linear from ra to rb.
type respSegment struct{ a, b, ra, rb float64 }

// at returns R at λ in the segment.
func (s respSegment) at(l float64) float64 {
	return s.ra + (s.rb-s.ra)*(l-s.a)/(s.b-s.a)
}

// segRule is a rule of p equal panels of n Gauss–Legendre nodes.
type segRule struct{ panels, nodes int }

// respCandidates lists the rules tried for an interval, cheapest first.
func respCandidates() []segRule {
	var c []segRule
	for _, n := range []int{1, 2, 3, 4, 5, 6, 7, 8, 10, 12, 14, 16, 20, 24, 28, 32} {
		c = append(c, segRule{1, n})
	}
	for p := 2; p <= respMaxPanels; p *= 2 {
		c = append(c, segRule{p, respPanelNodes})
	}
	return c
}

// NewResponsivity returns the channel with relative spectral
// responsivity r[k] at wavelength lambda[k] (metres), linear between the
// points and zero outside, for the second radiation constant c2 (m·K,
// normally C2ITS90). It returns an error naming the point when the slices
// differ in length or hold fewer than 2 points, a wavelength is not finite
// and positive or not above the one before, a responsivity is not finite
// and ≥ 0, all responsivities are zero, or c2 is not finite and positive.
// The slices are not kept.
func NewResponsivity(lambda, r []float64, c2 float64) (*Responsivity, error) {
	switch {
	case len(lambda) != len(r):
		return nil, fmt.Errorf("convert: responsivity: %d wavelengths but %d values", len(lambda), len(r))
	case len(lambda) < 2:
		return nil, fmt.Errorf("convert: responsivity: %d points, need at least 2", len(lambda))
	case !finite(c2) || c2 <= 0:
		return nil, fmt.Errorf("convert: responsivity c2 %g m·K: must be finite and > 0", c2)
	}
	for k := range lambda {
		if !finite(lambda[k]) || !(lambda[k] > 0) {
			return nil, fmt.Errorf("convert: responsivity point %d: wavelength %g m, need finite and > 0", k, lambda[k])
		}
		if k > 0 && !(lambda[k] > lambda[k-1]) {
			return nil, fmt.Errorf("convert: responsivity point %d: wavelength %g m not above point %d's %g m", k, lambda[k], k-1, lambda[k-1])
		}
		if !finite(r[k]) || r[k] < 0 {
			return nil, fmt.Errorf("convert: responsivity point %d: value %g, need finite and ≥ 0", k, r[k])
		}
	}
	var segs []respSegment
	var area, moment float64
	for k := range len(lambda) - 1 {
		s := respSegment{lambda[k], lambda[k+1], r[k], r[k+1]}
		if s.ra == 0 && s.rb == 0 {
			continue
		}
		h := s.b - s.a
		// ∫R dλ = h(ra + rb)/2, ∫λR dλ = h(ra(2a + b) + rb(a + 2b))/6.
		area += h * (s.ra + s.rb) / 2
		moment += h * (s.ra*(2*s.a+s.b) + s.rb*(s.a+2*s.b)) / 6
		segs = append(segs, s)
	}
	if len(segs) == 0 || !(area > 0) {
		return nil, fmt.Errorf("convert: responsivity: all values are zero")
	}
	m := &Responsivity{c2: c2, centroid: moment / area}
	lmin := segs[0].a
	tAt := func(x float64) float64 { return c2 / (lmin * x) }

	// Reference integrals per segment and x, and their sums.
	type key struct {
		seg int
		x   float64
	}
	ref := map[key]float64{}
	total := map[float64]float64{}
	reference := func(x float64) float64 {
		if v, ok := total[x]; ok {
			return v
		}
		t := tAt(x)
		var sum float64
		for i, s := range segs {
			f := func(l float64) float64 { return s.at(l) * Planck(l, t, c2) }
			v := adaptiveLegendre(f, s.a, s.b, 40)
			ref[key{i, x}] = v
			sum += v
		}
		total[x] = sum
		return sum
	}

	cands := respCandidates()
	prev := make([]int, len(segs)) // candidate index per segment of the last rule
	for i := range prev {
		prev[i] = -1
	}
	for l := range respLevels {
		xl := respX0 * math.Pow(2, float64(l))
		var xs []float64
		for x := xl; ; x /= 2 {
			xs = append(xs, x)
			if x < respXHot {
				break
			}
		}
		choice := make([]int, len(segs))
		for i, s := range segs {
			ci := 0
			for ; ci < len(cands); ci++ {
				ok := true
				for _, x := range xs {
					sum := reference(x)
					got := segRuleSignal(s, cands[ci], tAt(x), c2)
					if !(math.Abs(got-ref[key{i, x}]) <= respTol*sum/float64(len(segs))) {
						ok = false
						break
					}
				}
				if ok {
					break
				}
			}
			if ci == len(cands) {
				return nil, fmt.Errorf("convert: responsivity interval [%g, %g] m: no rule of up to %d nodes reaches %g relative at %g K", s.a, s.b, respMaxPanels*respPanelNodes, respTol, tAt(xl))
			}
			choice[i] = ci
		}
		tMin := tAt(xl)
		m.floorT = tMin
		if slices.Equal(choice, prev) {
			m.rules[len(m.rules)-1].tMin = tMin
			continue
		}
		rule := bandRule{tMin: tMin}
		for i, s := range segs {
			x, w := segRuleNodes(s, cands[choice[i]], c2)
			rule.x = append(rule.x, x...)
			rule.w = append(rule.w, w...)
		}
		m.rules = append(m.rules, rule)
		prev = choice
	}
	return m, nil
}

// segRuleNodes returns the rule's nodes on segment s in the form of
// bandRule: X_j = c2/λ_j (K) and W_j = w_j·R(λ_j)·c1L/λ_j⁵, so that
// S = Σ W_j/(exp(X_j/T) − 1).
func segRuleNodes(s respSegment, sr segRule, c2 float64) (x, w []float64) {
	width := (s.b - s.a) / float64(sr.panels)
	ln, wn := make([]float64, sr.nodes), make([]float64, sr.nodes)
	for p := range sr.panels {
		lo := s.a + float64(p)*width
		hi := lo + width
		if p == sr.panels-1 {
			hi = s.b
		}
		quad.Legendre{}.FixedLocations(ln, wn, lo, hi)
		for j, l := range ln {
			l2 := l * l
			x = append(x, c2/l)
			w = append(w, wn[j]*s.at(l)*C1L/(l2*l2*l))
		}
	}
	return x, w
}

// segRuleSignal evaluates the rule on segment s at t kelvin.
func segRuleSignal(s respSegment, sr segRule, t, c2 float64) float64 {
	x, w := segRuleNodes(s, sr, c2)
	var sum float64
	for j := range x {
		sum += w[j] / math.Expm1(x[j]/t)
	}
	return sum
}

// adaptiveLegendre integrates f over [a, b] with gonum's Gauss–Legendre
// rules of 20 and 40 nodes, bisecting until they agree to respRefTol
// relative (or depth runs out); it returns the 40-node value.
func adaptiveLegendre(f func(float64) float64, a, b float64, depth int) float64 {
	q1 := quad.Fixed(f, a, b, 20, quad.Legendre{}, 0)
	q2 := quad.Fixed(f, a, b, 40, quad.Legendre{}, 0)
	if math.Abs(q2-q1) <= respRefTol*math.Abs(q2) || depth == 0 {
		return q2
	}
	m := a + (b-a)/2
	return adaptiveLegendre(f, a, m, depth-1) + adaptiveLegendre(f, m, b, depth-1)
}

// C2 returns the second radiation constant the model was built with, m·K.
func (m *Responsivity) C2() float64 { return m.c2 }

// Wavelength returns the responsivity-weighted centroid
// ∫λR(λ) dλ / ∫R(λ) dλ in metres (exact for the piecewise-linear R).
func (m *Responsivity) Wavelength() float64 { return m.centroid }

// MinTemperature returns the lowest temperature, K, at which the
// quadrature was checked (c2/(400·λ_min)); below it the signal is that of
// the last rule, unchecked.
func (m *Responsivity) MinTemperature() float64 { return m.floorT }

// Signal returns S(T) at t kelvin: 0 for t ≤ 0, NaN for NaN, +Inf for
// +Inf.
func (m *Responsivity) Signal(t float64) float64 {
	s, _ := m.SignalDeriv(t)
	return s
}

// SignalDeriv returns S(T) and dS/dT at t kelvin from one pass over the
// nodes (see Band.SignalDeriv for the formulas); both are 0 for t ≤ 0 and
// NaN for NaN.
func (m *Responsivity) SignalDeriv(t float64) (s, ds float64) { return signalDeriv(m.rules, t) }
