package convert

// lnTable tabulates u = 1/T against an increasing function of T — ln S of
// one channel, or ln(S1/S2) of a pair — at nodes evenly spaced in u, with
// the slopes du/dkey there. It supplies first guesses and tight brackets to
// the Newton solvers; it never supplies a result.
type lnTable struct {
	key []float64 // ascending with T
	u   []float64 // 1/T, K⁻¹, descending
	du  []float64 // du/dkey at the nodes, K⁻¹ per unit of key
}

func newLnTable(n int) lnTable {
	return lnTable{key: make([]float64, n), u: make([]float64, n), du: make([]float64, n)}
}

// guess returns the cubic Hermite interpolant u(y) between the two nodes
// that enclose y, key[i] ≤ y ≤ key[i+1], and those nodes' u as a bracket
// (uLo ≤ u ≤ uHi). y must lie within [key[0], key[n−1]].
//
// On each interval, with τ = (y − key[i])/h and h = key[i+1] − key[i],
//
//	u = (1+2τ)(1−τ)²·u_i + τ(1−τ)²·h·u'_i + τ²(3−2τ)·u_{i+1} + τ²(τ−1)·h·u'_{i+1}
//
// The result is clamped to the bracket.
func (tb *lnTable) guess(y float64) (u, uLo, uHi float64) {
	lo, hi := 0, len(tb.key)-1
	for hi-lo > 1 {
		mid := int(uint(lo+hi) >> 1)
		if tb.key[mid] <= y {
			lo = mid
		} else {
			hi = mid
		}
	}
	uHi, uLo = tb.u[lo], tb.u[hi]
	h := tb.key[hi] - tb.key[lo]
	tau := (y - tb.key[lo]) / h
	a := 1 - tau
	u = (1+2*tau)*a*a*uHi + tau*a*a*h*tb.du[lo] + tau*tau*(3-2*tau)*uLo + tau*tau*(tau-1)*h*tb.du[hi]
	if !(u >= uLo && u <= uHi) {
		u = uLo + (uHi-uLo)*a
	}
	return u, uLo, uHi
}
