package convert

import (
	"fmt"
	"math"
	"time"

	"gonum.org/v1/gonum/stat/distuv"
)

// LossConfig configures a Loss detector.
type LossConfig struct {
	// Window is the length of the rolling window, e.g. 10 s.
	Window time.Duration
	// MaxSamples is the capacity of the window's ring buffer: at least the
	// number of samples the window can hold, with a margin. When the ring
	// is full the oldest sample leaves the window early.
	MaxSamples int
	// MinSamples is the fewest samples in the window for a verdict; 0
	// means 8. At least 3 (the regression needs n − 2 ≥ 1 degrees of
	// freedom).
	MinSamples int
	// Drop is the relative fall of the mean signal fraction across the
	// window that counts as a loss, in (0, 1), e.g. 0.3.
	Drop float64
	// Significance is the p-value below which the movement of the ratio
	// temperature with ln f (its trend across the window, see Loss)
	// counts as real, in (0, 1), e.g. 0.01.
	Significance float64
	// Steady is the change of the ratio temperature across the window,
	// K, below which it counts as steady (|ΔT| = |β·Δln f|, see Loss).
	// ≥ 0.
	Steady float64
	// Reflection is the signal fraction above which ReflectionSuspected
	// is raised, e.g. 1.2; 0 turns the check off, otherwise > 1.
	Reflection float64
	// Critical, if not nil, is the table of critical values to compare
	// with, shared with other detectors: its significance must be
	// Significance and it must reach MaxSamples − 2 degrees of freedom.
	// Nil builds one (milliseconds).
	Critical *CriticalValues
}

// lossDefaultMinSamples is MinSamples when the configuration leaves it 0.
const lossDefaultMinSamples = 8

// lossMaxTemperature bounds the temperatures a Loss takes in, K: a larger
// one is corrupt and its square would overflow the window's sums.
const lossMaxTemperature = 1e100

// lossRoundoff is the fraction of an uncentred sum of squares below which
// its centred counterpart is taken for rounding error (about 500 ulp).
const lossRoundoff = 1e-13

// lossMinWeight is the smallest weight of a temperature, e⁻⁴⁰ (a
// fraction of 2e-9).
const lossMinWeight = 4.248354255291589e-18

// lossMinChange is the smallest change of the mean ln f across the window
// for which LossFit.Slope = ΔT/Δ is given.
const lossMinChange = 1e-12

// Loss tells a neutral loss in the sight path (Obstructed) from a
// spectrally selective one (SelectiveLoss) by how the ratio temperature
// behaves while the signal fractions change, over a rolling window.
//
// A grey loss (dirty window, grey smoke, partial fill of the field of view)
// scales every channel's signal by the same factor: the ratio, and so the
// ratio temperature T, is unchanged while the signal fractions f_i =
// S_i/S_i,bb(T) fall. A selective loss (steam, fine dust) or reflected
// radiation changes the ratio itself, so T moves together with ln f
// (PHYSICS.md). A real change of the target's temperature leaves f
// unchanged, since f is taken against the blackbody at the ratio
// temperature.
//
// Method. Each valid observation enters the window as
//
//	x = (1/m)·Σ ln f_i    (m channels),    y = T
//
// The mean of ln f (the log of the geometric mean fraction) loses nothing
// by combining channels: for the two channels of a ratio, f1/f2 = k by
// construction (S1/S2 = k·S1,bb(T)/S2,bb(T)), so ln f1 and ln f2 move in
// step and either alone carries the same information, while with three
// or more channels the mean averages their noise.
//
// The slope of T on x cannot be fitted directly: f is computed with the
// measured T, so the noise of T enters x as δx = −(∂ln S_bb/∂T)·δT (errors
// in variables), and during a loss, when the noise of T grows as 1/f, a
// regression of T on x finds the slope −1/(∂ln S_bb/∂T) ≈ −λT²/c2 (about
// −120 K per unit ln f at 1 µm and 1300 K) where there is none. Time
// serves as the instrument instead: the loss moves x in time, the noise
// does not.
// Over the n samples in the window Loss fits, from running sums,
//
//   - the trend of x in time by ordinary least squares, x ≈ a + c·t,
//     giving the change of the mean fraction across the window
//     Δ = c·(t_newest − t_oldest) (a relative change of exp(Δ) − 1);
//
//   - the trend of T in time by weighted least squares, T ≈ α + b·t,
//     giving the change of T across the window ΔT = b·(t_newest −
//     t_oldest), with standard error and t statistic
//
//     se(b) = √(Σg·r²/((n − 2)·Σg(t − t̄)²)),   t = b/se(b)
//
//     (r the residuals, t̄ the weighted mean time). The weights follow
//     1/σ_T² ∝ f̄², since the noise of T grows as 1/f (PHYSICS.md), with
//     f̄² = exp(2x) smoothed over the earlier samples: g is the value of a
//     first-order lag of f̄² (clamped to [e⁻⁴⁰, 1]) with time constant
//     Window/10, stepped by backward Euler (a ← a + Δt/(τ + Δt)·(f̄² − a))
//     after the weight is taken. A weight from the sample's own f would
//     share its noise and bias the weighted mean of T.
//
// The slope of T on ln f is then the instrumental-variable estimate
// β = ΔT/Δ (K per unit ln f), and testing β = 0 is testing b = 0 (the
// Anderson–Rubin test for one instrument; Anderson & Rubin, Ann. Math.
// Stat. 20, 46, 1949).
//
// Decision rule, applied when the window holds at least MinSamples:
//
//	changed     = |Δ| ≥ −ln(1 − Drop)
//	significant = |t| > t_{1−p/2, n−2}   (two-sided p-value below p = Significance)
//	moves       = significant and |ΔT| = |β·Δ| ≥ Steady
//	SelectiveLoss when changed and moves;
//	Obstructed    when Δ ≤ ln(1 − Drop) and not moves.
//
// The critical values t_{1−p/2, ν} of Student's t distribution are
// tabulated by NewLoss (gonum distuv for ν ≤ 256, the Cornish–Fisher
// expansion of Abramowitz & Stegun 26.7.5 above), so Observe compares |t|
// with a table entry instead of evaluating the distribution.
//
// The verdicts concern the recent window: once the loss has left the
// window (the fractions are steady again, however low) they clear, and the
// LowSignal flag of the conversion speaks for the level itself. A rising
// fraction with a steady temperature (a window cleaned, a target that
// fills the view again) raises nothing. A real change of the process
// temperature that coincides with a neutral loss reads as SelectiveLoss.
// While a neutral loss is in the window, SelectiveLoss comes up by chance
// on at most about a fraction p of the samples (the 90 % loss of
// TestLossNeutralIsObstructed, run with 200 noise realisations, gives
// 0.3 % to 0.9 % at p = 0.01 for temperature noise of 0.5 to 2 K at full
// signal), more when the noise is far from white or from the 1/f law.
//
// ReflectionSuspected is a per-sample check: some f_i > Reflection.
//
// A Loss keeps state; it is not safe for concurrent use. Observe does not
// allocate; its cost is constant except that after every MaxSamples
// additions it recomputes the running sums from the window (to keep
// rounding from accumulating), which costs O(MaxSamples) once.
type Loss struct {
	cfg    LossConfig
	dropLn float64         // −ln(1 − Drop) > 0
	crit   *CriticalValues // t_{1−p/2, ν}, ν = 1 … MaxSamples − 2
	tauAvg float64         // time constant of the lag of f̄², s
	clock  stepClock

	ring windowRing
	xs   []float64 // mean ln f
	ys   []float64 // T, K
	gs   []float64 // weight of T

	// First-order lag of the earlier samples' f̄².
	avgOK bool
	avg   float64
	avgAt int64

	// Running sums over the window about the shift (t0, x0, y0).
	t0     int64
	x0, y0 float64
	sums   lossSums
	adds   int
}

// lossSums are running sums over the window of u = (at − t0)·1e-9 s,
// x − x0 and y − y0: unweighted ones for the trend of x in time, weighted
// by g for the trend of y in time.
type lossSums struct {
	n, u, x, uu, ux          float64
	g, gu, gy, guu, guy, gyy float64
}

// add adds (sign = 1) or removes (sign = −1) one sample.
func (s *lossSums) add(sign, u, x, y, g float64) {
	s.n += sign
	s.u += sign * u
	s.x += sign * x
	s.uu += sign * u * u
	s.ux += sign * u * x
	g *= sign
	s.g += g
	s.gu += g * u
	s.gy += g * y
	s.guu += g * u * u
	s.guy += g * u * y
	s.gyy += g * y * y
}

// LossFit is the state of a Loss detector's window: the statistics its
// decision rests on (see Loss).
type LossFit struct {
	N          int           // samples in the window
	Span       time.Duration // from the oldest to the newest sample
	Change     float64       // Δ: fitted change of the mean ln f across the window
	TempChange float64       // ΔT: fitted change of T across the window, K; NaN when not defined
	Slope      float64       // β = ΔT/Δ: slope of T on the mean ln f, K; NaN when |Δ| < 1e-12
	TStat      float64       // t statistic of the trend of T; NaN when not defined
	Critical   float64       // t_{1−p/2, N−2}, p = Significance; NaN when N < 3
	P          float64       // two-sided p-value of the trend of T (Fit only); NaN when not defined
	Flags      Flags         // the verdict: Obstructed, SelectiveLoss or none
}

// NewLoss returns a Loss detector for c. It returns an error when Window is
// not positive, MinSamples (after the default) is below 3, MaxSamples is
// below MinSamples or above 1048576, Drop or Significance is not in (0, 1),
// Steady is negative or not finite, or Reflection is neither 0 nor a
// finite number > 1.
func NewLoss(c LossConfig) (*Loss, error) {
	if c.MinSamples == 0 {
		c.MinSamples = lossDefaultMinSamples
	}
	switch {
	case c.Window <= 0:
		return nil, fmt.Errorf("convert: loss window %v: must be > 0", c.Window)
	case c.MinSamples < 3:
		return nil, fmt.Errorf("convert: loss min samples %d: must be ≥ 3", c.MinSamples)
	case c.MaxSamples < c.MinSamples || c.MaxSamples > maxRingCapacity:
		return nil, fmt.Errorf("convert: loss max samples %d: must be in [min samples %d, %d]", c.MaxSamples, c.MinSamples, maxRingCapacity)
	case !(c.Drop > 0 && c.Drop < 1):
		return nil, fmt.Errorf("convert: loss drop %g: must be in (0, 1)", c.Drop)
	case !(c.Significance > 0 && c.Significance < 1):
		return nil, fmt.Errorf("convert: loss significance %g: must be in (0, 1)", c.Significance)
	case !finite(c.Steady) || c.Steady < 0:
		return nil, fmt.Errorf("convert: loss steady %g K: must be finite and ≥ 0", c.Steady)
	case c.Reflection != 0 && !(finite(c.Reflection) && c.Reflection > 1):
		return nil, fmt.Errorf("convert: loss reflection %g: must be 0 (off) or finite and > 1", c.Reflection)
	case c.Critical != nil && c.Critical.Significance() != c.Significance:
		return nil, fmt.Errorf("convert: loss critical values for significance %g, not %g", c.Critical.Significance(), c.Significance)
	case c.Critical != nil && c.Critical.MaxDF() < c.MaxSamples-2:
		return nil, fmt.Errorf("convert: loss critical values up to %d degrees of freedom, %d needed", c.Critical.MaxDF(), c.MaxSamples-2)
	}
	crit := c.Critical
	if crit == nil {
		var err error
		if crit, err = NewCriticalValues(c.Significance, c.MaxSamples-2); err != nil {
			return nil, err
		}
	}
	l := &Loss{
		cfg:    c,
		dropLn: -math.Log1p(-c.Drop),
		crit:   crit,
		ring:   newWindowRing(c.MaxSamples),
		xs:     make([]float64, c.MaxSamples),
		ys:     make([]float64, c.MaxSamples),
		gs:     make([]float64, c.MaxSamples),
		tauAvg: c.Window.Seconds() / 10,
	}
	return l, nil
}

// studentTCritical returns the quantile of Student's t distribution with
// nu degrees of freedom at the probability where the standard normal
// quantile is z, by the Cornish–Fisher expansion (Abramowitz & Stegun
// 26.7.5, from memory; the tests check it against gonum distuv):
//
//	t ≈ z + g1/ν + g2/ν² + g3/ν³ + g4/ν⁴
//	g1 = (z³ + z)/4
//	g2 = (5z⁵ + 16z³ + 3z)/96
//	g3 = (3z⁷ + 19z⁵ + 17z³ − 15z)/384
//	g4 = (79z⁹ + 776z⁷ + 1482z⁵ − 1920z³ − 945z)/92160
//
// The tests find it within 1e-7 (relative) of gonum's quantile for
// ν = 257 … 598 and p = 0.05 … 1e-6.
func studentTCritical(z, nu float64) float64 {
	z2 := z * z
	g1 := (z2 + 1) * z / 4
	g2 := ((5*z2+16)*z2 + 3) * z / 96
	g3 := (((3*z2+19)*z2+17)*z2 - 15) * z / 384
	g4 := ((((79*z2+776)*z2+1482)*z2-1920)*z2 - 945) * z / 92160
	return z + (g1+(g2+(g3+g4/nu)/nu)/nu)/nu
}

// Config returns the configuration in use (MinSamples with its default).
func (l *Loss) Config() LossConfig { return l.cfg }

// Reset empties the window.
func (l *Loss) Reset() {
	l.clear()
	l.clock = stepClock{}
}

func (l *Loss) clear() {
	l.ring.clear()
	l.avgOK = false
}

// Observe takes the ratio temperature (K) at time t and the channels'
// signal fractions f_i and returns the verdict on the window: a subset of
// Obstructed | SelectiveLoss | ReflectionSuspected (see Loss for the
// method and decision rule).
//
// The observation enters the window when the temperature is finite and in
// (0, 1e100) K and there is at least one fraction, all finite and > 0;
// otherwise it is left out, and the verdict is that of the window as it
// stands. ReflectionSuspected comes from this observation alone, whatever
// the window holds. Samples leave the window when they are Window or more
// older than t. With fewer than MinSamples in the window there is no
// Obstructed or SelectiveLoss verdict.
//
// A repeated timestamp is a valid sample. A timestamp before the previous
// one is a clock step: the window is emptied and starts again from this
// observation.
func (l *Loss) Observe(t time.Time, temperature float64, fractions []float64) Flags {
	now, restarted := l.clock.advance(t)
	if restarted {
		l.clear()
	}
	var flags Flags
	m := len(fractions)
	ok := m > 0 && temperature > 0 && temperature < lossMaxTemperature
	prod := 1.0
	for _, f := range fractions {
		if l.cfg.Reflection > 0 && f > l.cfg.Reflection {
			flags |= ReflectionSuspected
		}
		if !(f > 0) || math.IsInf(f, 1) {
			ok = false
		}
		prod *= f
	}
	cut := now - int64(l.cfg.Window)
	for l.ring.n > 0 && l.ring.at[l.ring.head] <= cut {
		l.update(l.ring.head, -1)
		l.ring.pop()
	}
	if ok {
		// x = (1/m)·ln Π f_i and f̄² = (Π f_i)^(2/m), from one logarithm
		// unless the product leaves the normal range.
		var x, f2 float64
		if prod >= 0x1p-1022 && prod <= math.MaxFloat64 {
			x = math.Log(prod) / float64(m)
		} else {
			for _, f := range fractions {
				x += math.Log(f)
			}
			x /= float64(m)
		}
		switch m {
		case 1:
			f2 = prod * prod
		case 2:
			f2 = prod
		default:
			f2 = math.Exp(2 * x)
		}
		l.add(now, x, temperature, f2)
	}
	return flags | l.fit(false).Flags
}

// update adds (sign = 1) or removes (sign = −1) the sample in slot i to
// or from the running sums.
func (l *Loss) update(i int, sign float64) {
	u := float64(l.ring.at[i]-l.t0) * 1e-9
	l.sums.add(sign, u, l.xs[i]-l.x0, l.ys[i]-l.y0, l.gs[i])
}

// add puts the sample (now, x, y) with f̄² = f2 into the window and the
// running sums.
func (l *Loss) add(now int64, x, y, f2 float64) {
	if l.ring.full() {
		l.update(l.ring.head, -1)
		l.ring.pop()
	}
	// The weight comes from the lag of the earlier samples; then the lag
	// takes in this one.
	f2 = max(lossMinWeight, min(f2, 1))
	if !l.avgOK {
		l.avgOK, l.avg, l.avgAt = true, f2, now
	}
	g := l.avg
	dt := float64(now-l.avgAt) * 1e-9
	l.avg += dt / (l.tauAvg + dt) * (f2 - l.avg)
	l.avgAt = now
	i := l.ring.push(now)
	l.xs[i], l.ys[i], l.gs[i] = x, y, g
	if l.ring.n == 1 || l.adds+1 >= len(l.xs) {
		l.rebuild()
		return
	}
	l.adds++
	l.update(i, 1)
}

// rebuild recomputes the running sums from the window about its newest
// sample.
func (l *Loss) rebuild() {
	j := l.ring.newest()
	l.t0, l.x0, l.y0 = l.ring.at[j], l.xs[j], l.ys[j]
	l.sums = lossSums{}
	l.adds = 0
	for k := range l.ring.n {
		l.update(l.ring.index(k), 1)
	}
}

// fit returns the window's verdict and, with full, all its statistics
// (but the p-value); without full it skips what the verdict does not need.
// Both decide alike: |t| > t_crit is evaluated as b²·(n − 2)·Suu >
// t_crit²·RSS, without the square root.
func (l *Loss) fit(full bool) LossFit {
	nan := math.NaN()
	s := LossFit{N: l.ring.n, TempChange: nan, Slope: nan, TStat: nan, Critical: nan, P: nan}
	if s.N == 0 {
		return s
	}
	s.Span = time.Duration(l.ring.at[l.ring.newest()] - l.ring.at[l.ring.head])
	if s.N < 3 || s.Span <= 0 {
		return s
	}
	m := &l.sums
	n := float64(s.N)
	span := s.Span.Seconds()
	s.Critical = l.crit.At(s.N - 2)
	// Centred sums of squares and products; a centred sum below
	// lossRoundoff of its uncentred (shifted) sum is rounding, not
	// variation.
	un := m.u / n
	if uu := m.uu - m.u*un; uu > lossRoundoff*m.uu {
		s.Change = (m.ux - m.x*un) / uu * span
	}
	gate := s.N >= l.cfg.MinSamples && math.Abs(s.Change) >= l.dropLn
	if !gate && !full {
		return s
	}
	significant := false
	if m.g > 0 {
		ug, yg := m.gu/m.g, m.gy/m.g
		uu := m.guu - m.gu*ug
		uy := m.guy - m.gy*ug
		yy := m.gyy - m.gy*yg
		if uu > lossRoundoff*m.guu {
			b := uy / uu
			rss := max(yy-b*uy, 0)
			s.TempChange = b * span
			significant = b*b*(n-2)*uu > s.Critical*s.Critical*rss
			if full {
				s.TStat = b / math.Sqrt(rss/((n-2)*uu))
				if math.Abs(s.Change) >= lossMinChange {
					s.Slope = s.TempChange / s.Change
				}
			}
		}
	}
	if !gate {
		return s
	}
	switch {
	case significant && math.Abs(s.TempChange) >= l.cfg.Steady:
		s.Flags = SelectiveLoss
	case s.Change <= -l.dropLn:
		s.Flags = Obstructed
	}
	return s
}

// Fit returns the statistics of the window as it stands and the verdict
// Observe would give on it (without ReflectionSuspected), with the
// two-sided p-value of the trend of T, P = 2·(1 − F_ν(|t|)), ν = N − 2, from
// gonum's Student's t distribution. It is for diagnostics; unlike Observe
// it is not constant-time cheap.
func (l *Loss) Fit() LossFit {
	s := l.fit(true)
	if s.N >= 3 && !math.IsNaN(s.TStat) {
		st := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(s.N - 2)}
		s.P = 2 * st.Survival(math.Abs(s.TStat))
	}
	return s
}
