package convert

import (
	"math"
	"testing"
	"time"
)

// chainBands are two 50 nm bands at 0.9 and 1.05 um, or three at 0.775,
// 0.875 and 1.025 um.
func chainModels(tb testing.TB, bands [][2]float64) []Model {
	tb.Helper()
	ms := make([]Model, len(bands))
	for i, b := range bands {
		m, err := NewBand(b[0], b[1], C2ITS90)
		if err != nil {
			tb.Fatal(err)
		}
		ms[i] = m
	}
	return ms
}

var (
	twoChainBands   = [][2]float64{{0.875e-6, 0.925e-6}, {1.025e-6, 1.075e-6}}
	threeChainBands = [][2]float64{{0.750e-6, 0.800e-6}, {0.850e-6, 0.900e-6}, {1.000e-6, 1.050e-6}}
)

// everythingOn is a chain with every stage at work: average, filter, peak
// hold with decay and reset, hold-last-valid, loss detection, estimated
// noise and uncertainty.
func everythingOn(tb testing.TB, bands [][2]float64, publish Selection) *Chain {
	tb.Helper()
	c, err := NewChain(ChainConfig{
		Models:  chainModels(tb, bands),
		Options: Options{Min: 973.15, Max: 1873.15, LowSignal: 0.02, Publish: publish, NongreyLimit: 10},
		Process: ProcessConfig{Average: time.Second, T90: 500 * time.Millisecond, Hold: HoldPeak, Decay: 5,
			Reset: time.Minute, HoldLastValid: 2 * time.Second, MaxSamples: 128},
		Loss:        LossConfig{Window: 10 * time.Second, MaxSamples: 1024, Drop: 0.3, Significance: 0.01, Steady: 2, Reflection: 1.2},
		Uncertainty: UncertaintyConfig{KRel: 0.005, Calibration: 1.5},
	})
	if err != nil {
		tb.Fatal(err)
	}
	return c
}

// TestChainAgreesWithItsParts: the chain's conversion is the pyrometer's,
// its uncertainty is RatioUncertainty's with the estimated noise, and a
// lost signal holds the last value for HoldLastValid.
func TestChainAgreesWithItsParts(t *testing.T) {
	c := everythingOn(t, twoChainBands, Selection{Kind: SelectPair, I: 0, J: 1})
	models := chainModels(t, twoChainBands)
	t0 := time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC)
	var m Measurement
	// A blackbody at 1500 K with a 1 % and 2 % channel ripple, so that the
	// noise estimate has something to estimate.
	for k := range 200 {
		r1, r2 := 1+0.01*math.Sin(float64(k)*1.7), 1+0.02*math.Cos(float64(k)*2.3)
		c.Step(t0.Add(time.Duration(k)*100*time.Millisecond), []float64{r1 * models[0].Signal(1500), r2 * models[1].Signal(1500)}, &m)
	}
	var want Result
	c.Pyrometer().Convert([]float64{m.Channels[0].Signal, m.Channels[1].Signal}, &want)
	if m.Temperature != want.Temperature {
		t.Errorf("chain temperature %v, pyrometer %v", m.Temperature, want.Temperature)
	}
	u1, _ := c.noise.Relative(0)
	u2, _ := c.noise.Relative(1)
	r, _ := c.noise.Correlation(0, 1)
	ref := RatioUncertainty(models[0], models[1], m.Temperature, UncertaintyInputs{Noise: [2]float64{u1, u2}, Correlation: r, KRel: 0.005, Calibration: 1.5})
	if math.Abs(m.Uncertainty/ref-1) > 1e-6 {
		t.Errorf("uncertainty %v, RatioUncertainty %v", m.Uncertainty, ref)
	}
	last := m.Processed
	lost := []float64{1e-6 * models[0].Signal(1500), 1e-6 * models[1].Signal(1500)}
	c.Step(t0.Add(21*time.Second), lost, &m)
	if m.Flags&(LowSignal|Held) != LowSignal|Held || math.Abs(m.Processed-last) > 5*1.1 {
		t.Errorf("lost signal: flags %v processed %v, want the held %v", m.Flags, m.Processed, last)
	}
	c.Step(t0.Add(24*time.Second), lost, &m)
	if !math.IsNaN(m.Processed) || m.Flags&Held != 0 {
		t.Errorf("after HoldLastValid: processed %v flags %v", m.Processed, m.Flags)
	}
}

// The measured targets: a two-colour reading with every stage on in at
// most 1 µs without allocating; three colours with the fit in at most 5 µs.
//
//	go test -run '^$' -bench Chain -benchmem ./convert/
func BenchmarkChainTwoColour(b *testing.B) {
	benchChain(b, twoChainBands, Selection{Kind: SelectPair, I: 0, J: 1})
}

func BenchmarkChainThreeColourFit(b *testing.B) {
	benchChain(b, threeChainBands, Selection{Kind: SelectFit})
}

func benchChain(b *testing.B, bands [][2]float64, publish Selection) {
	c := everythingOn(b, bands, publish)
	models := chainModels(b, bands)
	signals := make([][]float64, 64)
	for k := range signals {
		tk := 1400 + 5*math.Sin(float64(k))
		signals[k] = make([]float64, len(models))
		for i, m := range models {
			signals[k][i] = (0.8 - 0.01*float64(i)) * m.Signal(tk) * (1 + 0.002*math.Cos(float64(k*(i+3))))
		}
	}
	t0 := time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC)
	var m Measurement
	b.ReportAllocs()
	b.ResetTimer()
	for k := range b.N {
		c.Step(t0.Add(time.Duration(k)*100*time.Millisecond), signals[k%len(signals)], &m)
	}
}
