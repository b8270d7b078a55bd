package convert_test

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"

	"glowgate/convert"
)

func mustNoise(t testing.TB, channels, capacity int, window time.Duration) *convert.NoiseEstimator {
	t.Helper()
	e, err := convert.NewNoiseEstimator(channels, capacity, window)
	if err != nil {
		t.Fatalf("NewNoiseEstimator(%d, %d, %v): %v", channels, capacity, window, err)
	}
	return e
}

func TestNoiseEstimatorRecoversNoise(t *testing.T) {
	// Two channels with white relative noise σ1 = 0.2 %, σ2 = 0.1 %,
	// correlated with r = 0.6 (e2 = σ2·(r·z1 + √(1 − r²)·z2)), on signals
	// that rise by 2 %/s (a steady heating): the estimator must find σ
	// and r within 10 % and 0.06 from 1000 samples (the sample standard
	// deviation of 1000 differences has a relative standard error near
	// 3 %; the sample r of 1000 pairs about 0.02). The trend alone would
	// make the standard deviation of ln S itself some 60 times σ1.
	const s1, s2, r = 0.002, 0.001, 0.6
	e := mustNoise(t, 2, 1100, 100*time.Second)
	rng := rand.New(rand.NewPCG(21, 22))
	var lnS []float64
	for k := range 2000 {
		s := float64(k) * 0.1
		level := 3.5e4 * math.Exp(0.02*s)
		z1, z2 := rng.NormFloat64(), rng.NormFloat64()
		sig := []float64{level * (1 + s1*z1), 0.8 * level * (1 + s2*(r*z1+math.Sqrt(1-r*r)*z2))}
		e.Observe(procAt(s), sig)
		if k >= 1000 {
			lnS = append(lnS, math.Log(sig[0]))
		}
	}
	for i, want := range []float64{s1, s2} {
		got, ok := e.Relative(i)
		if !ok || math.Abs(got/want-1) > 0.1 {
			t.Errorf("channel %d: relative noise (%g, %v), want %g within 10 %%", i, got, ok, want)
		}
	}
	if got, ok := e.Correlation(0, 1); !ok || math.Abs(got-r) > 0.06 {
		t.Errorf("correlation (%g, %v), want %g within 0.06", got, ok, r)
	}
	if got, ok := e.Correlation(1, 0); !ok || math.Abs(got-r) > 0.06 {
		t.Errorf("correlation (1, 0): (%g, %v), want %g within 0.06", got, ok, r)
	}
	if sd := stat.StdDev(lnS, nil); sd < 30*s1 {
		t.Errorf("std of ln S over the window %g: the trend should dwarf the noise", sd)
	}
}

func TestNoiseEstimatorTrendOnly(t *testing.T) {
	// A noiseless exponential ramp has constant differences of ln S: no
	// noise, to rounding. Source: the definition σ = s(Δ ln S)/√2.
	e := mustNoise(t, 1, 64, 5*time.Second)
	for k := range 300 {
		e.Observe(procAt(float64(k)*0.1), []float64{1e3 * math.Exp(0.05*float64(k))})
	}
	if got, ok := e.Relative(0); !ok || got > 1e-12 {
		t.Errorf("relative noise of a pure ramp (%g, %v), want ≈ 0", got, ok)
	}
}

func TestNoiseEstimatorMatchesDirect(t *testing.T) {
	// The running sums against a direct computation (gonum stat.StdDev and
	// stat.Correlation) on the differences in the window, following the
	// documented rules: a difference needs the channel valid in this and
	// the previous observation, the previous one less than the window
	// old; an observation enters the ring when it has one difference;
	// the ring keeps the newest `capacity`. Irregular timestamps with
	// gaps, invalid and missing signals, many ring passes and rebuilds.
	const ch, capacity = 3, 50
	const window = 4 * time.Second
	e := mustNoise(t, ch, capacity, window)
	rng := rand.New(rand.NewPCG(31, 32))
	type entry struct {
		at time.Duration
		d  [ch]float64
	}
	var hist []entry
	prev := [ch]float64{math.NaN(), math.NaN(), math.NaN()}
	prevAt, seen := time.Duration(0), false
	d := time.Duration(0)
	for step := range 4000 {
		gap := time.Duration(20e6 + rng.Int64N(150e6))
		if rng.IntN(200) == 0 {
			gap = 5 * time.Second // longer than the window
		}
		d += gap
		var sig []float64
		n := ch
		if rng.IntN(25) == 0 {
			n = 1 // channels 1 and 2 missing
		}
		for i := range n {
			v := 100 * float64(i+1) * math.Exp(0.1*math.Sin(d.Seconds())) * (1 + 0.01*rng.NormFloat64())
			switch rng.IntN(30) {
			case 0:
				v = 0
			case 1:
				v = math.NaN()
			case 2:
				v = math.Inf(1)
			}
			sig = append(sig, v)
		}
		e.Observe(procBase.Add(d), sig)

		var en entry
		got := false
		for i := range ch {
			ln := math.NaN()
			if i < len(sig) && sig[i] > 0 && !math.IsInf(sig[i], 1) {
				ln = math.Log(sig[i])
			}
			en.d[i] = math.NaN()
			if seen && prevAt > d-window {
				en.d[i] = ln - prev[i]
			}
			got = got || !math.IsNaN(en.d[i])
			prev[i] = ln
		}
		prevAt, seen = d, true
		if got {
			en.at = d
			hist = append(hist, en)
		}
		var win []entry
		for _, h := range hist {
			if h.at > d-window {
				win = append(win, h)
			}
		}
		if len(win) > capacity {
			win = win[len(win)-capacity:]
		}
		cols := make([][]float64, ch)
		for _, w := range win {
			for i := range ch {
				if !math.IsNaN(w.d[i]) {
					cols[i] = append(cols[i], w.d[i])
				}
			}
		}
		for i := range ch {
			got, ok := e.Relative(i)
			if len(cols[i]) < 2 {
				if ok {
					t.Fatalf("step %d channel %d: ok with %d differences", step, i, len(cols[i]))
				}
				continue
			}
			want := stat.StdDev(cols[i], nil) / math.Sqrt2
			if !ok || math.Abs(got-want) > 1e-9*want {
				t.Fatalf("step %d channel %d (%d differences): (%.15g, %v), want %.15g", step, i, len(cols[i]), got, ok, want)
			}
		}
		for i := range ch {
			for j := i + 1; j < ch; j++ {
				var a, b []float64
				for _, w := range win {
					if !math.IsNaN(w.d[i]) && !math.IsNaN(w.d[j]) {
						a, b = append(a, w.d[i]), append(b, w.d[j])
					}
				}
				got, ok := e.Correlation(i, j)
				if len(a) < 3 {
					if ok {
						t.Fatalf("step %d pair %d,%d: ok with %d pairs", step, i, j, len(a))
					}
					continue
				}
				want := stat.Correlation(a, b, nil)
				if !ok || math.Abs(got-want) > 1e-8 {
					t.Fatalf("step %d pair %d,%d (%d pairs): (%.15g, %v), want %.15g", step, i, j, len(a), got, ok, want)
				}
			}
		}
	}
}

func TestNoiseEstimatorTimeAndRange(t *testing.T) {
	e := mustNoise(t, 2, 16, time.Second)
	if got, ok := e.Relative(0); ok || !math.IsNaN(got) {
		t.Errorf("empty: Relative (%g, %v), want (NaN, false)", got, ok)
	}
	for k := range 10 {
		e.Observe(procAt(float64(k)*0.1), []float64{100 + float64(k%3), 50 + float64(k%2)})
	}
	if _, ok := e.Relative(1); !ok {
		t.Errorf("after 10 observations: no estimate")
	}
	for _, i := range []int{-1, 2} {
		if got, ok := e.Relative(i); ok || !math.IsNaN(got) {
			t.Errorf("Relative(%d) = (%g, %v), want (NaN, false)", i, got, ok)
		}
		if got, ok := e.Correlation(0, i); ok || !math.IsNaN(got) {
			t.Errorf("Correlation(0, %d) = (%g, %v), want (NaN, false)", i, got, ok)
		}
	}
	if got, ok := e.Correlation(1, 1); !ok || got != 1 {
		t.Errorf("Correlation(1, 1) = (%g, %v), want (1, true)", got, ok)
	}
	// Time going backwards empties the window.
	e.Observe(procAt(0.2), []float64{100, 50})
	if _, ok := e.Relative(0); ok {
		t.Errorf("after a clock step: estimate left over")
	}
	e.Reset()
	e.Observe(procAt(0), []float64{100, 50})
	if _, ok := e.Relative(0); ok {
		t.Errorf("after Reset: estimate left over")
	}
	if e.Channels() != 2 {
		t.Errorf("Channels() = %d, want 2", e.Channels())
	}
}

func TestNewNoiseEstimatorErrors(t *testing.T) {
	for _, c := range []struct {
		ch, capacity int
		window       time.Duration
		want         string
	}{
		{0, 10, time.Second, "channels 0"},
		{convert.MaxChannels + 1, 10, time.Second, "channels 9"},
		{2, 2, time.Second, "capacity 2"},
		{2, 1 << 21, time.Second, "capacity 2097152"},
		{2, 10, 0, "window 0s"},
		{2, 10, -time.Second, "window -1s"},
	} {
		_, err := convert.NewNoiseEstimator(c.ch, c.capacity, c.window)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("NewNoiseEstimator(%d, %d, %v) = %v, want an error containing %q", c.ch, c.capacity, c.window, err, c.want)
		}
	}
}

// BenchmarkNoiseEstimatorObserve measures Observe with two channels at
// 10 Hz in a 10 s window (ring of 128). Target: ≤ ~100 ns/op, 0 allocs/op.
func BenchmarkNoiseEstimatorObserve(b *testing.B) {
	e := mustNoise(b, 2, 128, 10*time.Second)
	rng := rand.New(rand.NewPCG(41, 42))
	const n = 1024
	var sig [n][2]float64
	for i := range n {
		sig[i] = [2]float64{1e4 * (1 + 1e-3*rng.NormFloat64()), 2e4 * (1 + 1e-3*rng.NormFloat64())}
	}
	now := procBase
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		now = now.Add(100 * time.Millisecond)
		e.Observe(now, sig[i%n][:])
	}
}
