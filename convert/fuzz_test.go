package convert

import (
	"math"
	"testing"
)

// FuzzRatioConvert feeds arbitrary signal pairs to the two-band converter:
// it must never panic, a temperature must be NaN or inside the solver
// bracket, flags must match the outcome, and a finite temperature must
// reproduce the ratio when its blackbody signals are synthesised again.
func FuzzRatioConvert(f *testing.F) {
	r := testRatio(f, 1.03)
	for _, temp := range []float64{350, 700, 1273.15, 3000, 4500} {
		f.Add(r.Short.Signal(temp), r.Long.Signal(temp))
	}
	for _, p := range [][2]float64{
		{0, 1}, {1, 0}, {-1, 1}, {math.NaN(), 1}, {1, math.Inf(1)}, {math.Inf(-1), 1},
		{1e-300, 1e300}, {1e300, 1e-300}, {5e-324, 5e-324}, {math.MaxFloat64, math.MaxFloat64}, {1, 1},
	} {
		f.Add(p[0], p[1])
	}
	lo, hi := r.Bracket()
	f.Fuzz(func(t *testing.T, s1, s2 float64) {
		res := r.Convert(s1, s2)
		valid := finite(s1) && finite(s2) && s1 > 0 && s2 > 0
		if valid == (res.Flags&NoSignal != 0) {
			t.Fatalf("Convert(%g, %g): flags %v with valid=%v", s1, s2, res.Flags, valid)
		}
		temp := res.Temperature
		if math.IsNaN(temp) {
			if !math.IsNaN(res.Channels[0].Fraction) || !math.IsNaN(res.Channels[1].Fraction) {
				t.Fatalf("Convert(%g, %g): fractions without a temperature", s1, s2)
			}
			if valid && res.Flags&(BelowRange|AboveRange) == 0 {
				t.Fatalf("Convert(%g, %g): valid signals, no temperature, no range flag", s1, s2)
			}
		} else {
			if !(temp >= lo && temp <= hi) {
				t.Fatalf("Convert(%g, %g) = %g K outside the solver bracket [%g, %g]", s1, s2, temp, lo, hi)
			}
			// Re-synthesise: ln(S1,bb(T)/S2,bb(T)) + ln k = ln(s1/s2).
			g := math.Log(r.Short.Signal(temp)) - math.Log(r.Long.Signal(temp)) + math.Log(r.K)
			if want := math.Log(s1) - math.Log(s2); math.Abs(g-want) > 1e-9 {
				t.Fatalf("Convert(%g, %g) = %.12g K: ratio of its blackbody signals ln %.15g, measured ln %.15g", s1, s2, temp, g, want)
			}
		}
		for i, c := range res.Channels[:res.N] {
			if b := c.Brightness; !math.IsNaN(b) && !(b >= lo && b <= hi) {
				t.Fatalf("Convert(%g, %g): channel %d brightness %g K outside [%g, %g]", s1, s2, i, b, lo, hi)
			}
		}
	})
}
