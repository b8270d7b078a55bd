package convert

import (
	"fmt"
	"math"
	"time"
)

// HoldKind selects the peak or valley hold of a Processor.
type HoldKind int

// The hold kinds.
const (
	// HoldNone passes the filtered value through.
	HoldNone HoldKind = iota
	// HoldPeak outputs the highest filtered value, which may fall at the
	// configured decay rate and is reset after the configured time.
	HoldPeak
	// HoldValley outputs the lowest filtered value, which may rise at the
	// configured decay rate and is reset after the configured time.
	HoldValley
)

// String returns "none", "peak" or "valley".
func (k HoldKind) String() string {
	switch k {
	case HoldNone:
		return "none"
	case HoldPeak:
		return "peak"
	case HoldValley:
		return "valley"
	}
	return fmt.Sprintf("HoldKind(%d)", int(k))
}

// maxRingCapacity bounds the sample capacity of the rolling windows
// (Processor, Loss, NoiseEstimator): a larger figure is a configuration
// mistake, and the buffers are allocated in full when they are built.
const maxRingCapacity = 1 << 20

// processMaxAbs bounds the magnitude of a valid input to a Processor. A
// reading this large is corrupt (no temperature comes near it), and the
// bound keeps every sum and difference the Processor forms finite.
const processMaxAbs = 1e150

// ProcessConfig configures a Processor. Zero durations turn the stage off.
type ProcessConfig struct {
	// Average is the length of the moving-average window: the output of
	// the first stage is the arithmetic mean of the valid samples taken in
	// the last Average, (t − Average, t]. 0 turns the stage off.
	Average time.Duration
	// T90 is the response time of the first-order filter (the time its
	// step response takes to reach 90 % of the step), t90 = τ·ln 10 ≈
	// 2.303τ (IEC TS 62492-1 vocabulary). 0 turns the filter off.
	T90 time.Duration
	// Hold selects a peak or valley hold after the filter.
	Hold HoldKind
	// Decay is the rate, K/s, at which a held peak falls (a held valley
	// rises) toward the input. 0 holds without decay. Only with a hold.
	Decay float64
	// Reset is how long a held peak or valley is kept, counted from the
	// moment the input last set it; then it is reset to the input. 0 never
	// resets. Only with a hold.
	Reset time.Duration
	// HoldLastValid is how long, at most, the last valid output is
	// repeated while the input is invalid, counted from the last valid
	// input; afterwards the output is NaN. 0 turns the substitution off.
	HoldLastValid time.Duration
	// MaxSamples is the capacity of the averaging window's ring buffer,
	// ≥ 2 when Average is set: at least the number of samples the window
	// can hold (Average over the shortest sampling period), with a margin.
	// When the ring is full the oldest sample leaves the window early.
	MaxSamples int
}

// Processor is the per-head signal processing of a temperature: moving
// average, then first-order filter, then peak or valley hold, and the
// bounded substitution of the last valid value while the input is
// invalid. Time is an input: every Step carries its timestamp.
//
// A Processor keeps state; it is not safe for concurrent use. Build one
// with NewProcessor. Step does not allocate.
type Processor struct {
	cfg   ProcessConfig
	tau   float64 // filter time constant τ = T90/ln 10, s; 0 = off
	clock stepClock

	// Moving average: the window's samples and the sum of their
	// differences from shift (kept near the data to avoid cancellation),
	// rebuilt from the ring after every len(vals) additions.
	ring  windowRing
	vals  []float64
	shift float64
	sum   float64
	adds  int

	filtOK   bool
	filt     float64
	filtAt   int64   // ns since the clock's origin
	gain     float64 // 1 − exp(−Δt/τ) for Δt = gainStep
	gainStep int64   // the Δt, ns, gain was computed for (0 at first, whose gain is 0)

	holdOK  bool
	hold    float64
	holdSet int64 // when the input last set (or a reset set) the held value
	holdAt  int64 // when the held value was last updated (for the decay)

	lastOK bool
	last   float64
	lastAt int64
}

// NewProcessor returns a Processor for c. It returns an error when a
// duration is negative, Hold is not a known kind, Decay is negative or not
// finite, Decay or Reset is set without a hold, MaxSamples is negative or
// above 1048576, or Average is set with MaxSamples < 2.
func NewProcessor(c ProcessConfig) (*Processor, error) {
	switch {
	case c.Average < 0:
		return nil, fmt.Errorf("convert: process average %v: must be ≥ 0", c.Average)
	case c.T90 < 0:
		return nil, fmt.Errorf("convert: process t90 %v: must be ≥ 0", c.T90)
	case c.Reset < 0:
		return nil, fmt.Errorf("convert: process hold reset %v: must be ≥ 0", c.Reset)
	case c.HoldLastValid < 0:
		return nil, fmt.Errorf("convert: process hold-last-valid %v: must be ≥ 0", c.HoldLastValid)
	case c.Hold != HoldNone && c.Hold != HoldPeak && c.Hold != HoldValley:
		return nil, fmt.Errorf("convert: process hold kind %v: must be none, peak or valley", c.Hold)
	case !finite(c.Decay) || c.Decay < 0:
		return nil, fmt.Errorf("convert: process hold decay %g K/s: must be finite and ≥ 0", c.Decay)
	case c.Hold == HoldNone && c.Decay != 0:
		return nil, fmt.Errorf("convert: process hold decay %g K/s: set without a peak or valley hold", c.Decay)
	case c.Hold == HoldNone && c.Reset != 0:
		return nil, fmt.Errorf("convert: process hold reset %v: set without a peak or valley hold", c.Reset)
	case c.MaxSamples < 0 || c.MaxSamples > maxRingCapacity:
		return nil, fmt.Errorf("convert: process max samples %d: must be in [0, %d]", c.MaxSamples, maxRingCapacity)
	case c.Average > 0 && c.MaxSamples < 2:
		return nil, fmt.Errorf("convert: process max samples %d: an average over %v needs at least 2", c.MaxSamples, c.Average)
	}
	p := &Processor{cfg: c}
	if c.T90 > 0 {
		p.tau = c.T90.Seconds() / math.Ln10
	}
	if c.Average > 0 {
		p.ring = newWindowRing(c.MaxSamples)
		p.vals = make([]float64, c.MaxSamples)
	}
	return p, nil
}

// Config returns the configuration the Processor was built with.
func (p *Processor) Config() ProcessConfig { return p.cfg }

// Reset forgets all samples and held values, as if the Processor were
// new.
func (p *Processor) Reset() {
	p.clear()
	p.clock = stepClock{}
}

// clear forgets samples and held values but keeps the clock.
func (p *Processor) clear() {
	p.ring.clear()
	p.sum, p.shift, p.adds = 0, 0, 0
	p.filtOK, p.holdOK, p.lastOK = false, false, false
}

// Step processes the raw value at time t and returns the output and
// whether it is a held last-valid value.
//
// The input is valid when valid is true and raw is finite with |raw| <
// 1e150. A valid input passes, in order, through
//
//  1. the moving average: x̄ = (1/n)·Σ x_i over the n valid samples with
//     timestamps in (t − Average, t]; for a ramp of slope a sampled every
//     Δ with Average = mΔ it lags by a·(m − 1)·Δ/2;
//
//  2. the first-order filter with τ = t90/ln 10, exact for any sampling
//     when the input is held between samples:
//
//     y ← y + (1 − exp(−Δt/τ))·(x̄ − y),   Δt = t − t_prev,
//
//     started at y = x̄ by the first valid sample; a long gap lets y jump
//     most of the way to the new input;
//
//  3. the peak hold, h ← max(y, h − D·Δt), or the valley hold,
//     h ← min(y, h + D·Δt), with D = Decay (K/s) and Δt the time since
//     the hold was last updated; once the held value has not been set by
//     the input for Reset it is reset to y.
//
// and the output is returned with held = false. An invalid input leaves
// the stages unchanged; the output is then the last valid output, with
// held = true, while t is at most HoldLastValid after that output's time,
// and NaN (held = false) otherwise.
//
// Timestamps: a repeated timestamp is a valid sample (the average takes
// it in, the filter moves by 1 − exp(0) = 0 of the way, the decay by 0).
// A timestamp before the previous step's is a clock step: the Processor
// forgets everything, as after Reset, and starts again from this sample.
func (p *Processor) Step(t time.Time, raw float64, valid bool) (out float64, held bool) {
	now, restarted := p.clock.advance(t)
	if restarted {
		p.clear()
	}
	if !valid || !(raw > -processMaxAbs && raw < processMaxAbs) {
		if p.cfg.HoldLastValid > 0 && p.lastOK && now-p.lastAt <= int64(p.cfg.HoldLastValid) {
			return p.last, true
		}
		return math.NaN(), false
	}
	x := raw
	if p.cfg.Average > 0 {
		x = p.average(now, raw)
	}
	if p.tau > 0 {
		x = p.filter(now, x)
	}
	if p.cfg.Hold == HoldPeak || p.cfg.Hold == HoldValley {
		x = p.holdStep(now, x)
	}
	p.lastOK, p.last, p.lastAt = true, x, now
	return x, false
}

// average adds v at now to the window and returns the window's mean.
func (p *Processor) average(now int64, v float64) float64 {
	cut := now - int64(p.cfg.Average)
	for p.ring.n > 0 && p.ring.at[p.ring.head] <= cut {
		p.sum -= p.vals[p.ring.head] - p.shift
		p.ring.pop()
	}
	if p.ring.full() {
		p.sum -= p.vals[p.ring.head] - p.shift
		p.ring.pop()
	}
	if p.ring.n == 0 {
		p.shift, p.sum, p.adds = v, 0, 0
	}
	i := p.ring.push(now)
	p.vals[i] = v
	p.sum += v - p.shift
	p.adds++
	if p.adds >= len(p.vals) {
		// Rebuild the sum about the newest value, so that rounding from
		// the removals does not accumulate.
		p.shift, p.sum, p.adds = v, 0, 0
		for k := range p.ring.n {
			p.sum += p.vals[p.ring.index(k)] - v
		}
	}
	return p.shift + p.sum/float64(p.ring.n)
}

// filter advances the first-order filter to now with input x.
func (p *Processor) filter(now int64, x float64) float64 {
	if !p.filtOK {
		p.filtOK, p.filt, p.filtAt = true, x, now
		return x
	}
	// 1 − exp(−Δt/τ) is formed with math.Exp, not math.Expm1: its absolute
	// error stays below 1e-16, and only the absolute error of the step
	// reaches the output.
	// A steady poll period repeats Δt: keep its gain.
	if step := now - p.filtAt; step != p.gainStep {
		p.gainStep = step
		p.gain = 1 - math.Exp(-float64(step)*1e-9/p.tau)
	}
	p.filt += p.gain * (x - p.filt)
	p.filtAt = now
	return p.filt
}

// holdStep advances the peak or valley hold to now with input y.
func (p *Processor) holdStep(now int64, y float64) float64 {
	switch {
	case !p.holdOK:
		p.holdOK, p.hold, p.holdSet = true, y, now
	case p.cfg.Reset > 0 && now-p.holdSet >= int64(p.cfg.Reset):
		p.hold, p.holdSet = y, now
	default:
		fall := p.cfg.Decay * float64(now-p.holdAt) * 1e-9
		if p.cfg.Hold == HoldPeak {
			if h := p.hold - fall; y >= h {
				p.hold, p.holdSet = y, now
			} else {
				p.hold = h
			}
		} else {
			if h := p.hold + fall; y <= h {
				p.hold, p.holdSet = y, now
			} else {
				p.hold = h
			}
		}
	}
	p.holdAt = now
	return p.hold
}

// stepClock turns timestamps into nanoseconds since an origin (the first
// timestamp) and notices when time goes backwards.
type stepClock struct {
	started bool
	origin  time.Time
	now     int64
}

// advance returns t in ns since the origin. When t is before the previous
// timestamp it restarts the clock at t (now = 0) and returns restarted =
// true: the caller must forget the timestamps it holds. Durations beyond
// ±292 years saturate (time.Time.Sub), which then reads as repeated
// timestamps.
func (c *stepClock) advance(t time.Time) (now int64, restarted bool) {
	if !c.started {
		c.started, c.origin, c.now = true, t, 0
		return 0, false
	}
	d := int64(t.Sub(c.origin))
	if d < c.now {
		c.origin, c.now = t, 0
		return 0, true
	}
	c.now = d
	return d, false
}

// windowRing is a ring of sample timestamps (ns since a stepClock's
// origin), oldest at head; the owner keeps its values in parallel slices
// indexed like at.
type windowRing struct {
	at   []int64
	head int
	n    int
}

func newWindowRing(capacity int) windowRing { return windowRing{at: make([]int64, capacity)} }

func (r *windowRing) full() bool { return r.n == len(r.at) }

func (r *windowRing) clear() { r.head, r.n = 0, 0 }

// index returns the slot of the k-th oldest sample, 0 ≤ k < n.
func (r *windowRing) index(k int) int {
	i := r.head + k
	if i >= len(r.at) {
		i -= len(r.at)
	}
	return i
}

// newest returns the slot of the newest sample; n must be > 0.
func (r *windowRing) newest() int { return r.index(r.n - 1) }

// pop drops the oldest sample; n must be > 0.
func (r *windowRing) pop() {
	r.head++
	if r.head == len(r.at) {
		r.head = 0
	}
	r.n--
}

// push appends a sample at time t and returns its slot; the ring must not
// be full.
func (r *windowRing) push(t int64) int {
	i := r.index(r.n)
	r.at[i] = t
	r.n++
	return i
}
