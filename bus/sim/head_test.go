package sim

import (
	"math"
	"strings"
	"testing"
	"time"

	"glowgate/bus/modbus"
	"glowgate/convert"
)

// band returns an ideal rectangular channel model from lo to hi metres.
func band(t testing.TB, lo, hi float64) *convert.Band {
	t.Helper()
	b, err := convert.NewBand(lo, hi, convert.C2ITS90)
	if err != nil {
		t.Fatalf("NewBand(%g, %g): %v", lo, hi, err)
	}
	return b
}

// twoColour returns a 0.90/1.05 µm head (50 nm bands) serving float32 signals
// at input registers 0 and 2, at a constant temperature tk kelvin.
func twoColour(t testing.TB, unit uint8, tk float64) Head {
	t.Helper()
	return Head{
		Name:  "strand",
		Unit:  unit,
		Table: modbus.InputRegisters,
		Channels: []Channel{
			{Model: band(t, 0.875e-6, 0.925e-6), Emissivity: 1, Field: modbus.Field{Address: 0, Type: modbus.Float32}},
			{Model: band(t, 1.025e-6, 1.075e-6), Emissivity: 1, Field: modbus.Field{Address: 2, Type: modbus.Float32}},
		},
		Temperature:  Constant(tk),
		Transmission: Constant(1),
	}
}

func TestSignalsBlackbody(t *testing.T) {
	h := twoColour(t, 1, 0)
	h.Temperature = Profile{Start: 1073.15, Segments: []Segment{
		{Kind: Ramp, Value: 1873.15, Duration: 80 * time.Second},
	}}
	rng := h.NewRand()
	var dst []float64
	for e := time.Duration(0); e <= 90*time.Second; e += 10 * time.Second {
		tk := h.Temperature.At(e)
		dst = h.Signals(e, rng, dst)
		if len(dst) != 2 {
			t.Fatalf("Signals gave %d values, want 2", len(dst))
		}
		for i, c := range h.Channels {
			// With ε = 1, τ = 1 and no noise the signal is the model's blackbody
			// signal at the profile temperature (definition of Signals).
			if want := c.Model.Signal(tk); dst[i] != want {
				t.Errorf("t=%v T=%.2f K channel %d: signal %g, want blackbody %g", e, tk, i, dst[i], want)
			}
		}
	}
}

func TestSignalsScale(t *testing.T) {
	h := twoColour(t, 1, 1500)
	bb := h.Signals(0, nil, nil)

	h.Channels[0].Emissivity = 0.4
	h.Channels[1].Emissivity = 0.5
	h.Transmission = Profile{Start: 1, Segments: []Segment{{Kind: Ramp, Value: 0.2, Duration: 10 * time.Second}}}
	for _, tc := range []struct {
		elapsed time.Duration
		tau     float64
	}{{0, 1}, {5 * time.Second, 0.6}, {10 * time.Second, 0.2}, {time.Minute, 0.2}} {
		got := h.Signals(tc.elapsed, h.NewRand(), nil)
		for i, eps := range []float64{0.4, 0.5} {
			want := eps * tc.tau * bb[i]
			if math.Abs(got[i]-want) > 1e-14*want {
				t.Errorf("t=%v channel %d: signal %g, want ε·τ·S_bb = %g·%g·%g = %g",
					tc.elapsed, i, got[i], eps, tc.tau, bb[i], want)
			}
		}
		// A grey loss leaves the ratio unchanged apart from the emissivity ratio.
		if r, want := got[0]/got[1], (0.4/0.5)*bb[0]/bb[1]; math.Abs(r/want-1) > 1e-14 {
			t.Errorf("t=%v: ratio %g, want k·R_bb = %g", tc.elapsed, r, want)
		}
	}

	h.Transmission = Constant(0)
	for i, v := range h.Signals(0, nil, nil) {
		if v != 0 {
			t.Errorf("blocked path: channel %d signal %g, want 0", i, v)
		}
	}
}

// Relative noise has mean 1 and standard deviation Noise, independently per
// channel. Tolerances are four standard errors of the estimates for normal
// samples: σ/√N for the mean, σ/√(2N) for the standard deviation, 1/√N for the
// correlation coefficient (standard large-sample results, from memory).
func TestSignalsNoiseStatistics(t *testing.T) {
	const (
		n     = 20000
		noise = 0.01
	)
	h := twoColour(t, 1, 1600)
	exact := h.Signals(0, nil, nil)
	h.Noise = noise
	h.Seed = 42
	rng := h.NewRand()

	var sum, sumSq [2]float64
	var sumXY float64
	dst := make([]float64, 2)
	for range n {
		dst = h.Signals(0, rng, dst)
		x := [2]float64{dst[0]/exact[0] - 1, dst[1]/exact[1] - 1}
		for i := range x {
			sum[i] += x[i]
			sumSq[i] += x[i] * x[i]
		}
		sumXY += x[0] * x[1]
	}
	var sd [2]float64
	for i := range sum {
		mean := sum[i] / n
		sd[i] = math.Sqrt(sumSq[i]/n - mean*mean)
		if tol := 4 * noise / math.Sqrt(n); math.Abs(mean) > tol {
			t.Errorf("channel %d: mean relative deviation %g, want 0 ± %g", i, mean, tol)
		}
		if tol := 4 * noise / math.Sqrt(2*n); math.Abs(sd[i]-noise) > tol {
			t.Errorf("channel %d: relative standard deviation %g, want %g ± %g", i, sd[i], noise, tol)
		}
	}
	cov := sumXY/n - (sum[0]/n)*(sum[1]/n)
	if r, tol := cov/(sd[0]*sd[1]), 4/math.Sqrt(n); math.Abs(r) > tol {
		t.Errorf("channel correlation %g, want 0 ± %g", r, tol)
	}
}

func TestSignalsNoiseSeeded(t *testing.T) {
	h := twoColour(t, 1, 1600)
	h.Noise = 0.02
	h.Seed = 7
	a, b := h.NewRand(), h.NewRand()
	other := h
	other.Seed = 8
	c := other.NewRand()
	differs := false
	for i := range 100 {
		sa, sb := h.Signals(0, a, nil), h.Signals(0, b, nil)
		sc := other.Signals(0, c, nil)
		if sa[0] != sb[0] || sa[1] != sb[1] {
			t.Fatalf("sample %d: same seed gave %v and %v", i, sa, sb)
		}
		if sa[0] != sc[0] {
			differs = true
		}
	}
	if !differs {
		t.Error("seeds 7 and 8 gave the same noise")
	}
}

func TestSignalsNeverNegative(t *testing.T) {
	h := twoColour(t, 1, 1200)
	h.Noise = 3 // so large that about a third of the samples fall below zero
	rng := h.NewRand()
	zeros := 0
	for range 1000 {
		for _, v := range h.Signals(0, rng, nil) {
			if v < 0 || math.IsNaN(v) {
				t.Fatalf("signal %v, want >= 0", v)
			}
			if v == 0 {
				zeros++
			}
		}
	}
	// P(1 + 3n < 0) = Φ(−1/3) ≈ 0.37 (normal distribution, from memory).
	if zeros < 500 || zeros > 950 {
		t.Errorf("%d of 2000 signals clipped to zero, want about 740", zeros)
	}
}

func TestSignalsReusesDst(t *testing.T) {
	h := twoColour(t, 1, 1500)
	buf := make([]float64, 5)
	got := h.Signals(0, nil, buf)
	if len(got) != 2 || &got[0] != &buf[0] {
		t.Errorf("Signals with a roomy dst gave len %d, same storage %v", len(got), &got[0] == &buf[0])
	}
	if got := h.Signals(0, nil, make([]float64, 0, 1)); len(got) != 2 {
		t.Errorf("Signals with a short dst gave len %d, want 2", len(got))
	}
	h.Channels[1].Model = nil
	if got := h.Signals(0, nil, nil); !math.IsNaN(got[1]) || math.IsNaN(got[0]) {
		t.Errorf("channel without model: signals %v, want [finite NaN]", got)
	}
}

func TestHeadValidate(t *testing.T) {
	tests := []struct {
		name   string
		modify func(h *Head)
		want   string // substring of the error; empty for a valid head
	}{
		{"valid", func(h *Head) {}, ""},
		{"holding table", func(h *Head) { h.Table = modbus.HoldingRegisters }, ""},
		{"adjacent fields", func(h *Head) { h.Channels[1].Field.Address = 2 }, ""},
		{"last register 65535", func(h *Head) { h.Channels[1].Field.Address = 65534 }, ""},
		{"unknown table", func(h *Head) { h.Table = 5 }, "table: unknown register table 5"},
		{"no channels", func(h *Head) { h.Channels = nil }, "channels: none"},
		{"no model", func(h *Head) { h.Channels[1].Model = nil }, "channels[1]: no model"},
		{"zero emissivity", func(h *Head) { h.Channels[0].Emissivity = 0 }, "channels[0].emissivity: 0 outside (0, 1]"},
		{"emissivity above 1", func(h *Head) { h.Channels[1].Emissivity = 1.2 }, "channels[1].emissivity: 1.2 outside (0, 1]"},
		{"NaN emissivity", func(h *Head) { h.Channels[1].Emissivity = math.NaN() }, "channels[1].emissivity: NaN"},
		{"unknown type", func(h *Head) { h.Channels[0].Field.Type = 99 }, "channels[0].field: register type Type(99) has no length"},
		{"NaN scale", func(h *Head) { h.Channels[0].Field.Scale = math.NaN() }, "channels[0].field: scale NaN and offset 0 must be finite"},
		{"beyond 65535", func(h *Head) { h.Channels[1].Field.Address = 65535 }, "channels[1].field: registers 65535..65536 reach beyond address 65535"},
		{"overlap", func(h *Head) { h.Channels[1].Field.Address = 1 }, "channels[1].field: input registers 1..2 overlap channels[0] at 0..1"},
		{"zero kelvin", func(h *Head) {
			h.Temperature.Segments = []Segment{{Kind: Ramp, Value: 0, Duration: time.Second}}
		}, "temperature: reaches 0 K, want above 0 K"},
		{"bad temperature segment", func(h *Head) {
			h.Temperature.Segments = []Segment{{Kind: Step, Value: 1000, Duration: time.Second}}
		}, "temperature: segments[0]: step takes no duration"},
		{"transmission above 1", func(h *Head) { h.Transmission = Constant(1.5) }, "transmission: ranges over 1.5..1.5, want within 0..1"},
		{"negative transmission", func(h *Head) {
			h.Transmission.Segments = []Segment{{Kind: Ramp, Value: -0.1, Duration: time.Second}}
		}, "transmission: ranges over -0.1..1"},
		{"negative noise", func(h *Head) { h.Noise = -0.01 }, "noise: -0.01, want a finite value >= 0"},
		{"infinite noise", func(h *Head) { h.Noise = math.Inf(1) }, "noise: +Inf"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			h := twoColour(t, 3, 1500)
			tc.modify(&h)
			err := h.Validate()
			switch {
			case tc.want == "" && err != nil:
				t.Fatalf("Validate() = %v, want nil", err)
			case tc.want != "" && err == nil:
				t.Fatalf("Validate() = nil, want an error containing %q", tc.want)
			case tc.want != "":
				if !strings.Contains(err.Error(), tc.want) || !strings.HasPrefix(err.Error(), `head "strand" (unit 3): `) {
					t.Fatalf("Validate() = %q, want the head named and %q", err, tc.want)
				}
			}
		})
	}
}

func BenchmarkSignals(b *testing.B) {
	h := twoColour(b, 1, 1700)
	h.Noise = 0.003
	h.Temperature = Profile{Start: 1700, Repeat: true, Segments: []Segment{
		{Kind: Hold, Duration: 20 * time.Second},
		{Kind: Ramp, Value: 1750, Duration: 15 * time.Second},
	}}
	rng := h.NewRand()
	dst := make([]float64, 2)
	b.ReportAllocs()
	for i := 0; b.Loop(); i++ {
		dst = h.Signals(time.Duration(i)*time.Millisecond, rng, dst)
	}
}
