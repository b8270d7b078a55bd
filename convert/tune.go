package convert

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// TunePoint is one observation for setting the emissivity ratio from a
// reference: the target's true temperature from a reference instrument
// (a thermocouple dip, say) and the two channel signals seen at that
// moment.
type TunePoint struct {
	Reference   float64 // reference temperature, K
	Short, Long float64 // channel signals, in the units of the channel models
}

// TuneResult is the emissivity ratio found by TuneEmissivityRatio.
type TuneResult struct {
	// K is the emissivity ratio k = ε_short/ε_long: the geometric mean of
	// PerPoint.
	K float64
	// U is the standard uncertainty of K (coverage factor 1), from the
	// reference's uncertainty and the scatter of the points.
	U float64
	// Slope is dk/dT in 1/K, the least-squares line of PerPoint against
	// the reference temperatures; NaN unless there are 3 or more points at
	// 2 or more temperatures.
	Slope float64
	// SlopeP is the two-sided p-value of Slope under the hypothesis that
	// k does not depend on temperature (Student's t, n − 2 degrees of
	// freedom); NaN when Slope is.
	SlopeP float64
	// TemperatureDependent is true when SlopeP < 0.05 and the change of k
	// across the points' temperature span, |Slope|·span, exceeds U.
	TemperatureDependent bool
	// PerPoint is k of each point, in the order given.
	PerPoint []float64
}

// Significance level of TuneResult.TemperatureDependent.
const tuneSignificance = 0.05

// tuneRoundingFloor is the relative change of k below which a slope is
// taken as rounding, whatever its p-value: noise-free points of a constant
// k scatter by a few 1e-16 and their slope has a meaningless t statistic.
const tuneRoundingFloor = 1e-9

// TuneEmissivityRatio returns the emissivity ratio k = ε_short/ε_long
// (glowgate's convention) that makes a ratio pyrometer with channel models
// short and long read the reference temperatures of points, with uRef the
// standard uncertainty of the reference temperatures (K, ≥ 0).
//
// A point whose ratio temperature read with k = 1 is T_R has
//
//	k = [S1,bb(T_R)/S2,bb(T_R)] / [S1,bb(T_ref)/S2,bb(T_ref)]
//	  = (S1/S2) / (S1,bb(T_ref)/S2,bb(T_ref))
//
// (PHYSICS.md, "Setting k from a reference"; in Wien's approximation
// k = exp[(c2/Λ)(1/T_ref − 1/T_R)]), evaluated exactly on the models. The
// combined k is the geometric mean, exp(mean ln k_i).
//
// Uncertainty (JCGM 100:2008): a reference error δT changes ln k_i by
// −g(T_ref)·δT with
//
//	g(T) = ∂ln(S1,bb/S2,bb)/∂T = S1'/S1 − S2'/S2        [1/K]
//
// The reference is taken as one instrument whose error is common to all
// points, so this part does not average down:
//
//	u_ref(ln k) = uRef · mean g(T_ref,i)
//
// The scatter adds the standard error of the mean of ln k_i,
// s/√n (n ≥ 2; with one point there is no scatter term), and
//
//	U = k · √(u_ref² + s²/n)
//
// With three or more points at two or more temperatures the slope of k
// against T_ref is fitted by least squares and tested against zero with
// Student's t (n − 2 degrees of freedom; gonum stat and distuv).
// TemperatureDependent then reports a slope that is significant
// (p < 0.05) and large enough to matter: the change of k across the span
// of temperatures exceeds U (and a rounding floor of 1e-9·k).
//
// It returns an error naming the point when a model is nil, there are no
// points, a reference temperature or signal is not finite and > 0, a model
// signal at a reference is not, or uRef is not finite and ≥ 0.
func TuneEmissivityRatio(short, long Model, points []TunePoint, uRef float64) (TuneResult, error) {
	res := TuneResult{Slope: math.NaN(), SlopeP: math.NaN()}
	switch {
	case short == nil || long == nil:
		return res, fmt.Errorf("convert: emissivity-ratio tuning: both channel models must be non-nil")
	case len(points) == 0:
		return res, fmt.Errorf("convert: emissivity-ratio tuning: no points")
	case !finite(uRef) || uRef < 0:
		return res, fmt.Errorf("convert: emissivity-ratio tuning: reference uncertainty %g K must be finite and ≥ 0", uRef)
	}
	n := len(points)
	lnk := make([]float64, n)
	res.PerPoint = make([]float64, n)
	var sumLn, sumG float64
	for i, p := range points {
		if !finite(p.Reference) || !(p.Reference > 0) {
			return res, fmt.Errorf("convert: emissivity-ratio tuning point %d: reference temperature %g K must be finite and > 0", i+1, p.Reference)
		}
		if !finite(p.Short) || !(p.Short > 0) || !finite(p.Long) || !(p.Long > 0) {
			return res, fmt.Errorf("convert: emissivity-ratio tuning point %d: signals %g (short) and %g (long) must be finite and > 0", i+1, p.Short, p.Long)
		}
		b1, d1 := short.SignalDeriv(p.Reference)
		b2, d2 := long.SignalDeriv(p.Reference)
		if !finite(b1) || !finite(b2) || !(b1 > 0) || !(b2 > 0) {
			return res, fmt.Errorf("convert: emissivity-ratio tuning point %d: blackbody signals at %g K are %g (short) and %g (long), need finite and > 0", i+1, p.Reference, b1, b2)
		}
		g := d1/b1 - d2/b2
		if !finite(g) {
			return res, fmt.Errorf("convert: emissivity-ratio tuning point %d: no ratio sensitivity at %g K", i+1, p.Reference)
		}
		lnk[i] = math.Log(p.Short) - math.Log(p.Long) - math.Log(b1) + math.Log(b2)
		res.PerPoint[i] = math.Exp(lnk[i])
		sumLn += lnk[i]
		sumG += g
	}
	mean := sumLn / float64(n)
	res.K = math.Exp(mean)
	uRefLn := uRef * math.Abs(sumG/float64(n))
	var uScatter2 float64
	if n > 1 {
		var ss float64
		for _, v := range lnk {
			ss += (v - mean) * (v - mean)
		}
		uScatter2 = ss / float64(n-1) / float64(n)
	}
	res.U = res.K * math.Sqrt(uRefLn*uRefLn+uScatter2)

	slope, p, span, ok := slopeTest(points, res.PerPoint)
	if ok {
		res.Slope, res.SlopeP = slope, p
		change := math.Abs(slope) * span
		res.TemperatureDependent = p < tuneSignificance && change > res.U && change > tuneRoundingFloor*res.K
	}
	return res, nil
}

// slopeTest fits y = a + b·T by ordinary least squares to the reference
// temperatures of points and y (gonum stat.LinearRegression), and returns
// b, the two-sided p-value of t = b/se(b) with n − 2 degrees of freedom,
//
//	se(b)² = Σ(y − a − bT)² / ((n − 2)·Σ(T − T̄)²)
//
// and the span max T − min T. ok is false with fewer than 3 points or
// fewer than 2 distinct temperatures.
func slopeTest(points []TunePoint, y []float64) (b, p, span float64, ok bool) {
	n := len(points)
	if n < 3 {
		return 0, 0, 0, false
	}
	x := make([]float64, n)
	lo, hi := math.Inf(1), math.Inf(-1)
	for i, pt := range points {
		x[i] = pt.Reference
		lo, hi = math.Min(lo, x[i]), math.Max(hi, x[i])
	}
	if !(hi > lo) {
		return 0, 0, 0, false
	}
	tm := stat.Mean(x, nil)
	var sxx, rss float64
	a, b := stat.LinearRegression(x, y, nil, false)
	for i := range x {
		sxx += (x[i] - tm) * (x[i] - tm)
		e := y[i] - a - b*x[i]
		rss += e * e
	}
	if !(sxx > 0) {
		return 0, 0, 0, false
	}
	dof := float64(n - 2)
	se := math.Sqrt(rss / dof / sxx)
	switch {
	case se > 0:
		p = studentTwoSided(b/se, dof)
	case b != 0:
		p = 0
	default:
		p = 1
	}
	return b, p, hi - lo, true
}

// studentTwoSided returns P(|T| ≥ |t|) for Student's t distribution with
// nu degrees of freedom (gonum distuv.StudentsT); NaN for a NaN t or
// nu ≤ 0.
func studentTwoSided(t, nu float64) float64 {
	if math.IsNaN(t) || !(nu > 0) {
		return math.NaN()
	}
	return 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: nu}.Survival(math.Abs(t))
}
