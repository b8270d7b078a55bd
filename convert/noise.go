package convert

import (
	"fmt"
	"math"
	"time"
)

// NoiseEstimator estimates, over a rolling window, the relative noise of
// each channel's signal and the correlation of the noise between channels,
// from the successive differences of ln S.
//
// With S_k = S̄_k·(1 + e_k), e_k white noise of standard deviation σ and
// S̄ varying slowly, the difference d_k = ln S_k − ln S_{k−1} ≈ e_k −
// e_{k−1} + (slow drift) has variance 2σ², so
//
//	σ ≈ s(d)/√2
//
// with s(d) the sample standard deviation of the differences in the window
// (n − 1 in the denominator). Subtracting the mean of d removes a steady
// drift, so a slow trend of the signal (heating, a slow loss) hardly adds
// to σ, unlike the standard deviation of ln S itself. For two channels the
// correlation of their differences equals that of their noise, cov(d_i,
// d_j) = 2·cov(e_i, e_j): that is the r of UncertaintyInputs. Noise that
// is not white (flicker, a target that moves) is underrated at low
// frequencies; the window should be short against the process's own
// changes and long against the sampling period.
//
// The estimates describe the signals as measured, so they include the
// growth of relative noise as the signal fraction falls.
//
// A NoiseEstimator keeps state; it is not safe for concurrent use. Observe
// does not allocate; its cost is constant except that after every capacity
// additions it recomputes the running sums from the window, once.
type NoiseEstimator struct {
	ch     int
	window int64 // ns
	clock  stepClock

	prev   []float64 // ln S of the previous observation per channel; NaN when invalid
	cur    []float64 // scratch: this observation's differences
	prevAt int64
	seen   bool

	ring windowRing
	d    []float64 // differences, capacity × ch, NaN when not formed
	adds int

	// Per channel: count, Σd, Σd² over the window.
	cnt    []int
	s1, s2 []float64
	// Per pair i < j (pairIndex): count of samples where both differences
	// exist, Σd_i, Σd_j, Σd_i², Σd_j², Σd_i·d_j over those samples.
	pc                    []int
	pa, pb, paa, pbb, pab []float64
}

// NewNoiseEstimator returns an estimator for channels signals (1 …
// MaxChannels) over a rolling window of the given length, holding up to
// capacity samples (at least the number the window can hold; when full,
// the oldest leaves early). It returns an error when channels is out of
// range, capacity is below 3 or above 1048576, or window is not positive.
func NewNoiseEstimator(channels, capacity int, window time.Duration) (*NoiseEstimator, error) {
	switch {
	case channels < 1 || channels > MaxChannels:
		return nil, fmt.Errorf("convert: noise estimator channels %d: must be in [1, %d]", channels, MaxChannels)
	case capacity < 3 || capacity > maxRingCapacity:
		return nil, fmt.Errorf("convert: noise estimator capacity %d: must be in [3, %d]", capacity, maxRingCapacity)
	case window <= 0:
		return nil, fmt.Errorf("convert: noise estimator window %v: must be > 0", window)
	}
	np := channels * (channels - 1) / 2
	e := &NoiseEstimator{
		ch:     channels,
		window: int64(window),
		prev:   make([]float64, channels),
		cur:    make([]float64, channels),
		ring:   newWindowRing(capacity),
		d:      make([]float64, capacity*channels),
		cnt:    make([]int, channels),
		s1:     make([]float64, channels),
		s2:     make([]float64, channels),
		pc:     make([]int, np),
		pa:     make([]float64, np),
		pb:     make([]float64, np),
		paa:    make([]float64, np),
		pbb:    make([]float64, np),
		pab:    make([]float64, np),
	}
	e.Reset()
	return e, nil
}

// Channels returns the number of channels.
func (e *NoiseEstimator) Channels() int { return e.ch }

// Reset empties the window and forgets the previous observation.
func (e *NoiseEstimator) Reset() {
	e.clock = stepClock{}
	e.clearWindow()
}

func (e *NoiseEstimator) clearWindow() {
	e.ring.clear()
	e.seen = false
	for i := range e.prev {
		e.prev[i] = math.NaN()
	}
	e.zeroSums()
	e.adds = 0
}

func (e *NoiseEstimator) zeroSums() {
	clear(e.cnt)
	clear(e.s1)
	clear(e.s2)
	clear(e.pc)
	clear(e.pa)
	clear(e.pb)
	clear(e.paa)
	clear(e.pbb)
	clear(e.pab)
}

// pairIndex returns the slot of the pair i < j.
func (e *NoiseEstimator) pairIndex(i, j int) int { return i*(2*e.ch-i-1)/2 + j - i - 1 }

// Observe takes the channels' signals at time t. signals[i] is channel i;
// a signal that is missing (len(signals) < channels), zero, negative, NaN
// or infinite is invalid, and values beyond the channel count are ignored.
//
// A difference d_i = ln S_i(t) − ln S_i(t_prev) is formed when channel i
// was valid in this observation and in the previous one, and the previous
// one is less than the window old. Differences leave the window when they
// are the window or more older than t.
//
// A repeated timestamp is an observation like any other. A timestamp
// before the previous one is a clock step: the window is emptied and this
// observation becomes the first.
func (e *NoiseEstimator) Observe(t time.Time, signals []float64) {
	var ln [MaxChannels]float64
	for i := range e.ch {
		ln[i] = math.NaN()
		if i < len(signals) {
			if s := signals[i]; s > 0 && !math.IsInf(s, 1) {
				ln[i] = math.Log(s)
			}
		}
	}
	e.observeLn(t, ln[:e.ch])
}

// observeLn is Observe given ln S per channel, NaN for an invalid signal:
// a Chain has the logarithms from its conversion.
func (e *NoiseEstimator) observeLn(t time.Time, lnS []float64) {
	now, restarted := e.clock.advance(t)
	if restarted {
		e.clearWindow()
	}
	cut := now - e.window
	for e.ring.n > 0 && e.ring.at[e.ring.head] <= cut {
		e.update(e.ring.head, -1)
		e.ring.pop()
	}
	fresh := e.seen && e.prevAt > cut
	got := false
	for i := range e.ch {
		ln := math.NaN()
		if i < len(lnS) {
			ln = lnS[i]
		}
		e.cur[i] = math.NaN()
		if fresh {
			e.cur[i] = ln - e.prev[i] // NaN unless both are valid
			got = got || !math.IsNaN(e.cur[i])
		}
		e.prev[i] = ln
	}
	e.seen, e.prevAt = true, now
	if !got {
		return
	}
	if e.ring.full() {
		e.update(e.ring.head, -1)
		e.ring.pop()
	}
	k := e.ring.push(now)
	copy(e.d[k*e.ch:(k+1)*e.ch], e.cur)
	if e.adds++; e.adds >= len(e.ring.at) {
		e.rebuild()
		return
	}
	e.update(k, 1)
}

// update adds (sign = 1) or removes (sign = −1) the differences in ring
// slot k to or from the running sums.
func (e *NoiseEstimator) update(k int, sign float64) {
	d := e.d[k*e.ch : (k+1)*e.ch]
	n := int(sign)
	for i, a := range d {
		if math.IsNaN(a) {
			continue
		}
		e.cnt[i] += n
		e.s1[i] += sign * a
		e.s2[i] += sign * a * a
		for j := i + 1; j < e.ch; j++ {
			b := d[j]
			if math.IsNaN(b) {
				continue
			}
			p := e.pairIndex(i, j)
			e.pc[p] += n
			e.pa[p] += sign * a
			e.pb[p] += sign * b
			e.paa[p] += sign * a * a
			e.pbb[p] += sign * b * b
			e.pab[p] += sign * a * b
		}
	}
}

// rebuild recomputes the running sums from the window.
func (e *NoiseEstimator) rebuild() {
	e.zeroSums()
	e.adds = 0
	for k := range e.ring.n {
		e.update(e.ring.index(k), 1)
	}
}

// Relative returns the relative standard noise σ_i of channel i's signal
// (dimensionless, e.g. 0.001 for 0.1 %), s(d_i)/√2, and ok = true when the
// window holds at least two differences for the channel; otherwise NaN and
// false (also for i out of range).
func (e *NoiseEstimator) Relative(i int) (float64, bool) {
	if i < 0 || i >= e.ch || e.cnt[i] < 2 {
		return math.NaN(), false
	}
	n := float64(e.cnt[i])
	v := max(e.s2[i]-e.s1[i]*e.s1[i]/n, 0) / (n - 1)
	return math.Sqrt(v / 2), true
}

// Correlation returns the correlation coefficient r of the noise of
// channels i and j (Pearson's r of their differences over the samples
// where both exist, clamped to [−1, 1]), and ok = true when there are at
// least three such samples and both vary; otherwise NaN and false. For
// i = j it returns 1, with ok = true when the channel has three
// differences.
func (e *NoiseEstimator) Correlation(i, j int) (float64, bool) {
	if i < 0 || j < 0 || i >= e.ch || j >= e.ch {
		return math.NaN(), false
	}
	if i == j {
		if e.cnt[i] < 3 {
			return math.NaN(), false
		}
		return 1, true
	}
	if i > j {
		i, j = j, i
	}
	p := e.pairIndex(i, j)
	if e.pc[p] < 3 {
		return math.NaN(), false
	}
	n := float64(e.pc[p])
	saa := e.paa[p] - e.pa[p]*e.pa[p]/n
	sbb := e.pbb[p] - e.pb[p]*e.pb[p]/n
	sab := e.pab[p] - e.pa[p]*e.pb[p]/n
	if !(saa > 0) || !(sbb > 0) {
		return math.NaN(), false
	}
	return max(-1, min(1, sab/math.Sqrt(saa*sbb))), true
}
