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

// FuzzPyrometerConvert feeds arbitrary signals to pyrometers of two,
// three and four channels (with emissivity settings, a saturation level
// and each kind of published temperature): Convert must never panic; the
// published temperature and the fit's must be NaN or inside the solver
// bracket; every finite pair temperature must reproduce its pair's ratio
// when its blackbody signals are synthesised again; the flags must match
// the signals.
func FuzzPyrometerConvert(f *testing.F) {
	models := append(threeBands(f), mustBand(f, 1.175e-6, 1.225e-6))
	e := []float64{1.05, 1, 0.97, 0.9}
	sat := []float64{0, 0, 0, 1e6}
	var pyros [3]*Pyrometer
	for n := 2; n <= 4; n++ {
		pub := Selection{Kind: SelectKind(n - 2)} // pair (default), outer, fit
		pyros[n-2] = mustPyrometer(f, models[:n], Options{
			Min: 700, Max: 3000, LowSignal: 0.02, Emissivity: e[:n], Saturation: sat[:n], Publish: pub, NongreyLimit: 2,
		})
	}
	for _, temp := range []float64{350, 700, 1273.15, 3000, 4500} {
		s := signalsOf(models, temp, func(float64) float64 { return 0.5 })
		for n := range uint8(3) {
			f.Add(n, s[0], s[1], s[2], s[3])
		}
	}
	for _, s := range [][4]float64{
		{0, 1, 1, 1}, {1, 0, 1, 1}, {-1, 1, 1, 1}, {math.NaN(), 1, 1, 1}, {1, math.Inf(1), 1, 1},
		{1e-300, 1e300, 1, 1}, {1e300, 1e-300, 1, 1}, {5e-324, 5e-324, 5e-324, 5e-324},
		{math.MaxFloat64, math.MaxFloat64, 1, 1}, {1, 1, 1, 1}, {1, 1, 1, 2e6},
	} {
		for n := range uint8(3) {
			f.Add(n, s[0], s[1], s[2], s[3])
		}
	}
	f.Fuzz(func(t *testing.T, which uint8, s0, s1, s2, s3 float64) {
		n := 2 + int(which%3)
		p := pyros[n-2]
		s := []float64{s0, s1, s2, s3}[:n]
		var res Result
		p.Convert(s, &res)
		lo, hi := p.Bracket()
		inBracket := func(v float64) bool { return math.IsNaN(v) || (v >= lo && v <= hi) }
		if !inBracket(res.Temperature) || !inBracket(res.Fit.Temperature) {
			t.Fatalf("%v: temperature %g, fit %g outside [%g, %g]", s, res.Temperature, res.Fit.Temperature, lo, hi)
		}
		var noSignal, saturated bool
		for i, v := range s {
			bad := !(v > 0) || math.IsInf(v, 1)
			noSignal = noSignal || bad
			saturated = saturated || (!bad && sat[i] > 0 && v >= sat[i])
			if c := res.Channels[i]; !inBracket(c.Brightness) || (math.IsNaN(res.Temperature) && !math.IsNaN(c.Fraction)) {
				t.Fatalf("%v: channel %d %+v with temperature %g", s, i, c, res.Temperature)
			}
		}
		if noSignal != (res.Flags&NoSignal != 0) || saturated != (res.Flags&Saturated != 0) {
			t.Fatalf("%v: flags %v, no signal %v, saturated %v", s, res.Flags, noSignal, saturated)
		}
		for _, pr := range res.Pairs[:res.NPairs] {
			if math.IsNaN(pr.Temperature) {
				continue
			}
			if !inBracket(pr.Temperature) {
				t.Fatalf("%v: pair (%d, %d) %g K outside the bracket", s, pr.I, pr.J, pr.Temperature)
			}
			// ln(S_i,bb(T)/S_j,bb(T)) + ln(e_i/e_j) = ln(s_i/s_j).
			got := math.Log(models[pr.I].Signal(pr.Temperature)) - math.Log(models[pr.J].Signal(pr.Temperature)) + math.Log(e[pr.I]/e[pr.J])
			if want := math.Log(s[pr.I]) - math.Log(s[pr.J]); math.Abs(got-want) > 1e-9 {
				t.Fatalf("%v: pair (%d, %d) = %.12g K: ln ratio of its blackbody signals %.15g, measured %.15g", s, pr.I, pr.J, pr.Temperature, got, want)
			}
		}
		if n >= 3 && !math.IsNaN(res.Nongrey) && !(res.Nongrey >= 0 && res.Nongrey <= hi-lo) {
			t.Fatalf("%v: nongrey %g", s, res.Nongrey)
		}
	})
}
