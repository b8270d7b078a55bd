package convert

import (
	"fmt"
	"math"
	"sort"
)

// Settings of the least-squares calibration fit.
const (
	// calMaxIter bounds the Levenberg–Marquardt iterations.
	calMaxIter = 500
	// calStepTol ends the iteration once an accepted step changes the
	// scaled parameters by less than this fraction of their size.
	calStepTol = 1e-13
	// calGradTol ends the iteration once the residual vector is orthogonal
	// to every Jacobian column to this cosine (MINPACK's gtol test).
	calGradTol = 1e-10
	// calStallGradTol is the looser cosine accepted when no step lowers the
	// sum of squares any more (rounding has taken over).
	calStallGradTol = 1e-6
	// calZeroResidual (K) is a residual vector small enough to be exact:
	// rounding in T ≈ 1e3 K alone is about 1e-13 K.
	calZeroResidual = 1e-10
)

// FitSakumaHattoriPoints fits the Sakuma–Hattori curve
//
//	S(T) = C / (exp(c2/(A·T + B)) − 1)
//
// to blackbody calibration points: t[i] in kelvin (on ITS-90), s[i] the
// channel's signal there (any units, > 0), with the given c2 (m·K; use the
// value the curve will be inverted with). It returns the curve and the
// temperature residuals
//
//	r_i = t_i − T_fit(s_i),   T_fit(S) = c2/(A·ln(C/S + 1)) − B/A        [K]
//
// in the order of the points, and minimises Σ r_i²: the fit is judged in
// kelvin, the way a calibration certificate states it (CCT-WG5,
// "Uncertainty budgets for calibration of radiation thermometers below the
// silver point", 2008). Three points determine the curve exactly; more
// are fitted in the least-squares sense.
//
// The minimisation is Levenberg–Marquardt over (A, B, ln C), with
// L_i = ln(1 + C/s_i) and the Jacobian of the residuals
//
//	∂r/∂A = T_fit/A,   ∂r/∂B = 1/A,   ∂r/∂lnC = c2/(A·L²) · C/(s + C)
//
// scaled by its column norms; each damped step is solved by Householder
// QR, never by the normal equations, since the three columns are close to
// the polynomials T, 1 and T² and nearly collinear over a calibration
// range. The start is the exact curve through the coldest, middle and
// hottest points (FitSakumaHattori) or, should that fail, Wien's law
// through the outer points with B = 0.
//
// It returns an error naming the point when the slices differ in length,
// there are fewer than 3 points, a temperature or signal is not finite and
// > 0, two temperatures are equal, the signals do not rise strictly with
// temperature, c2 is not finite and > 0, or the iteration does not
// converge.
func FitSakumaHattoriPoints(t, s []float64, c2 float64) (fit *SakumaHattori, residualsK []float64, err error) {
	n := len(t)
	switch {
	case len(s) != n:
		return nil, nil, fmt.Errorf("convert: Sakuma–Hattori fit: %d temperatures but %d signals", n, len(s))
	case n < 3:
		return nil, nil, fmt.Errorf("convert: Sakuma–Hattori fit: %d points, need at least 3 to fit A, B and C", n)
	case !finite(c2) || c2 <= 0:
		return nil, nil, fmt.Errorf("convert: Sakuma–Hattori fit c2 %g m·K: must be finite and > 0", c2)
	}
	for i := range t {
		if !finite(t[i]) || !(t[i] > 0) {
			return nil, nil, fmt.Errorf("convert: Sakuma–Hattori fit point %d: temperature %g K must be finite and > 0", i+1, t[i])
		}
		if !finite(s[i]) || !(s[i] > 0) {
			return nil, nil, fmt.Errorf("convert: Sakuma–Hattori fit point %d: signal %g must be finite and > 0", i+1, s[i])
		}
	}
	order := make([]int, n)
	for i := range order {
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return t[order[a]] < t[order[b]] })
	for k := 1; k < n; k++ {
		i, j := order[k-1], order[k]
		if t[j] == t[i] {
			return nil, nil, fmt.Errorf("convert: Sakuma–Hattori fit points %d and %d: same temperature %g K", i+1, j+1, t[i])
		}
		if !(s[j] > s[i]) {
			return nil, nil, fmt.Errorf("convert: Sakuma–Hattori fit point %d: signal %g at %g K is not above %g at %g K (point %d); signals must rise with temperature",
				j+1, s[j], t[j], s[i], t[i], i+1)
		}
	}

	pr := calProblem{t: t, lnS: make([]float64, n), c2: c2}
	for i := range s {
		pr.lnS[i] = math.Log(s[i])
	}
	lo, mid, hi := order[0], order[n/2], order[n-1]
	var p [3]float64 // A, B, ln C
	if m, err := FitSakumaHattori([3]float64{t[lo], t[mid], t[hi]}, [3]float64{s[lo], s[mid], s[hi]}, c2); err == nil {
		p = [3]float64{m.A, m.B, math.Log(m.C)}
	} else {
		// Wien's law through the outer points: ln S = ln C − c2/(A·T).
		a := c2 * (1/t[lo] - 1/t[hi]) / (pr.lnS[hi] - pr.lnS[lo])
		p = [3]float64{a, 0, pr.lnS[lo] + c2/(a*t[lo])}
	}
	p, err = pr.levenbergMarquardt(p)
	if err != nil {
		return nil, nil, err
	}
	fit, err = NewSakumaHattori(p[0], p[1], math.Exp(p[2]), c2)
	if err != nil {
		return nil, nil, fmt.Errorf("convert: Sakuma–Hattori fit to %d points: %w", n, err)
	}
	residualsK = make([]float64, n)
	for i := range t {
		residualsK[i] = t[i] - fit.Inverse(s[i])
		if !finite(residualsK[i]) {
			return nil, nil, fmt.Errorf("convert: Sakuma–Hattori fit point %d: fitted curve has no temperature for signal %g", i+1, s[i])
		}
	}
	return fit, residualsK, nil
}

// calProblem is the least-squares problem of FitSakumaHattoriPoints.
type calProblem struct {
	t, lnS []float64
	c2     float64
}

// eval fills r with the residuals t_i − T_fit(s_i) at p = (A, B, ln C)
// and, when jac is not nil, the Jacobian ∂r_i/∂p. It reports false where
// the curve is not defined (A ≤ 0, a non-finite value).
func (pr *calProblem) eval(p [3]float64, r []float64, jac [][3]float64) bool {
	a, b, lnC := p[0], p[1], p[2]
	if !(a > 0) || !finite(a) || !finite(b) || !finite(lnC) {
		return false
	}
	for i := range pr.t {
		// L = ln(1 + C/S) and w = C/(S + C) from d = ln C − ln S without
		// overflow: for d > 0, L = d + ln(1 + e^−d).
		d := lnC - pr.lnS[i]
		var l, w float64
		if d > 0 {
			e := math.Exp(-d)
			l, w = d+math.Log1p(e), 1/(1+e)
		} else {
			e := math.Exp(d)
			l, w = math.Log1p(e), e/(1+e)
		}
		if !(l > 0) {
			return false
		}
		tm := pr.c2/(a*l) - b/a
		r[i] = pr.t[i] - tm
		if !finite(r[i]) {
			return false
		}
		if jac != nil {
			jac[i] = [3]float64{tm / a, 1 / a, pr.c2 / (a * l * l) * w}
			if !finite(jac[i][0]) || !finite(jac[i][1]) || !finite(jac[i][2]) {
				return false
			}
		}
	}
	return true
}

// levenbergMarquardt minimises Σ r_i² from p0 (Moré's scaled
// Levenberg–Marquardt with Nielsen's damping update: Madsen, Nielsen &
// Tingleff, "Methods for non-linear least squares problems", DTU 2004,
// §3.2).
func (pr *calProblem) levenbergMarquardt(p [3]float64) ([3]float64, error) {
	n := len(pr.t)
	r, rn := make([]float64, n), make([]float64, n)
	jac := make([][3]float64, n)
	aug := make([][3]float64, n+3)
	rhs := make([]float64, n+3)
	if !pr.eval(p, r, jac) {
		return p, fmt.Errorf("convert: Sakuma–Hattori fit to %d points: no valid first guess", n)
	}
	cost := sumSq(r)
	mu, nu := 1e-3, 2.0
	var dscale [3]float64
	for iter := 0; iter < calMaxIter; iter++ {
		var colNorm [3]float64
		for j := range 3 {
			for i := range jac {
				colNorm[j] = math.Hypot(colNorm[j], jac[i][j])
			}
			if !(colNorm[j] > 0) {
				return p, fmt.Errorf("convert: Sakuma–Hattori fit to %d points: degenerate Jacobian", n)
			}
			dscale[j] = math.Max(dscale[j], colNorm[j])
		}
		rNorm := math.Sqrt(cost)
		if rNorm <= calZeroResidual {
			return p, nil
		}
		grad := gradCosine(jac, r, colNorm, rNorm)
		if grad <= calGradTol {
			return p, nil
		}
		// Damped step in scaled variables x_j = dscale_j·δ_j:
		// minimise ‖J·D⁻¹·x + r‖² + μ‖x‖².
		for i := range jac {
			for j := range 3 {
				aug[i][j] = jac[i][j] / dscale[j]
			}
			rhs[i] = -r[i]
		}
		sq := math.Sqrt(mu)
		for j := range 3 {
			aug[n+j] = [3]float64{}
			aug[n+j][j] = sq
			rhs[n+j] = 0
		}
		x, ok := lstsq3(aug, rhs)
		if !ok {
			return p, fmt.Errorf("convert: Sakuma–Hattori fit to %d points: singular step", n)
		}
		var pn [3]float64
		var stepNorm, parNorm float64
		for j := range 3 {
			pn[j] = p[j] + x[j]/dscale[j]
			stepNorm = math.Hypot(stepNorm, x[j])
			parNorm = math.Hypot(parNorm, dscale[j]*p[j])
		}
		// Predicted decrease of Σr²: ‖r‖² − ‖r + Jδ‖² = x·(μx − gradient)
		// for the LM step, computed directly for robustness.
		pred := 0.0
		for i := range jac {
			lin := r[i] + jac[i][0]*(x[0]/dscale[0]) + jac[i][1]*(x[1]/dscale[1]) + jac[i][2]*(x[2]/dscale[2])
			pred += r[i]*r[i] - lin*lin
		}
		if pr.eval(pn, rn, nil) {
			if costN := sumSq(rn); costN < cost {
				rho := (cost - costN) / pred
				p, cost = pn, costN
				r, rn = rn, r
				pr.eval(p, r, jac)
				if pred > 0 && rho > 0 {
					f := 2*rho - 1
					mu *= math.Max(1.0/3, 1-f*f*f)
				}
				nu = 2
				if stepNorm <= calStepTol*(parNorm+calStepTol) {
					return p, nil
				}
				continue
			}
		}
		mu *= nu
		nu *= 2
		if mu > 1e30 || stepNorm <= calStepTol*(parNorm+calStepTol) {
			// No step lowers the sum of squares: the minimum up to
			// rounding, unless the gradient says otherwise.
			if grad <= calStallGradTol {
				return p, nil
			}
			return p, fmt.Errorf("convert: Sakuma–Hattori fit to %d points: no convergence (stalled with rms residual %.3g K)", n, rNorm/math.Sqrt(float64(n)))
		}
	}
	return p, fmt.Errorf("convert: Sakuma–Hattori fit to %d points: no convergence in %d iterations (rms residual %.3g K)", n, calMaxIter, math.Sqrt(cost/float64(n)))
}

// sumSq returns Σ x_i².
func sumSq(x []float64) float64 {
	var s float64
	for _, v := range x {
		s += v * v
	}
	return s
}

// gradCosine returns max_j |J_j·r| / (‖J_j‖·‖r‖), the cosine between the
// residual vector and the nearest Jacobian column.
func gradCosine(jac [][3]float64, r []float64, colNorm [3]float64, rNorm float64) float64 {
	var g float64
	for j := range 3 {
		var dot float64
		for i := range jac {
			dot += jac[i][j] * r[i]
		}
		g = math.Max(g, math.Abs(dot)/(colNorm[j]*rNorm))
	}
	return g
}

// lstsq3 returns the x minimising ‖a·x − b‖ for an m×3 matrix a (m ≥ 3)
// by Householder QR (Golub & Van Loan, Matrix Computations, 4th ed.,
// §5.3.3). a and b are overwritten; ok is false when a has rank below 3 or
// the result is not finite.
func lstsq3(a [][3]float64, b []float64) (x [3]float64, ok bool) {
	m := len(a)
	for k := range 3 {
		var nrm float64
		for i := k; i < m; i++ {
			nrm = math.Hypot(nrm, a[i][k])
		}
		if nrm == 0 {
			return x, false
		}
		alpha := -math.Copysign(nrm, a[k][k])
		// Householder vector v = (a[k][k] − α, a[k+1][k], …).
		v0 := a[k][k] - alpha
		vv := v0 * v0
		for i := k + 1; i < m; i++ {
			vv += a[i][k] * a[i][k]
		}
		if vv > 0 {
			for j := k + 1; j < 3; j++ {
				dot := v0 * a[k][j]
				for i := k + 1; i < m; i++ {
					dot += a[i][k] * a[i][j]
				}
				f := 2 * dot / vv
				a[k][j] -= f * v0
				for i := k + 1; i < m; i++ {
					a[i][j] -= f * a[i][k]
				}
			}
			dot := v0 * b[k]
			for i := k + 1; i < m; i++ {
				dot += a[i][k] * b[i]
			}
			f := 2 * dot / vv
			b[k] -= f * v0
			for i := k + 1; i < m; i++ {
				b[i] -= f * a[i][k]
			}
		}
		a[k][k] = alpha
	}
	for k := 2; k >= 0; k-- {
		v := b[k]
		for j := k + 1; j < 3; j++ {
			v -= a[k][j] * x[j]
		}
		x[k] = v / a[k][k]
	}
	return x, finite(x[0]) && finite(x[1]) && finite(x[2])
}
