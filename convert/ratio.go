package convert

import (
	"fmt"
	"math"
)

// MaxChannels is the number of channel slots in a Result.
const MaxChannels = 8

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
// Build a Ratio with NewRatio. K, Min, Max and LowSignal may be changed
// afterwards, and the bracket with SetBracket, though not while Convert
// runs; Short and Long must not, since
// NewRatio checks them and keeps values derived from them. Convert panics
// on a Ratio not built by NewRatio. Convert only reads the Ratio, so it is
// safe for concurrent use.
type Ratio struct {
	Short, Long Model   // channel models, Short.Wavelength() < Long.Wavelength()
	K           float64 // emissivity ratio ε_short/ε_long, > 0 (1 for a grey target)
	Min, Max    float64 // measuring range, K
	LowSignal   float64 // signal-fraction limit in [0, 1); 0 turns the check off

	// Solver bracket [tLo, tHi], K, and the models tabulated over it:
	// ln(S1,bb/S2,bb), ln S1,bb and ln S2,bb against u = 1/T.
	tLo, tHi   float64
	ratioTable lnTable
	shortTable lnTable
	longTable  lnTable
	ready      bool
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

// tableNodes is the number of points, evenly spaced in 1/T, at which
// NewRatio and SetBracket check and tabulate the models over the solver
// bracket.
const tableNodes = 257

// NewRatio returns the converter for the channel models short and long
// with emissivity ratio k = ε_short/ε_long, measuring range [min, max]
// kelvin and signal-fraction limit lowSignal. The solver bracket is
// [min/2, 1.5·max] (see SetBracket).
//
// It returns an error when a model is nil, short's wavelength is not below
// long's, k is not finite and positive, the range is not 0 < min < max < ∞,
// lowSignal is not in [0, 1), or the ratio S_short/S_long of the models is
// not strictly increasing with finite positive signals over the solver
// bracket (checked at 257 points evenly spaced in 1/T, which are also
// tabulated for the solvers' first guesses).
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
// ratio strictly increasing over the bracket; on error the Ratio is left
// unchanged.
func (r *Ratio) SetBracket(lo, hi float64) error {
	if r.Short == nil || r.Long == nil {
		return fmt.Errorf("convert: ratio solver bracket: channel models not set (use NewRatio)")
	}
	if !finite(lo) || !finite(hi) || !(lo > 0) || !(lo <= r.Min) || !(hi >= r.Max) {
		return fmt.Errorf("convert: ratio solver bracket [%g, %g] K: need 0 < lo ≤ min %g and max %g ≤ hi", lo, hi, r.Min, r.Max)
	}
	uLo, uHi := 1/hi, 1/lo
	rt, st, lt := newLnTable(tableNodes), newLnTable(tableNodes), newLnTable(tableNodes)
	for i := range tableNodes {
		// Node i runs from the cold end (u = uHi) to the hot end (u = uLo).
		u := uHi - (uHi-uLo)*float64(i)/float64(tableNodes-1)
		t := 1 / u
		switch i {
		case 0:
			t = lo
		case tableNodes - 1:
			t = hi
		}
		u = 1 / t
		s1, d1 := r.Short.SignalDeriv(t)
		s2, d2 := r.Long.SignalDeriv(t)
		if !finite(s1) || !finite(s2) || !(s1 > 0) || !(s2 > 0) {
			return fmt.Errorf("convert: ratio solver bracket [%g, %g] K: channel signals at %g K are %g (short) and %g (long), need finite and > 0", lo, hi, t, s1, s2)
		}
		l1, l2 := math.Log(s1), math.Log(s2)
		rt.u[i], st.u[i], lt.u[i] = u, u, u
		rt.key[i], st.key[i], lt.key[i] = l1-l2, l1, l2
		// du/dkey = 1/(dkey/du), dkey/du = −T²·dkey/dT.
		rt.du[i] = -1 / (t * t * (d1/s1 - d2/s2))
		st.du[i] = -1 / (t * t * d1 / s1)
		lt.du[i] = -1 / (t * t * d2 / s2)
		if i == 0 {
			continue
		}
		switch {
		case !(rt.key[i] > rt.key[i-1]):
			return fmt.Errorf("convert: ratio solver bracket [%g, %g] K: short/long signal ratio not strictly increasing at %g K", lo, hi, t)
		case !(st.key[i] > st.key[i-1]):
			return fmt.Errorf("convert: ratio solver bracket [%g, %g] K: short channel signal not strictly increasing at %g K", lo, hi, t)
		case !(lt.key[i] > lt.key[i-1]):
			return fmt.Errorf("convert: ratio solver bracket [%g, %g] K: long channel signal not strictly increasing at %g K", lo, hi, t)
		}
	}
	// A slope the models got wrong (not finite, wrong sign) only spoils
	// first guesses; replace it by the secant to stay well inside.
	for _, tb := range [...]*lnTable{&rt, &st, &lt} {
		for i := range tb.du {
			if !finite(tb.du[i]) || !(tb.du[i] < 0) {
				j := max(i, 1)
				tb.du[i] = (tb.u[j] - tb.u[j-1]) / (tb.key[j] - tb.key[j-1])
			}
		}
	}
	r.tLo, r.tHi = lo, hi
	r.ratioTable, r.shortTable, r.longTable = rt, st, lt
	r.ready = true
	return nil
}

// Bracket returns the solver bracket [lo, hi] in kelvin.
func (r *Ratio) Bracket() (lo, hi float64) { return r.tLo, r.tHi }

// ChannelResult is one channel's part of a Result.
type ChannelResult struct {
	Signal     float64 // signal as given
	Fraction   float64 // S / S_bb(T_ratio): emissivity × transmission seen by the channel; NaN when T is NaN
	Brightness float64 // brightness temperature in the solver bracket, K; NaN when not computable
}

// Result is the outcome of a conversion.
type Result struct {
	Temperature float64 // ratio temperature, K; NaN when not computable (never made up)
	Ratio       float64 // S_short/S_long; NaN when not computable
	Channels    [MaxChannels]ChannelResult
	N           int // number of channels used
	Flags       Flags
}

// Convert converts the short- and long-wavelength signals s1 and s2
// (in the units of the channel models) to a ratio temperature.
//
// It solves g(u) = ln(S1,bb(T)/S2,bb(T)) − ln(R/k) = 0, R = s1/s2, for T
// in the solver bracket by Newton's method in u = 1/T,
//
//	u ← u − g(u)/g'(u),   g'(u) = −T²·(S1'/S1 − S2'/S2),
//
// safeguarded by bisection. In u the log ratio is nearly linear (exactly so
// in Wien's approximation, ln(S1/S2) = a − c2(1/λ1 − 1/λ2)·u), so the first
// guess is that linear law fitted locally: the log ratio tabulated by
// NewRatio at 257 nodes and interpolated by cubic Hermite polynomials in u,
// whose two enclosing nodes also make the bracket. From that guess one
// Newton step usually meets the stopping test (a step below 1e-8 in
// relative 1/T, after which the error is far below 1e-12 relative). The
// result always comes from the channel models, never from the table or
// from Wien's law. Brightness temperatures are solved the same way on
// ln S_i.
//
// Outcomes:
//   - s1 or s2 zero, negative, NaN or ±Inf: NoSignal, Temperature NaN.
//   - root below (above) the solver bracket: BelowRange (AboveRange),
//     Temperature NaN.
//   - root in the bracket but below Min (above Max): the temperature,
//     with BelowRange (AboveRange). The limits are inclusive, to 1e-9
//     relative.
//   - LowSignal when a channel's Fraction s_i/S_i,bb(T) is below LowSignal.
//
// Each channel's brightness temperature is computed whenever its signal is
// valid and lies within the models' signals over the solver bracket, also
// when there is no ratio temperature. Convert does not allocate.
func (r *Ratio) Convert(s1, s2 float64) Result {
	if !r.ready {
		panic("convert: Ratio.Convert on a Ratio not built by NewRatio")
	}
	nan := math.NaN()
	res := Result{Temperature: nan, Ratio: nan, N: 2}
	res.Channels[0] = ChannelResult{Signal: s1, Fraction: nan, Brightness: nan}
	res.Channels[1] = ChannelResult{Signal: s2, Fraction: nan, Brightness: nan}
	ok1 := finite(s1) && s1 > 0
	ok2 := finite(s2) && s2 > 0
	ln1, ln2 := math.Log(s1), math.Log(s2) // NaN for invalid signals
	res.Channels[0].Brightness = r.brightness(r.Short, &r.shortTable, ln1)
	res.Channels[1].Brightness = r.brightness(r.Long, &r.longTable, ln2)
	if !ok1 || !ok2 {
		res.Flags |= NoSignal
		return res
	}
	res.Ratio = s1 / s2
	if !finite(r.K) || !(r.K > 0) {
		return res // K set to an invalid value after NewRatio: no reading
	}
	y := ln1 - ln2 - math.Log(r.K)
	keys := r.ratioTable.key
	switch {
	case math.IsNaN(y):
		return res
	case y < keys[0]:
		res.Flags |= BelowRange
		return res
	case y > keys[len(keys)-1]:
		res.Flags |= AboveRange
		return res
	}
	t, b1, b2 := r.solve(y)
	if math.IsNaN(t) {
		return res
	}
	res.Temperature = t
	if t < r.Min*(1-rangeTol) {
		res.Flags |= BelowRange
	} else if t > r.Max*(1+rangeTol) {
		res.Flags |= AboveRange
	}
	f1, f2 := s1/b1, s2/b2
	res.Channels[0].Fraction, res.Channels[1].Fraction = f1, f2
	if f1 < r.LowSignal || f2 < r.LowSignal {
		res.Flags |= LowSignal
	}
	return res
}

// solve returns the ratio temperature for the log ratio y = ln(R/k),
// known to lie within the table, and S_i,bb there (to first order in the
// last Newton step).
func (r *Ratio) solve(y float64) (t, s1, s2 float64) {
	u, uLo, uHi := r.ratioTable.guess(y)
	for range solveMaxIter {
		t = 1 / u
		var d1, d2 float64
		s1, d1 = r.Short.SignalDeriv(t)
		s2, d2 = r.Long.SignalDeriv(t)
		g := math.Log(s1) - math.Log(s2) - y
		switch {
		case g > 0:
			uLo = u
		case g < 0:
			uHi = u
		case g == 0:
			return t, s1, s2
		default:
			return math.NaN(), 0, 0
		}
		// dg/du = −T²·(dS1/S1 − dS2/S2).
		du := g / (t * t * (d1/s1 - d2/s2))
		if math.Abs(du) <= solveRelTol*u {
			tn := 1 / (u + du)
			dt := tn - t
			return tn, s1 + d1*dt, s2 + d2*dt
		}
		un := u + du
		if !(un > uLo && un < uHi) {
			un = (uLo + uHi) / 2
			if uHi-uLo <= solveBisectTol*u {
				return 1 / un, s1, s2
			}
		}
		u = un
	}
	return math.NaN(), 0, 0
}

// brightness returns the brightness temperature of a channel with model m
// and table tb for ln s = lnS; NaN when lnS is NaN or outside the table
// (the channel's signals over the solver bracket).
func (r *Ratio) brightness(m Model, tb *lnTable, lnS float64) float64 {
	n := len(tb.key)
	switch {
	case !(lnS >= tb.key[0] && lnS <= tb.key[n-1]):
		return math.NaN()
	case lnS == tb.key[0]:
		return r.tLo
	case lnS == tb.key[n-1]:
		return r.tHi
	}
	u, uLo, uHi := tb.guess(lnS)
	return solveLn(m, lnS, uLo, uHi, u)
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
