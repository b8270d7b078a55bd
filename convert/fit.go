package convert

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// fitData is the multi-colour fit of a Pyrometer, by variable projection.
//
// For a trial temperature T, the measured log signals y_i = ln s_i − ln e_i
// (relative emissivities divided out) and the blackbody model
// m_i(T) = ln S_i,bb(T) leave z_i(T) = y_i − m_i(T) = ln ε(λ_i), which the
// fit models as Φa: Φ is the N×p design matrix with columns φ_0 = 1 and
// (p = 2) φ_1 = λ_i in µm. For fixed T the least-squares a is linear,
// a = Φ⁺z, and the residual is the part of z outside the columns of Φ,
//
//	r(T)² = ‖(I − ΦΦ⁺) z(T)‖² = ‖Q2ᵀ y − Q2ᵀ m(T)‖²
//
// with Q2 an orthonormal basis of the complement of Φ's columns (from
// gonum/mat's Householder QR of [Φ | 1/λ]: the last N − p columns of Q,
// the first of them along the part of 1/λ outside Φ's columns). So the fit
// is a one-dimensional minimisation of r² over u = 1/T, with a and Q2
// fixed by the wavelengths: NewPyrometer computes Q2ᵀ, Φ⁺ and
// c_k = Q2ᵀ m(T_k), c'_k = Q2ᵀ dm/du at every table node once, so Convert
// does not allocate.
//
// The minimisation (engine.fit):
//  1. scan: r² at every table node, c_k against w = Q2ᵀy, gives the
//     node k* of least residual, the global least on the grid (for
//     q = N − p = 1, c_k is monotone — checked at construction — and the
//     least r² = (w − c_k)² is found by bisection for the crossing c = w;
//     for q > 1 that bisection on the first component seeds a pruned scan,
//     see scan);
//  2. refine on [u_{k*+1}, u_{k*−1}] on the tabulated curve (cubic Hermite
//     of c in u, the same interpolant as the tables'): the minimum is the
//     root of g(u) = ½ d r²/du = −(w − c)ᵀc', found by Newton's method
//     with the Gauss–Newton slope c'ᵀc' (exact for a zero residual,
//     quadratically convergent then), safeguarded by bisection; where g
//     does not change sign across the bracket, golden-section search on r²
//     instead;
//  3. polish: Gauss–Newton steps δu = (w − c)ᵀc'/(c'ᵀc') on the exact
//     models until |δu| ≤ 1e-9·u (one step after a certified table).
//
// A minimum beyond an end of the solver bracket (the Gauss–Newton step
// from the end node leads out of it by more than 1e-9 relative) gives no
// fit temperature and BelowRange or AboveRange.
//
// With p = N − 1 the residual space is one-dimensional and r = 0 at the
// solution: the fit is then exactly determined and, like any
// multi-wavelength method, highly sensitive to noise (|c'| is small, a
// second difference of 1/λ). With p = N the temperature would not be
// determined at all, which is why N channels allow at most N − 1
// parameters.
type fitData struct {
	n, p, q int       // channels, emissivity terms, q = n − p
	q2t     []float64 // Q2ᵀ, q×n, row-major
	pinv    []float64 // Φ⁺, p×n, row-major
	c, dc   []float64 // Q2ᵀ ln S_bb and Q2ᵀ d ln S_bb/du at the nodes, nodes×q
	// monotone: the first component of c_k is strictly monotone in k
	// (+1 rising, −1 falling; 0 otherwise), so its crossing with w is
	// found by bisection (see scan).
	monotone int
}

// newFitData builds the fit for channel wavelengths lambdaUM (µm) with p
// emissivity terms (1 ≤ p ≤ min(2, N − 1)) on the tables.
func newFitData(g *lnGrid, tabs []*chanTable, lambdaUM []float64, p int) (*fitData, error) {
	n := len(tabs)
	phi := mat.NewDense(n, p, nil)
	for i := range n {
		phi.Set(i, 0, 1)
		if p == 2 {
			phi.Set(i, 1, lambdaUM[i])
		}
	}
	var qr mat.QR
	qr.Factorize(phi)
	var pinv mat.Dense
	if err := qr.SolveTo(&pinv, false, eye(n)); err != nil {
		return nil, fmt.Errorf("convert: pyrometer fit: design matrix of wavelengths %v µm: %w", lambdaUM, err)
	}
	// The basis Q2 of the complement: from the QR factors of [Φ | 1/λ],
	// so that its first vector is the part of 1/λ outside Φ's columns, the
	// direction in which Wien's law moves m(T) (m_i = const − c2·u/λ_i).
	aug := mat.NewDense(n, p+1, nil)
	aug.Copy(phi)
	for i := range n {
		aug.Set(i, p, 1/lambdaUM[i])
	}
	var qra mat.QR
	qra.Factorize(aug)
	var q mat.Dense
	qra.QTo(&q)
	fd := &fitData{n: n, p: p, q: n - p}
	fd.q2t = make([]float64, fd.q*n)
	for a := range fd.q {
		for i := range n {
			fd.q2t[a*n+i] = q.At(i, p+a)
		}
	}
	fd.pinv = make([]float64, p*n)
	for a := range p {
		for i := range n {
			fd.pinv[a*n+i] = pinv.At(a, i)
		}
	}
	nodes := len(g.u)
	fd.c = make([]float64, nodes*fd.q)
	fd.dc = make([]float64, nodes*fd.q)
	for k := range nodes {
		for a := range fd.q {
			var c, dc float64
			for i, tb := range tabs {
				c += fd.q2t[a*n+i] * tb.ln[k]
				dc += fd.q2t[a*n+i] * tb.du[k]
			}
			fd.c[k*fd.q+a], fd.dc[k*fd.q+a] = c, dc
		}
	}
	up, down := true, true
	for k := 1; k < nodes; k++ {
		c0, c1 := fd.c[(k-1)*fd.q], fd.c[k*fd.q]
		up = up && c1 > c0
		down = down && c1 < c0
	}
	switch {
	case up:
		fd.monotone = 1
	case down:
		fd.monotone = -1
	}
	return fd, nil
}

// eye returns the n×n identity matrix.
func eye(n int) *mat.Dense {
	m := mat.NewDense(n, n, nil)
	for i := range n {
		m.Set(i, i, 1)
	}
	return m
}

// project returns Q2ᵀv in dst[:q].
func (fd *fitData) project(dst, v *[MaxChannels]float64) {
	n := fd.n
	for a := range fd.q {
		row := fd.q2t[a*n : a*n+n]
		var s float64
		for i, x := range row {
			s += x * v[i]
		}
		dst[a] = s
	}
}

// objective returns r² = ‖w − c(u)‖², g = −(w − c)ᵀc' and the
// Gauss–Newton slope h = c'ᵀc' on the tabulated curve at u, which lies in
// node interval k (u_{k+1} ≤ u ≤ u_k).
func (fd *fitData) objective(gr *lnGrid, k int, u float64, w *[MaxChannels]float64) (r2, g, h float64) {
	q := fd.q
	c0, c1 := fd.c[k*q:k*q+q], fd.c[(k+1)*q:(k+1)*q+q]
	d0, d1 := fd.dc[k*q:k*q+q], fd.dc[(k+1)*q:(k+1)*q+q]
	for a := range q {
		c, dc := hermite(u, gr.u[k], gr.u[k+1], c0[a], c1[a], d0[a], d1[a])
		e := w[a] - c
		r2 += e * e
		g -= e * dc
		h += dc * dc
	}
	return r2, g, h
}

// scan returns the node of least r² = ‖w − c_k‖², or −1 when there is
// none (NaN).
//
// The first basis vector of Q2 lies along Wien's direction, so the first
// component of c_k carries nearly all of its motion with T and is
// monotone (checked at construction). A bisection for the node where it
// crosses w gives the least r² outright for q = 1 and otherwise a node
// near the least; its r² seeds the scan of all nodes, in which a node is
// dropped as soon as its partial sum reaches the best so far (almost
// always after the first component).
func (fd *fitData) scan(w *[MaxChannels]float64) int {
	q, c := fd.q, fd.c
	for a := range q {
		if math.IsNaN(w[a]) {
			return -1
		}
	}
	best, kb := math.Inf(1), -1
	if fd.monotone != 0 {
		s, w0 := float64(fd.monotone), w[0]
		lo, hi := 0, len(c)/q-1
		switch {
		case s*w0 <= s*c[lo*q]:
			hi = lo
		case s*w0 >= s*c[hi*q]:
			lo = hi
		}
		for hi-lo > 1 {
			mid := int(uint(lo+hi) >> 1)
			if s*c[mid*q] <= s*w0 {
				lo = mid
			} else {
				hi = mid
			}
		}
		kb = lo
		if math.Abs(w0-c[hi*q]) < math.Abs(w0-c[lo*q]) {
			kb = hi
		}
		if q == 1 {
			return kb
		}
		best = 0
		for a := range q {
			d := w[a] - c[kb*q+a]
			best += d * d
		}
	}
	for k, off := 0, 0; off+q <= len(c); k, off = k+1, off+q {
		var r2 float64
		for a := 0; a < q && r2 < best; a++ {
			d := w[a] - c[off+a]
			r2 += d * d
		}
		if r2 < best {
			best, kb = r2, k
		}
	}
	return kb
}

// Settings of the fit's minimisation.
const (
	fitRefineTol = 1e-13 // relative step in u that ends the refinement
	fitPolishTol = 1e-9  // relative step in u that ends the polish on the exact models
	fitEndTol    = 1e-9  // relative distance in u beyond an end of the bracket that still counts as the end
	fitMaxIter   = 200
	fitMaxPolish = 10
)

// fit minimises the fit residual for the log signals y (relative
// emissivities divided out) and returns the result, ln S_bb of every
// channel at the fit temperature, and BelowRange or AboveRange when the
// minimum lies beyond the solver bracket.
func (e *engine) fit(fd *fitData, y *[MaxChannels]float64) (res FitResult, lnBB [MaxChannels]float64, flags Flags) {
	nan := math.NaN()
	res = FitResult{Temperature: nan, Slope: nan, Residual: nan}
	gr := e.grid
	nodes := len(gr.u)
	q := fd.q
	var w [MaxChannels]float64
	fd.project(&w, y)

	// 1. Scan the nodes.
	kb := fd.scan(&w)
	if kb < 0 {
		return res, lnBB, 0
	}

	// 2. Refine between the neighbouring nodes.
	interval := func(u float64) int {
		if u >= gr.u[kb] {
			return max(kb-1, 0)
		}
		return min(kb, nodes-2)
	}
	ua, ub := gr.u[min(kb+1, nodes-1)], gr.u[max(kb-1, 0)]
	_, ga, ha := fd.objective(gr, interval(ua), ua, &w)
	_, gb, hb := fd.objective(gr, interval(ub), ub, &w)
	// At an end node, the Gauss–Newton step −g/h says where the minimum
	// lies; one within fitEndTol of the end counts as at the end.
	switch {
	case kb == 0 && -gb/hb > fitEndTol*ub:
		return res, lnBB, BelowRange
	case kb == nodes-1 && -ga/ha < -fitEndTol*ua:
		return res, lnBB, AboveRange
	}
	u := gr.u[kb]
	if ga <= 0 && gb >= 0 {
		for range fitMaxIter {
			_, g, h := fd.objective(gr, interval(u), u, &w)
			switch {
			case g < 0:
				ua = u
			case g > 0:
				ub = u
			default:
				ua, ub = u, u
			}
			un := u - g/h
			if !(un >= ua && un <= ub) {
				un = (ua + ub) / 2
			}
			done := math.Abs(un-u) <= fitRefineTol*u || ub-ua <= fitRefineTol*u
			u = un
			if done {
				break
			}
		}
	} else {
		// Golden-section search for the least r² on [ua, ub].
		const r = 0.6180339887498949 // (√5 − 1)/2
		x1, x2 := ub-r*(ub-ua), ua+r*(ub-ua)
		f1, _, _ := fd.objective(gr, interval(x1), x1, &w)
		f2, _, _ := fd.objective(gr, interval(x2), x2, &w)
		for range fitMaxIter {
			if ub-ua <= fitRefineTol*ub {
				break
			}
			if f1 <= f2 {
				ub, x2, f2 = x2, x1, f1
				x1 = ub - r*(ub-ua)
				f1, _, _ = fd.objective(gr, interval(x1), x1, &w)
			} else {
				ua, x1, f1 = x1, x2, f2
				x2 = ua + r*(ub-ua)
				f2, _, _ = fd.objective(gr, interval(x2), x2, &w)
			}
		}
		u = (ua + ub) / 2
	}

	// 3. Polish on the exact models.
	uMin, uMax := gr.u[nodes-1], gr.u[0]
	var m, dm, c, dc [MaxChannels]float64
	for it := 0; ; it++ {
		if it == fitMaxPolish || !(u >= uMin && u <= uMax) {
			return res, lnBB, 0
		}
		t := 1 / u
		for i, ch := range e.ch {
			s, ds := ch.m.SignalDeriv(t)
			if !(s > 0) || !finite(s) {
				return res, lnBB, 0
			}
			m[i], dm[i] = math.Log(s), -t*t*ds/s
		}
		fd.project(&c, &m)
		fd.project(&dc, &dm)
		var num, den float64
		for a := range q {
			num += (w[a] - c[a]) * dc[a]
			den += dc[a] * dc[a]
		}
		un := math.Max(uMin, math.Min(uMax, u+num/den))
		if !(math.Abs(un-u) <= fitPolishTol*u) {
			u = un
			continue
		}
		du := un - u
		var r2 float64
		for a := range q {
			d := w[a] - c[a] - dc[a]*du
			r2 += d * d
		}
		for i := range fd.n {
			lnBB[i] = m[i] + dm[i]*du
		}
		u = un
		res.Residual = math.Sqrt(r2 / float64(fd.n))
		break
	}
	res.Temperature = 1 / u
	if fd.p == 2 {
		var a1 float64
		for i := range fd.n {
			a1 += fd.pinv[fd.n+i] * (y[i] - lnBB[i])
		}
		res.Slope = a1
	}
	res.OK = true
	return res, lnBB, 0
}
