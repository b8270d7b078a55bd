package convert

import (
	"fmt"
	"math"
)

// MaxChannels is the number of channel slots in a Result.
const MaxChannels = 8

// MaxPairs is the number of pair slots in a Result: the N − 1 adjacent
// pairs and the outer pair of at most MaxChannels channels.
const MaxPairs = MaxChannels

// Ratio converts the signals of two channels of a ratio (two-colour)
// pyrometer, the shorter wavelength first, to a ratio temperature.
//
// With measured signals S1, S2, ratio R = S1/S2 and emissivity ratio
// k = ε1/ε2 (short over long), the ratio temperature T solves
//
//	S1,bb(T) / S2,bb(T) = R / k
//
// exactly on the channel models (no Wien approximation); see Convert.
//
// Build a Ratio with NewRatio. K, Min, Max, LowSignal and Saturation may
// be changed afterwards, and the bracket with SetBracket, though not while
// Convert runs; Short and Long must not, since NewRatio checks them and
// keeps values derived from them. Convert panics on a Ratio not built by
// NewRatio. Convert only reads the Ratio, so it is safe for concurrent
// use.
type Ratio struct {
	Short, Long Model   // channel models, Short.Wavelength() < Long.Wavelength()
	K           float64 // emissivity ratio ε_short/ε_long, > 0 (1 for a grey target)
	Min, Max    float64 // measuring range, K
	LowSignal   float64 // signal-fraction limit in [0, 1); 0 turns the check off

	// Saturation is the signal of each channel (short, long) at or above
	// which it is saturated; 0 means none. A saturated channel raises
	// Saturated and gives neither a ratio nor a brightness temperature.
	Saturation [2]float64

	// The models tabulated over the solver bracket (see newTables).
	eng   engine
	ready bool
}

// Solver bracket defaults: [Min·BracketLowFactor, Max·BracketHighFactor].
// The bracket is wider than the measuring range so that a reading just
// outside the range is still reported, with BelowRange or AboveRange.
const (
	BracketLowFactor  = 0.5
	BracketHighFactor = 1.5
)

// rangeTol is the relative tolerance of the measuring-range limits, which
// are inclusive: a reading of exactly Min or Max, give or take solver
// rounding, raises no range flag.
const rangeTol = 1e-9

// NewRatio returns the converter for the channel models short and long
// with emissivity ratio k = ε_short/ε_long, measuring range [min, max]
// kelvin and signal-fraction limit lowSignal. The solver bracket is
// [min/2, 1.5·max] (see SetBracket).
//
// It returns an error when a model is nil, short's wavelength is not below
// long's, k is not finite and positive, the range is not 0 < min < max < ∞,
// lowSignal is not in [0, 1), or the ratio S_short/S_long of the models is
// not strictly increasing with finite positive signals over the solver
// bracket (checked at the nodes of the tables, at least 257 evenly spaced
// in ln T).
func NewRatio(short, long Model, k, min, max, lowSignal float64) (*Ratio, error) {
	if short == nil || long == nil {
		return nil, fmt.Errorf("convert: ratio channel models: both must be non-nil")
	}
	l1, l2 := short.Wavelength(), long.Wavelength()
	if !finite(l1) || !finite(l2) || !(l1 > 0) || !(l1 < l2) {
		return nil, fmt.Errorf("convert: ratio wavelengths short %g m, long %g m: need 0 < short < long", l1, l2)
	}
	if !finite(k) || k <= 0 {
		return nil, fmt.Errorf("convert: ratio emissivity ratio k %g: must be finite and > 0", k)
	}
	if !finite(min) || !finite(max) || !(min > 0) || !(max > min) {
		return nil, fmt.Errorf("convert: ratio measuring range [%g, %g] K: need 0 < min < max", min, max)
	}
	if !(lowSignal >= 0 && lowSignal < 1) {
		return nil, fmt.Errorf("convert: ratio low-signal limit %g: must be in [0, 1)", lowSignal)
	}
	r := &Ratio{Short: short, Long: long, K: k, Min: min, Max: max, LowSignal: lowSignal}
	if err := r.SetBracket(min*BracketLowFactor, max*BracketHighFactor); err != nil {
		return nil, err
	}
	return r, nil
}

// SetBracket sets the solver bracket [lo, hi] in kelvin, which must hold
// the measuring range: 0 < lo ≤ Min and Max ≤ hi < ∞. It checks, like
// NewRatio, that the models' signals are finite and positive and their
// ratio strictly increasing over the bracket, and tabulates them anew; on
// error the Ratio is left unchanged.
func (r *Ratio) SetBracket(lo, hi float64) error {
	if r.Short == nil || r.Long == nil {
		return fmt.Errorf("convert: ratio solver bracket: channel models not set (use NewRatio)")
	}
	if !finite(lo) || !finite(hi) || !(lo > 0) || !(lo <= r.Min) || !(hi >= r.Max) || !(hi > lo) {
		return fmt.Errorf("convert: ratio solver bracket [%g, %g] K: need 0 < lo ≤ min %g and max %g ≤ hi", lo, hi, r.Min, r.Max)
	}
	g, tabs, pairs, err := newTables([]Model{r.Short, r.Long}, lo, hi, "ratio")
	if err != nil {
		return err
	}
	r.eng = engine{grid: g, ch: tabs, pairs: pairs}
	r.ready = true
	return nil
}

// Bracket returns the solver bracket [lo, hi] in kelvin (0, 0 for a Ratio
// not built by NewRatio).
func (r *Ratio) Bracket() (lo, hi float64) {
	if r.eng.grid == nil {
		return 0, 0
	}
	return r.eng.grid.lo, r.eng.grid.hi
}

// ChannelResult is one channel's part of a Result.
type ChannelResult struct {
	Signal     float64 // signal as given
	Fraction   float64 // S / S_bb(T) at the published temperature T: emissivity × transmission seen by the channel; NaN when T is NaN or the channel unusable
	Brightness float64 // brightness temperature in the solver bracket, K; NaN when not computable (also when saturated)
}

// PairResult is the ratio temperature of one pair of channels.
type PairResult struct {
	I, J        int     // channel indices, I < J
	Temperature float64 // ratio temperature with k = e_I/e_J, K; NaN when not computable
}

// FitResult is the outcome of the multi-colour fit (see Pyrometer). The
// fit rests on an assumed emissivity model: a wrong model biases its
// temperature, by tens of kelvin for real targets, so it is an estimate
// to be read with its residual, never the truth.
type FitResult struct {
	Temperature float64 // K; NaN when not computed or not found in the solver bracket
	Slope       float64 // fitted d ln ε/dλ, µm⁻¹; NaN for a one-term (grey) fit or no fit
	Residual    float64 // rms of the ln-signal residuals of the fit; NaN without a fit
	OK          bool    // a temperature was found in the solver bracket
}

// Result is the outcome of a conversion.
type Result struct {
	Temperature float64 // published temperature, K; NaN when not computable (never made up)
	Ratio       float64 // signal ratio S_I/S_J of the published pair (outer pair for the fit); NaN when not computable
	Channels    [MaxChannels]ChannelResult
	N           int // number of channels
	Flags       Flags

	Pairs   [MaxPairs]PairResult // every adjacent pair, then the outer pair (one pair for N = 2)
	NPairs  int                  // number of pairs in Pairs
	Nongrey float64              // max − min of the finite pair temperatures, K; NaN for N < 3 or fewer than 2 finite pairs
	Fit     FitResult            // multi-colour fit; computed for N ≥ 3 or a published fit

	lnS [MaxChannels]float64 // ln of each usable channel's signal, NaN otherwise (Pyrometer only)
}

// Convert converts the short- and long-wavelength signals s1 and s2
// (in the units of the channel models) to a ratio temperature.
//
// The ratio temperature solves g(u) = ln(S1,bb(T)/S2,bb(T)) − ln(R/k) = 0,
// R = s1/s2, for u = 1/T in the solver bracket. In u the log ratio is
// nearly linear (exactly so in Wien's approximation,
// ln(S1/S2) = a − c2(1/λ1 − 1/λ2)·u), and NewRatio tabulates it from the
// exact models at nodes evenly spaced in ln T with its slope there: the
// root is the cubic Hermite interpolant of u in the log ratio between the
// two enclosing nodes,
//
//	τ = (y − y_k)/h,  u = (1+2τ)(1−τ)²u_k + τ(1−τ)²h·u'_k + τ²(3−2τ)u_{k+1} + τ²(τ−1)h·u'_{k+1}
//
// whose error NewRatio measured at the midpoint of every interval against
// the models and found below 2.5e-11 relative (the bound holds while the
// fourth derivative varies by less than a factor 4 across an interval;
// the tests find 3e-12 against Newton's method on the models and 5e-9 K
// against scipy references). Where that check failed (a model with
// structure finer than 4097 nodes resolve), Convert instead runs Newton's
// method on the models from the interpolant,
//
//	u ← u − g(u)/g'(u),   g'(u) = −T²·(S1'/S1 − S2'/S2),
//
// safeguarded by bisection within the two nodes. Brightness temperatures
// (u interpolated in ln S_i) and the blackbody signals S_i,bb(T) of the
// fractions (ln S_i interpolated in u) come from the checked tables in the
// same way. The temperature never comes from Wien's law.
//
// Outcomes:
//   - s1 or s2 zero, negative, NaN or ±Inf: NoSignal, Temperature NaN.
//   - s1 or s2 at or above its Saturation level: Saturated, Temperature
//     and that channel's brightness temperature NaN.
//   - root below (above) the solver bracket: BelowRange (AboveRange),
//     Temperature NaN.
//   - root in the bracket but below Min (above Max): the temperature,
//     with BelowRange (AboveRange). The limits are inclusive, to 1e-9
//     relative.
//   - LowSignal when a channel's Fraction s_i/S_i,bb(T) is below LowSignal.
//   - K not finite and positive (changed after NewRatio): Temperature NaN,
//     no flag.
//
// Each channel's brightness temperature is computed whenever its signal is
// valid, not saturated and within the models' signals over the solver
// bracket, also when there is no ratio temperature. Pairs holds the one
// pair (0, 1); Nongrey and Fit are NaN. Convert does not allocate.
func (r *Ratio) Convert(s1, s2 float64) Result {
	if !r.ready {
		panic("convert: Ratio.Convert on a Ratio not built by NewRatio")
	}
	p := convParams{min: r.Min, max: r.Max, low: r.LowSignal, nPairs: 1, nSolve: 1}
	p.sat[0], p.sat[1] = r.Saturation[0], r.Saturation[1]
	p.lnE[0] = math.Log(r.K)
	p.pairs[0] = pairSpec{0, 1}
	sig := [2]float64{s1, s2}
	var res Result
	r.eng.convert(sig[:], &p, &res)
	return res
}

// solvePair returns the ratio temperature of channels i < j for the log
// ratio y = ln(s_i/s_j) − ln k, and the node interval k that holds it
// (u_{k+1} ≤ 1/T ≤ u_k). Below (above) the bracket it returns NaN and
// BelowRange (AboveRange); for a y that is not finite, NaN alone.
//
// When the pair's table is certified (see newTables), T is the cubic
// Hermite interpolant of u = 1/T in the log ratio, within 1e-10 of the
// models' solution (the tests check 1e-9 against Newton's method on the
// models and scipy references); otherwise it is Newton's method on the
// models from that guess.
func (e *engine) solvePair(i, j int, y float64) (t float64, k int, f Flags) {
	g := e.grid
	a, b := e.ch[i], e.ch[j]
	n := len(g.u)
	switch {
	case !finite(y):
		return math.NaN(), 0, 0
	case y < a.ln[0]-b.ln[0]:
		return math.NaN(), 0, BelowRange
	case y > a.ln[n-1]-b.ln[n-1]:
		return math.NaN(), 0, AboveRange
	}
	k = searchDiff(a.ln, b.ln, y)
	uHi, uLo := g.u[k], g.u[k+1]
	y0, y1 := a.ln[k]-b.ln[k], a.ln[k+1]-b.ln[k+1]
	u := hermiteValue(y, y0, y1, uHi, uLo, 1/(a.du[k]-b.du[k]), 1/(a.du[k+1]-b.du[k+1]))
	if !(u >= uLo && u <= uHi) {
		u = uLo + (uHi-uLo)*(y1-y)/(y1-y0)
	}
	if e.pairs[pairIndex(i, j, len(e.ch))].certified {
		return 1 / u, k, 0
	}
	t = solveRatio(a.m, b.m, y, uLo, uHi, u)
	// Rounding in the last step may cross the interval's ends by an ulp.
	return math.Max(1/uHi, math.Min(1/uLo, t)), k, 0
}

// solveRatio solves ln(S_a(T)/S_b(T)) = y for u = 1/T in [uLo, uHi] by
// Newton's method from u, safeguarded by bisection, and returns T; NaN
// when the iteration fails.
func solveRatio(ma, mb Model, y, uLo, uHi, u float64) float64 {
	for range solveMaxIter {
		t := 1 / u
		sa, da := ma.SignalDeriv(t)
		sb, db := mb.SignalDeriv(t)
		g := math.Log(sa/sb) - y
		if math.IsInf(g, 0) {
			g = math.Log(sa) - math.Log(sb) - y // the quotient under- or overflowed
		}
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
		// dg/du = −T²·(dS_a/S_a − dS_b/S_b).
		du := g / (t * t * (da/sa - db/sb))
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

// EmissivityRatio returns the emissivity ratio k = ε_short/ε_long that
// makes the signals s1, s2 of a target at the reference temperature tRef
// (kelvin, e.g. from a thermocouple dip) read tRef:
//
//	k = (s1/s2) / (S1,bb(tRef)/S2,bb(tRef))
//
// It returns NaN when a signal or tRef is not finite and positive or a
// model signal at tRef is not.
func (r *Ratio) EmissivityRatio(s1, s2, tRef float64) float64 {
	if !finite(s1) || !finite(s2) || !finite(tRef) || !(s1 > 0) || !(s2 > 0) || !(tRef > 0) {
		return math.NaN()
	}
	b1, b2 := r.Short.Signal(tRef), r.Long.Signal(tRef)
	if !finite(b1) || !finite(b2) || !(b1 > 0) || !(b2 > 0) {
		return math.NaN()
	}
	return math.Exp(math.Log(s1) - math.Log(s2) - math.Log(b1) + math.Log(b2))
}

// WienRatioTemperature returns the ratio temperature in Wien's
// approximation,
//
//	T = c2 (1/λ1 − 1/λ2) / (ln k + 5 ln(λ2/λ1) − ln R)        [K]
//
// for wavelengths l1 < l2 (m), emissivity ratio k = ε1/ε2, signal ratio
// R = S1/S2 of narrow channels of equal width and responsivity, and c2
// (m·K). It is for first guesses and cross-checks only: at 0.9/1.05 µm it
// is off by about 1 K at 2000 K and 20 K at 3000 K. It returns NaN when an
// argument is not finite and positive, l1 ≥ l2, or the denominator is not
// positive.
func WienRatioTemperature(l1, l2, k, ratio, c2 float64) float64 {
	for _, v := range [...]float64{l1, l2, k, ratio, c2} {
		if !finite(v) || !(v > 0) {
			return math.NaN()
		}
	}
	if !(l1 < l2) {
		return math.NaN()
	}
	den := math.Log(k) + 5*math.Log(l2/l1) - math.Log(ratio)
	if !(den > 0) {
		return math.NaN()
	}
	return c2 * (1/l1 - 1/l2) / den
}
