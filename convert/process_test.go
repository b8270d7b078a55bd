package convert_test

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"glowgate/convert"
)

// procBase is the time origin of the processing tests.
var procBase = time.Date(2024, 3, 1, 12, 0, 0, 0, time.UTC)

// procAt returns procBase + s seconds (to the nanosecond).
func procAt(s float64) time.Time { return procBase.Add(time.Duration(math.Round(s * 1e9))) }

func mustProcessor(t testing.TB, c convert.ProcessConfig) *convert.Processor {
	t.Helper()
	p, err := convert.NewProcessor(c)
	if err != nil {
		t.Fatalf("NewProcessor(%+v): %v", c, err)
	}
	return p
}

func TestProcessorStepResponseT90(t *testing.T) {
	// Source: IEC TS 62492-1 vocabulary (response time t90: time to reach
	// 90 % of a step) and PHYSICS.md: a first-order filter of time
	// constant τ has t90 = τ·ln 10 = 2.303τ, since 1 − exp(−t90/τ) = 0.9.
	// The response after a step at t = 0 is 1 − exp(−t/τ) at any sampling.
	const t90 = 2 * time.Second
	tau := t90.Seconds() / math.Ln10
	for _, period := range []time.Duration{time.Millisecond, 10 * time.Millisecond, 100 * time.Millisecond, 500 * time.Millisecond} {
		p := mustProcessor(t, convert.ProcessConfig{T90: t90})
		p.Step(procBase, 1000, true) // settled at 1000 K before the step
		var at90 float64
		for k := 1; k <= int(5*time.Second/period); k++ {
			d := time.Duration(k) * period
			y, held := p.Step(procBase.Add(d), 1100, true)
			if held {
				t.Fatalf("period %v: valid input reported held", period)
			}
			want := 1000 + 100*(1-math.Exp(-d.Seconds()/tau))
			if math.Abs(y-want) > 1e-9 {
				t.Fatalf("period %v, t = %v: %.12g K, want %.12g K", period, d, y, want)
			}
			if d == t90 {
				at90 = y
			}
		}
		if math.Abs(at90-1090) > 1e-9 {
			t.Errorf("period %v: response at t90 = %.12g K, want 90 %% of the 100 K step, 1090 K", period, at90)
		}
	}
}

func TestProcessorFilterIrregularSampling(t *testing.T) {
	// Source: the exact solution of dy/dt = (x − y)/τ for a step input,
	// y = x − (x − y0)·exp(−Δt/τ); the filter must follow it at random
	// sample times (PHYSICS.md, t90 = 2.303τ for the time constant).
	const t90 = 1500 * time.Millisecond
	tau := t90.Seconds() / math.Ln10
	rng := rand.New(rand.NewPCG(1, 2))
	p := mustProcessor(t, convert.ProcessConfig{T90: t90})
	p.Step(procBase, 800, true)
	d := time.Duration(0)
	for range 400 {
		d += time.Duration(rng.Int64N(int64(300 * time.Millisecond)))
		y, _ := p.Step(procBase.Add(d), 900, true)
		want := 900 - 100*math.Exp(-d.Seconds()/tau)
		if math.Abs(y-want) > 1e-9 {
			t.Fatalf("t = %v: %.12g K, want %.12g K", d, y, want)
		}
	}
}

func TestProcessorAverageRamp(t *testing.T) {
	// Arithmetic: the mean of the m samples a·(t − jΔ), j = 0 … m−1, of a
	// ramp is a·(t − (m−1)Δ/2). Average = 1 s over Δ = 100 ms holds the
	// samples in (t − 1 s, t], m = 10, so the mean lags by 0.45 s. The run
	// is long enough for the ring (capacity 12) to wrap and the sums to be
	// rebuilt many times.
	p := mustProcessor(t, convert.ProcessConfig{Average: time.Second, MaxSamples: 12})
	const slope, start = 2.0, 1000.0 // K/s, K
	for k := 0; k <= 5000; k++ {
		s := 0.1 * float64(k)
		y, _ := p.Step(procBase.Add(time.Duration(k)*100*time.Millisecond), start+slope*s, true)
		m := min(k+1, 10)
		want := start + slope*(s-float64(m-1)*0.1/2)
		if math.Abs(y-want) > 1e-9 {
			t.Fatalf("t = %.1f s: mean %.12g K, want %.12g K", s, y, want)
		}
	}
}

func TestProcessorAverageIrregular(t *testing.T) {
	// The mean over (t − W, t] at random sample times, with invalid
	// samples left out, against a direct mean of the same samples.
	const w = 700 * time.Millisecond
	rng := rand.New(rand.NewPCG(3, 4))
	p := mustProcessor(t, convert.ProcessConfig{Average: w, MaxSamples: 64})
	type sample struct {
		at time.Duration
		v  float64
	}
	var hist []sample
	d := time.Duration(0)
	for range 3000 {
		d += time.Duration(rng.Int64N(int64(60 * time.Millisecond)))
		v := 1200 + 50*math.Sin(d.Seconds()) + rng.NormFloat64()
		valid := rng.IntN(10) != 0
		y, _ := p.Step(procBase.Add(d), v, valid)
		if !valid {
			continue
		}
		hist = append(hist, sample{d, v})
		var sum float64
		var n int
		for _, h := range hist {
			if h.at > d-w {
				sum += h.v
				n++
			}
		}
		if want := sum / float64(n); math.Abs(y-want) > 1e-9 {
			t.Fatalf("t = %v: mean %.12g K over %d samples, want %.12g K", d, y, n, want)
		}
	}
}

// procRun feeds p the value in(s) every 100 ms from 0 to end seconds and
// returns the outputs keyed by the step number k (t = k·100 ms).
func procRun(p *convert.Processor, end float64, in func(s float64) float64) map[int]float64 {
	out := map[int]float64{}
	for k := 0; float64(k)*0.1 <= end+1e-9; k++ {
		s := float64(k) * 0.1
		out[k], _ = p.Step(procAt(s), in(s), true)
	}
	return out
}

func TestProcessorPeakHoldDecay(t *testing.T) {
	// A 100 K spike for one sample at t = 1 s; decay 10 K/s: the held
	// peak falls linearly, 1100 − 10·(t − 1), until it meets the input at
	// t = 11 s, then follows it (arithmetic from the definition).
	p := mustProcessor(t, convert.ProcessConfig{Hold: convert.HoldPeak, Decay: 10})
	out := procRun(p, 15, func(s float64) float64 {
		if math.Abs(s-1) < 1e-9 {
			return 1100
		}
		return 1000
	})
	for _, c := range []struct {
		k    int
		want float64
	}{{0, 1000}, {9, 1000}, {10, 1100}, {11, 1099}, {30, 1080}, {60, 1050}, {109, 1001}, {110, 1000}, {111, 1000}, {150, 1000}} {
		if math.Abs(out[c.k]-c.want) > 1e-9 {
			t.Errorf("t = %.1f s: %.12g K, want %g K", float64(c.k)/10, out[c.k], c.want)
		}
	}
}

func TestProcessorPeakHoldReset(t *testing.T) {
	// Reset 5 s without decay: the spike at t = 1 s is held until 5 s
	// after it set the peak, then the hold takes the input, 1000 K. A
	// falling input is then held for 5 s at a time (steps down).
	p := mustProcessor(t, convert.ProcessConfig{Hold: convert.HoldPeak, Reset: 5 * time.Second})
	out := procRun(p, 20, func(s float64) float64 {
		switch {
		case math.Abs(s-1) < 1e-9:
			return 1100
		case s > 8:
			return 1000 - 10*(s-8) // falls at 10 K/s from t = 8 s
		}
		return 1000
	})
	for _, c := range []struct {
		k    int
		want float64
	}{
		{10, 1100}, {59, 1100}, {60, 1000}, // reset at 1 s + 5 s
		{80, 1000}, {109, 1000}, // the input, 1000 K, last set the peak at 8 s: reset due at 13 s
		{129, 1000}, {130, 950}, {179, 950}, {180, 900}, // resets at 13 s and 18 s
	} {
		if math.Abs(out[c.k]-c.want) > 1e-9 {
			t.Errorf("t = %.1f s: %.12g K, want %g K", float64(c.k)/10, out[c.k], c.want)
		}
	}
}

func TestProcessorValleyHold(t *testing.T) {
	// The mirror of the peak hold: a 100 K dip at t = 1 s, held valley
	// rising at 10 K/s, reset after 8 s.
	p := mustProcessor(t, convert.ProcessConfig{Hold: convert.HoldValley, Decay: 10, Reset: 8 * time.Second})
	out := procRun(p, 12, func(s float64) float64 {
		switch {
		case math.Abs(s-1) < 1e-9:
			return 900
		case math.Abs(s-8) < 1e-9:
			return 950
		}
		return 1000
	})
	for _, c := range []struct {
		k    int
		want float64
	}{
		{0, 1000}, {10, 900}, {30, 920}, {79, 969}, // rising from 900 at 10 K/s
		{80, 950},                         // the dip at 8 s is below the rising valley: set again
		{90, 960}, {110, 980}, {120, 990}, // no reset: the valley was set at 8 s, reset due at 16 s
	} {
		if math.Abs(out[c.k]-c.want) > 1e-9 {
			t.Errorf("t = %.1f s: %.12g K, want %g K", float64(c.k)/10, out[c.k], c.want)
		}
	}
}

func TestProcessorOrder(t *testing.T) {
	// Average → filter → peak hold: a one-sample spike of 90 K is spread
	// by the 3-sample average to 30 K for three samples, the filter
	// (τ = 1 s, step 0.1 s: α = 1 − e^−0.1) smooths that, and the peak
	// hold keeps the filter's maximum. Reference computed here stage by
	// stage from the definitions.
	p := mustProcessor(t, convert.ProcessConfig{
		Average: 300 * time.Millisecond, MaxSamples: 8,
		T90: time.Duration(math.Round(math.Ln10 * 1e9)), Hold: convert.HoldPeak,
	})
	alpha := -math.Expm1(-0.1)
	y, peak := 1000.0, 1000.0
	for k := 0; k <= 40; k++ {
		in := 1000.0
		if k == 10 {
			in = 1090
		}
		avg := 1000.0
		if k >= 10 && k <= 12 {
			avg = 1030
		}
		if k > 0 {
			y += alpha * (avg - y)
		}
		peak = math.Max(peak, y)
		got, _ := p.Step(procAt(float64(k)*0.1), in, true)
		if math.Abs(got-peak) > 1e-9 {
			t.Fatalf("step %d: %.12g K, want %.12g K", k, got, peak)
		}
	}
	if !(peak > 1000 && peak < 1030) {
		t.Fatalf("filtered spike peak %g K: expected between 1000 and 1030 K", peak)
	}
}

func TestProcessorHoldLastValid(t *testing.T) {
	// Definition: while the input is invalid the last valid output is
	// repeated, flagged held, for at most HoldLastValid (inclusive), then
	// NaN.
	p := mustProcessor(t, convert.ProcessConfig{T90: time.Second, HoldLastValid: 2 * time.Second})
	for k := 0; k <= 10; k++ {
		p.Step(procAt(float64(k)*0.1), 1234, true)
	}
	for _, c := range []struct {
		s     float64
		raw   float64
		valid bool
		want  float64
		held  bool
	}{
		{1.1, 999, false, 1234, true},
		{2.0, math.NaN(), true, 1234, true}, // NaN counts as invalid
		{2.5, math.Inf(1), true, 1234, true},
		{3.0, 1e200, true, 1234, true}, // beyond any temperature: invalid; 2 s after the last valid: still held
		{3.1, 0, false, math.NaN(), false},
		{3.5, 0, false, math.NaN(), false},
	} {
		got, held := p.Step(procAt(c.s), c.raw, c.valid)
		if held != c.held || !(got == c.want || math.IsNaN(got) && math.IsNaN(c.want)) {
			t.Errorf("t = %.1f s: (%g, %v), want (%g, %v)", c.s, got, held, c.want, c.held)
		}
	}
	// Valid again: the filter resumes from its state, 1234 K, after a
	// 3 s gap (α = 1 − exp(−3 s/τ), τ = 1 s/ln 10).
	got, held := p.Step(procAt(4), 1334, true)
	want := 1334 - 100*math.Exp(-3*math.Ln10)
	if held || math.Abs(got-want) > 1e-9 {
		t.Errorf("t = 4 s: (%g, %v), want (%g, false)", got, held, want)
	}
	// Without HoldLastValid an invalid input gives NaN at once.
	q := mustProcessor(t, convert.ProcessConfig{})
	q.Step(procAt(0), 1000, true)
	if got, held := q.Step(procAt(0.1), 1000, false); !math.IsNaN(got) || held {
		t.Errorf("no hold-last-valid: (%g, %v), want (NaN, false)", got, held)
	}
	// Nothing valid yet: NaN even with HoldLastValid.
	r := mustProcessor(t, convert.ProcessConfig{HoldLastValid: time.Second})
	if got, held := r.Step(procAt(0), 0, false); !math.IsNaN(got) || held {
		t.Errorf("no valid input yet: (%g, %v), want (NaN, false)", got, held)
	}
}

func TestProcessorTimeAnomalies(t *testing.T) {
	cfg := convert.ProcessConfig{
		Average: time.Second, MaxSamples: 16, T90: time.Second,
		Hold: convert.HoldPeak, Decay: 5, Reset: 3 * time.Second, HoldLastValid: time.Second,
	}
	p := mustProcessor(t, cfg)
	for k := 0; k <= 20; k++ {
		p.Step(procAt(float64(k)*0.1), 1000+float64(k), true)
	}
	// Repeated timestamp: the filter moves by 0 of the way and the peak
	// does not decay, so the output is unchanged.
	before, _ := p.Step(procAt(2.1), 1021, true)
	again, held := p.Step(procAt(2.1), 1500, true)
	if held || again != before {
		t.Errorf("repeated timestamp: (%g, %v), want (%g, false)", again, held, before)
	}
	// Time going backwards: a clock step; the Processor starts again from
	// this sample, as after Reset, so the output is the input.
	got, held := p.Step(procAt(1), 900, true)
	if held || got != 900 {
		t.Errorf("time backwards: (%g, %v), want (900, false)", got, held)
	}
	// Nothing from before the step is held: an invalid input right after
	// is held at 900 K, not at an older value.
	if got, held := p.Step(procAt(1.5), 0, false); !held || got != 900 {
		t.Errorf("after the clock step, invalid input: (%g, %v), want (900, true)", got, held)
	}
	// Reset forgets everything.
	p.Reset()
	if got, held := p.Step(procAt(1.6), 0, false); held || !math.IsNaN(got) {
		t.Errorf("after Reset, invalid input: (%g, %v), want (NaN, false)", got, held)
	}
	if got, _ := p.Step(procAt(0), 777, true); got != 777 {
		t.Errorf("after Reset: %g, want 777", got)
	}
}

func TestNewProcessorErrors(t *testing.T) {
	for _, c := range []struct {
		cfg  convert.ProcessConfig
		want string
	}{
		{convert.ProcessConfig{Average: -1}, "average"},
		{convert.ProcessConfig{T90: -time.Second}, "t90"},
		{convert.ProcessConfig{Hold: convert.HoldPeak, Reset: -1}, "reset"},
		{convert.ProcessConfig{HoldLastValid: -1}, "hold-last-valid"},
		{convert.ProcessConfig{Hold: 3}, "hold kind HoldKind(3)"},
		{convert.ProcessConfig{Hold: convert.HoldPeak, Decay: -1}, "decay -1"},
		{convert.ProcessConfig{Hold: convert.HoldPeak, Decay: math.NaN()}, "decay NaN"},
		{convert.ProcessConfig{Hold: convert.HoldValley, Decay: math.Inf(1)}, "decay +Inf"},
		{convert.ProcessConfig{Decay: 1}, "without a peak or valley hold"},
		{convert.ProcessConfig{Reset: time.Second}, "without a peak or valley hold"},
		{convert.ProcessConfig{MaxSamples: -1}, "max samples -1"},
		{convert.ProcessConfig{MaxSamples: 1 << 21}, "max samples 2097152"},
		{convert.ProcessConfig{Average: time.Second}, "needs at least 2"},
		{convert.ProcessConfig{Average: time.Second, MaxSamples: 1}, "needs at least 2"},
	} {
		_, err := convert.NewProcessor(c.cfg)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("NewProcessor(%+v) = %v, want an error containing %q", c.cfg, err, c.want)
		}
	}
	for _, c := range []convert.ProcessConfig{
		{},
		{Average: time.Second, MaxSamples: 2},
		{T90: time.Second, Hold: convert.HoldValley, Decay: 2, Reset: time.Minute, HoldLastValid: time.Second},
		{MaxSamples: 100}, // capacity without an average: unused
	} {
		if _, err := convert.NewProcessor(c); err != nil {
			t.Errorf("NewProcessor(%+v): %v", c, err)
		}
	}
	for k, want := range map[convert.HoldKind]string{convert.HoldNone: "none", convert.HoldPeak: "peak", convert.HoldValley: "valley", -1: "HoldKind(-1)"} {
		if got := k.String(); got != want {
			t.Errorf("HoldKind(%d).String() = %q, want %q", int(k), got, want)
		}
	}
}

// FuzzProcessorStep drives a fully configured Processor with arbitrary
// steps: it must never panic, every output must be finite or NaN, a held
// output must repeat the last valid output, and a valid output must lie
// within the range of the valid inputs since the last clock step (each
// stage forms means, convex combinations or extremes of its inputs).
func FuzzProcessorStep(f *testing.F) {
	f.Add(int64(0), int64(100e6), 1000.0, 1100.0, true, false, uint8(0))
	f.Add(int64(-5e9), int64(0), math.NaN(), math.Inf(1), true, true, uint8(1))
	f.Add(int64(math.MaxInt64), int64(math.MinInt64), 1e300, -1e300, false, true, uint8(2))
	f.Add(int64(1), int64(-1), 5e-324, math.Copysign(0, -1), true, true, uint8(3))
	f.Fuzz(func(t *testing.T, d1, d2 int64, a, b float64, va, vb bool, kind uint8) {
		cfg := convert.ProcessConfig{
			Average: 250 * time.Millisecond, MaxSamples: 4, T90: 700 * time.Millisecond,
			Hold: convert.HoldKind(kind % 3), HoldLastValid: 500 * time.Millisecond,
		}
		if cfg.Hold != convert.HoldNone {
			cfg.Decay, cfg.Reset = 3, 2*time.Second
		}
		p := mustProcessor(t, cfg)
		now := procBase
		lo, hi := math.Inf(1), math.Inf(-1)
		lastValid := math.NaN()
		for i := range 64 {
			d, v, ok := d1, a, va
			if i%3 == 1 {
				d, v, ok = d2, b, vb
			}
			if i%5 == 4 {
				d, v, ok = (d1>>3)+(d2>>3), (a+b)/2, va && vb
			}
			// Steps within ±1 day: far larger ones saturate time.Time.Sub
			// and read as repeated timestamps (see Processor.Step).
			next := now.Add(time.Duration(d % int64(24*time.Hour)))
			if next.Before(now) {
				lo, hi, lastValid = math.Inf(1), math.Inf(-1), math.NaN()
			}
			now = next
			out, held := p.Step(now, v, ok)
			if math.IsInf(out, 0) {
				t.Fatalf("step %d: output %g", i, out)
			}
			inputValid := ok && math.Abs(v) < 1e150
			switch {
			case held:
				if inputValid || out != lastValid {
					t.Fatalf("step %d: held output %g (input valid %v), last valid %g", i, out, inputValid, lastValid)
				}
			case inputValid:
				lo, hi = math.Min(lo, v), math.Max(hi, v)
				tol := 1e-9 * math.Max(math.Abs(lo), math.Abs(hi))
				if !(out >= lo-tol && out <= hi+tol) {
					t.Fatalf("step %d: output %g outside the valid inputs' range [%g, %g]", i, out, lo, hi)
				}
				lastValid = out
			default:
				if !math.IsNaN(out) {
					t.Fatalf("step %d: invalid input, not held, output %g", i, out)
				}
			}
		}
	})
}

// BenchmarkProcessorStep measures one Step with every stage on: a 1 s
// average over 20 ms samples (50 in the window), t90 = 2 s, peak hold with
// decay and reset, hold-last-valid. Target: ≤ ~100 ns/op, 0 allocs/op.
func BenchmarkProcessorStep(b *testing.B) {
	p := mustProcessor(b, convert.ProcessConfig{
		Average: time.Second, MaxSamples: 64, T90: 2 * time.Second,
		Hold: convert.HoldPeak, Decay: 5, Reset: 10 * time.Second, HoldLastValid: 2 * time.Second,
	})
	now := procBase
	b.ReportAllocs()
	var sink float64
	for i := 0; b.Loop(); i++ {
		now = now.Add(20 * time.Millisecond)
		out, _ := p.Step(now, 1000+float64(i%97), i%50 != 0)
		sink += out
	}
	_ = sink
}

func ExampleProcessor() {
	// A head's temperature through a first-order filter with t90 = 2.303 s
	// (τ = 1 s), with the last valid value held for up to 1 s while the
	// signal is invalid.
	p, err := convert.NewProcessor(convert.ProcessConfig{
		T90:           2303 * time.Millisecond,
		HoldLastValid: time.Second,
	})
	if err != nil {
		panic(err)
	}
	t0 := time.Date(2024, 3, 1, 12, 0, 0, 0, time.UTC)
	steps := []struct {
		s     float64 // seconds after t0
		raw   float64 // K
		valid bool
	}{
		{0, 1000, true}, {1, 1100, true}, {2.303, 1100, true}, {5, 1100, true},
		{5.5, 0, false}, {6, 0, false}, {6.5, 0, false},
	}
	for _, st := range steps {
		out, held := p.Step(t0.Add(time.Duration(st.s*1e9)), st.raw, st.valid)
		fmt.Printf("t = %5.3f s: %7.2f K held=%v\n", st.s, out, held)
	}
	// Output:
	// t = 0.000 s: 1000.00 K held=false
	// t = 1.000 s: 1063.21 K held=false
	// t = 2.303 s: 1090.00 K held=false
	// t = 5.000 s: 1099.33 K held=false
	// t = 5.500 s: 1099.33 K held=true
	// t = 6.000 s: 1099.33 K held=true
	// t = 6.500 s:     NaN K held=false
}
