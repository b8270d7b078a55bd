package convert

import (
	"fmt"
	"math"
)

// Tabulation of the channel models over the solver bracket.
//
// The nodes T_k are evenly spaced in ln T from the bracket's cold end
// T_0 = lo to its hot end T_{n−1} = hi, so that the spacing in u = 1/T,
// h_k = u_k·(1 − e^{−Δ}), is finest at the hot end, where Planck's law
// departs most from Wien's (see chanTable). At each node every channel
// stores ln S_bb(T_k) and its slope d ln S_bb/du = −T²·S'/S from the exact
// model.
//
// Between nodes, ln S is interpolated as a cubic Hermite polynomial in u
// (forward: signal at a temperature) and u as a cubic Hermite polynomial in
// ln S (inverse: brightness temperature of a signal); u is interpolated in
// the log ratio ln(S_i/S_j) of each pair the same way (ratio
// temperature). In u, ln S is nearly linear (exactly linear in Wien's
// approximation, ln S = const − c2·u/λ), and a cubic Hermite interpolant
// reproduces cubics exactly, so only the fourth derivative of the curve
// leaves an error (from the Planck term −ln(1 − e^{−c2u/λ}) at the hot end,
// and from ln S ≈ const − ln u in the Rayleigh–Jeans limit, 6h⁴/(384u⁴)
// ≈ 1e-11 at 513 nodes over 350–4500 K):
//
//	f(x) − p(x) = f⁽⁴⁾(ξ)/4! · (x − x_k)²(x − x_{k+1})²,   |·| ≤ h⁴/384 · max|f⁽⁴⁾|
//
// with the largest weight (x − x_k)²(x − x_{k+1})² = h⁴/16 at the midpoint.
// newTables measures the error exactly at the midpoint of every interval
// (in ln T, which is within 0.5 % of the midpoint in u and in ln S, where
// the weight is within 0.1 % of its peak) against the model and accepts a
// channel when it is below a quarter of the tolerance, both forward (in
// ln S) and inverse (in u, relative). The bound then holds as long as
// |f⁽⁴⁾| varies by less than a factor of 4 within one interval; for a
// Planck-based model f⁽⁴⁾ varies like exp(−c2/(λT)), which changes by
// exp((c2/λT)·Δ) ≤ e^{0.45} across an interval of 257 or more nodes over a
// bracket of ratio 13 or less (and the node count doubles with need). The
// grid starts at 257 nodes and doubles, up to 4097, until every channel
// and every pair passes; a channel or pair that still fails is left
// uncertified and its results come from Newton's method on the exact
// models instead (slower, as exact). The tests compare the interpolants
// with Newton's method on the models at random points of the bracket for
// bands, Sakuma–Hattori curves and tabulated responsivities from 0.6 to
// 5 µm (worst 3e-12 relative).
const (
	gridMinNodes = 257
	gridMaxNodes = 4097
	// gridLnTol is the tolerance of the forward interpolation of ln S:
	// 1e-10 relative in the signal.
	gridLnTol = 1e-10
	// gridUTol is the tolerance of the inverse interpolation, relative in
	// 1/T: 1e-10, or 0.45 µK at 4500 K.
	gridUTol = 1e-10
	// gridSafety divides the tolerances for the midpoint check.
	gridSafety = 4.0
)

// lnGrid holds the nodes of the tables: T_k = lo·e^{kΔ}, k = 0 … n−1.
type lnGrid struct {
	lo, hi float64   // solver bracket, K
	u      []float64 // 1/T_k, descending
	uMid   []float64 // 1/T at the interval midpoints (in ln T)
}

// chanTable is one channel's model tabulated on a grid.
type chanTable struct {
	m         Model
	ln        []float64 // ln S_bb(T_k), strictly increasing
	du        []float64 // d ln S_bb/du at T_k, < 0
	dudy      []float64 // 1/du: du/d ln S_bb at T_k
	mid       []float64 // ln S_bb at the interval midpoints (in ln T), for the checks
	certified bool      // the interpolants met gridLnTol and gridUTol
	worstLn   float64   // largest midpoint error of ln S seen at construction
	worstU    float64   // largest relative midpoint error of u seen at construction
}

// pairTable records the check of the inverse interpolation of one pair's
// log ratio ln(S_i/S_j) (see newTables).
type pairTable struct {
	certified bool
	worstU    float64 // largest relative midpoint error of u
}

// hermiteValue is hermite without the derivative.
func hermiteValue(x, x0, x1, f0, f1, d0, d1 float64) float64 {
	h := x1 - x0
	t := (x - x0) / h
	a := 1 - t
	return a*a*((1+2*t)*f0+t*h*d0) + t*t*((3-2*t)*f1+(t-1)*h*d1)
}

// hermite returns the cubic Hermite polynomial through (x0, f0) and
// (x1, f1) with slopes d0, d1 there, and its derivative, at x:
//
//	τ = (x − x0)/h,  h = x1 − x0,
//	p = (1+2τ)(1−τ)²·f0 + τ(1−τ)²·h·d0 + τ²(3−2τ)·f1 + τ²(τ−1)·h·d1
func hermite(x, x0, x1, f0, f1, d0, d1 float64) (p, dp float64) {
	h := x1 - x0
	t := (x - x0) / h
	a := 1 - t
	p = (1+2*t)*a*a*f0 + t*a*a*h*d0 + t*t*(3-2*t)*f1 + t*t*(t-1)*h*d1
	dp = 6*t*(t-1)*(f0-f1)/h + (3*t*t-4*t+1)*d0 + (3*t*t-2*t)*d1
	return p, dp
}

// search returns k with key[k] ≤ y < key[k+1] for key[0] ≤ y ≤ key[n−1]
// (k = n − 2 at the top end).
func search(key []float64, y float64) int {
	lo, hi := 0, len(key)-1
	for hi-lo > 1 {
		mid := int(uint(lo+hi) >> 1)
		if key[mid] <= y {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo
}

// searchDiff is search on the keys a[k] − b[k].
func searchDiff(a, b []float64, y float64) int {
	lo, hi := 0, len(a)-1
	for hi-lo > 1 {
		mid := int(uint(lo+hi) >> 1)
		if a[mid]-b[mid] <= y {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo
}

// lnSignalAt returns ln S_bb at u = 1/T in node interval k
// (u_{k+1} ≤ u ≤ u_k): interpolated when the table is certified, from the
// model otherwise.
func (g *lnGrid) lnSignalAt(c *chanTable, k int, u float64) float64 {
	if !c.certified {
		return math.Log(c.m.Signal(1 / u))
	}
	return hermiteValue(u, g.u[k], g.u[k+1], c.ln[k], c.ln[k+1], c.du[k], c.du[k+1])
}

// brightness returns the brightness temperature, K, of a channel signal
// with ln s = lnS: the T in the bracket with S_bb(T) = s; NaN when lnS is
// NaN or outside the channel's signals over the bracket.
func (g *lnGrid) brightness(c *chanTable, lnS float64) float64 {
	n := len(c.ln)
	switch {
	case !(lnS >= c.ln[0] && lnS <= c.ln[n-1]):
		return math.NaN()
	case lnS == c.ln[0]:
		return g.lo
	case lnS == c.ln[n-1]:
		return g.hi
	}
	k := search(c.ln, lnS)
	uHi, uLo := g.u[k], g.u[k+1]
	u := hermiteValue(lnS, c.ln[k], c.ln[k+1], uHi, uLo, c.dudy[k], c.dudy[k+1])
	if !(u >= uLo && u <= uHi) {
		u = uLo + (uHi-uLo)*(c.ln[k+1]-lnS)/(c.ln[k+1]-c.ln[k])
	}
	if c.certified {
		return 1 / u
	}
	return solveLn(c.m, lnS, uLo, uHi, u)
}

// newTables tabulates the models on a common grid over [lo, hi] kelvin
// (0 < lo < hi < ∞, checked by the caller) and checks that every model's
// signal is finite, positive and strictly increasing there, and that the
// ratio S_i/S_j of every pair i < j strictly increases. It checks the
// interpolation of every channel (forward and inverse) and of every
// pair's log ratio (inverse), doubling the nodes until all pass or the
// grid has gridMaxNodes. The pair checks are returned in the order of
// pairIndex. what names the converter in errors.
func newTables(models []Model, lo, hi float64, what string) (*lnGrid, []*chanTable, []pairTable, error) {
	nm := len(models)
	lnLo, lnHi := math.Log(lo), math.Log(hi)
	// temp returns the node temperature at fractional index k of n nodes.
	temp := func(k float64, n int) float64 {
		switch k {
		case 0:
			return lo
		case float64(n - 1):
			return hi
		}
		return math.Exp(lnLo + (lnHi-lnLo)*k/float64(n-1))
	}
	type sample struct{ ln, du float64 }
	eval := func(i int, t float64) (sample, error) {
		s, ds := models[i].SignalDeriv(t)
		if !finite(s) || !(s > 0) {
			return sample{}, fmt.Errorf("convert: %s solver bracket [%g, %g] K: channel %d signal at %g K is %g, need finite and > 0", what, lo, hi, i, t, s)
		}
		return sample{math.Log(s), -t * t * ds / s}, nil
	}

	n := gridMinNodes
	nodes := make([][]sample, nm)
	for i := range models {
		nodes[i] = make([]sample, n)
		for k := range n {
			var err error
			if nodes[i][k], err = eval(i, temp(float64(k), n)); err != nil {
				return nil, nil, nil, err
			}
		}
	}
	for {
		g := &lnGrid{lo: lo, hi: hi, u: make([]float64, n), uMid: make([]float64, n-1)}
		for k := range n {
			g.u[k] = 1 / temp(float64(k), n)
			if k < n-1 {
				g.uMid[k] = 1 / temp(float64(k)+0.5, n)
			}
		}
		mids := make([][]sample, nm)
		tabs := make([]*chanTable, nm)
		allOK := true
		for i := range models {
			mids[i] = make([]sample, n-1)
			c := &chanTable{m: models[i], ln: make([]float64, n), du: make([]float64, n), mid: make([]float64, n-1)}
			for k, sm := range nodes[i] {
				c.ln[k], c.du[k] = sm.ln, sm.du
				if k > 0 && !(c.ln[k] > c.ln[k-1]) {
					return nil, nil, nil, fmt.Errorf("convert: %s solver bracket [%g, %g] K: channel %d signal not strictly increasing at %g K", what, lo, hi, i, 1/g.u[k])
				}
			}
			fixSlopes(g.u, c.ln, c.du)
			c.dudy = make([]float64, n)
			for k, d := range c.du {
				c.dudy[k] = 1 / d
			}
			for k := range n - 1 {
				sm, err := eval(i, 1/g.uMid[k])
				if err != nil {
					return nil, nil, nil, err
				}
				mids[i][k], c.mid[k] = sm, sm.ln
			}
			c.check(g)
			allOK = allOK && c.certified
			tabs[i] = c
		}
		var pairs []pairTable
		for i := range nm {
			for j := i + 1; j < nm; j++ {
				a, b := tabs[i], tabs[j]
				for k := 1; k < n; k++ {
					if !(a.ln[k]-b.ln[k] > a.ln[k-1]-b.ln[k-1]) {
						return nil, nil, nil, fmt.Errorf("convert: %s solver bracket [%g, %g] K: channel %d/%d signal ratio not strictly increasing at %g K", what, lo, hi, i, j, 1/g.u[k])
					}
				}
				pt := checkPair(g, a, b)
				allOK = allOK && pt.certified
				pairs = append(pairs, pt)
			}
		}
		if allOK || n >= gridMaxNodes {
			return g, tabs, pairs, nil
		}
		// Halve the spacing: the midpoints become nodes.
		for i := range models {
			merged := make([]sample, 2*n-1)
			for k := range n {
				merged[2*k] = nodes[i][k]
				if k < n-1 {
					merged[2*k+1] = mids[i][k]
				}
			}
			nodes[i] = merged
		}
		n = 2*n - 1
	}
}

// check measures the channel's interpolation errors at the midpoints and
// sets certified.
func (c *chanTable) check(g *lnGrid) {
	c.worstLn, c.worstU = 0, 0
	for k, lm := range c.mid {
		um := g.uMid[k]
		p, _ := hermite(um, g.u[k], g.u[k+1], c.ln[k], c.ln[k+1], c.du[k], c.du[k+1])
		c.worstLn = math.Max(c.worstLn, math.Abs(p-lm))
		q, _ := hermite(lm, c.ln[k], c.ln[k+1], g.u[k], g.u[k+1], c.dudy[k], c.dudy[k+1])
		c.worstU = math.Max(c.worstU, math.Abs(q-um)/um)
	}
	// A NaN error fails the test.
	c.certified = c.worstLn <= gridLnTol/gridSafety && c.worstU <= gridUTol/gridSafety
}

// checkPair measures the inverse interpolation error of the log ratio of
// channels a and b at the midpoints.
func checkPair(g *lnGrid, a, b *chanTable) pairTable {
	var pt pairTable
	for k := range a.mid {
		um := g.uMid[k]
		q, _ := hermite(a.mid[k]-b.mid[k], a.ln[k]-b.ln[k], a.ln[k+1]-b.ln[k+1], g.u[k], g.u[k+1],
			1/(a.du[k]-b.du[k]), 1/(a.du[k+1]-b.du[k+1]))
		pt.worstU = math.Max(pt.worstU, math.Abs(q-um)/um)
	}
	pt.certified = pt.worstU <= gridUTol/gridSafety
	return pt
}

// fixSlopes replaces a slope the model got wrong (not finite, not
// negative) by the secant to a neighbour; it then only spoils the
// interpolation there, which the midpoint check sees.
func fixSlopes(u, ln, du []float64) {
	for k := range du {
		if !finite(du[k]) || !(du[k] < 0) {
			j := max(k, 1)
			du[k] = (ln[j] - ln[j-1]) / (u[j] - u[j-1])
		}
	}
}

// dlnSignalDu returns d ln S_bb/du at u = 1/T in node interval k: from the
// interpolant when the table is certified, from the model otherwise.
func (g *lnGrid) dlnSignalDu(c *chanTable, k int, u float64) float64 {
	if !c.certified {
		t := 1 / u
		s, ds := c.m.SignalDeriv(t)
		return -ds / s * t * t
	}
	_, d := hermite(u, g.u[k], g.u[k+1], c.ln[k], c.ln[k+1], c.du[k], c.du[k+1])
	return d
}

// searchDesc returns k with u[k] ≥ x ≥ u[k+1] for a descending u and
// u[0] ≥ x ≥ u[n−1] (k = n − 2 at the bottom end).
func searchDesc(u []float64, x float64) int {
	lo, hi := 0, len(u)-1
	for hi-lo > 1 {
		mid := int(uint(lo+hi) >> 1)
		if u[mid] >= x {
			lo = mid
		} else {
			hi = mid
		}
	}
	return lo
}
