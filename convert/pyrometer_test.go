package convert

import (
	"math"
	"strings"
	"testing"
)

// threeBands are ideal 50 nm bands at 0.75, 0.9 and 1.05 µm.
func threeBands(t testing.TB) []Model {
	t.Helper()
	return []Model{mustBand(t, 0.725e-6, 0.775e-6), mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)}
}

func mustPyrometer(t testing.TB, models []Model, o Options) *Pyrometer {
	t.Helper()
	p, err := NewPyrometer(models, o)
	if err != nil {
		t.Fatalf("NewPyrometer: %v", err)
	}
	return p
}

// signalsOf returns the signals of a target at temp kelvin whose
// emissivity in channel i is eps(λ_i in µm), λ_i the model's Wavelength.
func signalsOf(models []Model, temp float64, eps func(um float64) float64) []float64 {
	s := make([]float64, len(models))
	for i, m := range models {
		s[i] = eps(m.Wavelength()*1e6) * m.Signal(temp)
	}
	return s
}

func TestPyrometerTwoChannelsIsRatio(t *testing.T) {
	// Identity: a two-channel Pyrometer with emissivities (k, 1) gives
	// Ratio's result with K = k, field for field.
	short, long := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	const k = 1.03
	r, err := NewRatio(short, long, k, 700, 3000, 0.05)
	if err != nil {
		t.Fatal(err)
	}
	p := mustPyrometer(t, []Model{short, long}, Options{Min: 700, Max: 3000, LowSignal: 0.05, Emissivity: []float64{k, 1}})
	if p.N() != 2 {
		t.Fatalf("N() = %d", p.N())
	}
	var got Result
	for _, s := range [][2]float64{
		{short.Signal(1273.15), long.Signal(1273.15)},
		{0.01 * short.Signal(2000), 0.01 * long.Signal(2000)},
		{short.Signal(600), long.Signal(600)},
		{short.Signal(4600), long.Signal(4600)},
		{0, 1}, {math.NaN(), 1}, {1, math.Inf(1)}, {1e-300, 1e-300}, {1e300, 1e300},
	} {
		want := r.Convert(s[0], s[1])
		p.Convert(s[:], &got)
		if !sameResult(got, want) {
			t.Errorf("signals %v: Pyrometer %+v\nRatio %+v", s, got, want)
		}
		if got.NPairs != 1 || got.Pairs[0].I != 0 || got.Pairs[0].J != 1 || !same(got.Pairs[0].Temperature, got.Temperature) {
			t.Errorf("signals %v: pairs %d %+v, temperature %g", s, got.NPairs, got.Pairs[0], got.Temperature)
		}
		if !math.IsNaN(got.Nongrey) || !math.IsNaN(got.Fit.Temperature) || got.Fit.OK {
			t.Errorf("signals %v: two channels, nongrey %g and fit %+v, want NaN", s, got.Nongrey, got.Fit)
		}
	}
}

// sameResult compares two results, NaN equal to NaN.
func sameResult(a, b Result) bool {
	if !same(a.Temperature, b.Temperature) || !same(a.Ratio, b.Ratio) || a.N != b.N || a.Flags != b.Flags || a.NPairs != b.NPairs || !same(a.Nongrey, b.Nongrey) {
		return false
	}
	for i := range a.Channels {
		x, y := a.Channels[i], b.Channels[i]
		if !same(x.Signal, y.Signal) || !same(x.Fraction, y.Fraction) || !same(x.Brightness, y.Brightness) {
			return false
		}
	}
	for i := range a.Pairs {
		if a.Pairs[i].I != b.Pairs[i].I || a.Pairs[i].J != b.Pairs[i].J || !same(a.Pairs[i].Temperature, b.Pairs[i].Temperature) {
			return false
		}
	}
	f, g := a.Fit, b.Fit
	return same(f.Temperature, g.Temperature) && same(f.Slope, g.Slope) && same(f.Residual, g.Residual) && f.OK == g.OK
}

func TestPyrometerNongreyTarget(t *testing.T) {
	// A target whose emissivity falls with wavelength,
	// ε = 0.4·(1 − 0.2·(λ − 0.9 µm)/µm), read with k = 1: every pair reads
	// high (ε_short/ε_long > 1), each by its own amount, since the
	// sensitivity to the emissivity ratio grows with the pair's equivalent
	// wavelength Λ = λ1λ2/(λ2 − λ1) (PHYSICS.md: dT/T = −(ΛT/c2)·dk/k). The
	// pair temperatures disagree and their spread flags the target
	// (PHYSICS.md: "their spread is a non-grey index").
	models := threeBands(t)
	p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, NongreyLimit: 1})
	var res Result
	for _, temp := range []float64{800, 1273.15, 2000, 2800} {
		p.Convert(signalsOf(models, temp, func(um float64) float64 { return 0.4 * (1 - 0.2*(um-0.9)) }), &res)
		if res.NPairs != 3 {
			t.Fatalf("%g K: %d pairs, want 3", temp, res.NPairs)
		}
		for k, want := range []PairResult{{I: 0, J: 1}, {I: 1, J: 2}, {I: 0, J: 2}} {
			pr := res.Pairs[k]
			if pr.I != want.I || pr.J != want.J {
				t.Errorf("pair %d is (%d, %d), want (%d, %d)", k, pr.I, pr.J, want.I, want.J)
			}
			if !(pr.Temperature > temp) {
				t.Errorf("%g K: pair (%d, %d) reads %.4f K, want high (ε falls with λ)", temp, pr.I, pr.J, pr.Temperature)
			}
		}
		spread := math.Max(res.Pairs[0].Temperature, math.Max(res.Pairs[1].Temperature, res.Pairs[2].Temperature)) -
			math.Min(res.Pairs[0].Temperature, math.Min(res.Pairs[1].Temperature, res.Pairs[2].Temperature))
		if math.Abs(res.Nongrey-spread) > 1e-12*temp || !(res.Nongrey > 1) {
			t.Errorf("%g K: nongrey %.6f K, spread of the pairs %.6f K, want > 1 K", temp, res.Nongrey, spread)
		}
		if res.Flags != Nongrey {
			t.Errorf("%g K: flags %v, want nongrey", temp, res.Flags)
		}
		// The default published temperature is the outer pair's.
		if res.Temperature != res.Pairs[2].Temperature {
			t.Errorf("%g K: published %.6f K, outer pair %.6f K", temp, res.Temperature, res.Pairs[2].Temperature)
		}
	}
	// NongreyLimit 0 never raises the flag.
	p = mustPyrometer(t, models, Options{Min: 700, Max: 3000})
	p.Convert(signalsOf(models, 2000, func(um float64) float64 { return 0.4 * (1 - 0.2*(um-0.9)) }), &res)
	if res.Flags != 0 || !(res.Nongrey > 1) {
		t.Errorf("limit 0: flags %v, nongrey %g", res.Flags, res.Nongrey)
	}
}

func TestPyrometerFitLogLinearEmissivity(t *testing.T) {
	// A target whose emissivity is exactly log-linear in wavelength,
	// ln ε = ln 0.4 − 0.2·(λ − 0.9 µm)/µm at the channel wavelengths: the
	// two-term fit's model holds, so it recovers the temperature (within
	// 0.01 K; it does to about 1e-9 K), the slope −0.2 /µm and a zero
	// residual, and the fractions are the emissivities (identity of the
	// model: ln s_i − ln S_i,bb(T) = a + bλ_i, Coates, Metrologia 17, 103,
	// 1981).
	models := threeBands(t)
	eps := func(um float64) float64 { return 0.4 * math.Exp(-0.2*(um-0.9)) }
	for _, publish := range []Selection{{Kind: SelectFit}, {}} {
		p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, NongreyLimit: 1, Publish: publish})
		var res Result
		for _, temp := range []float64{700, 800, 1273.15, 2000, 2800, 3000} {
			p.Convert(signalsOf(models, temp, eps), &res)
			f := res.Fit
			if d := math.Abs(f.Temperature - temp); !(d <= 0.01) || !f.OK {
				t.Errorf("%g K: fit %.6f K (off %.3g K), ok %v", temp, f.Temperature, d, f.OK)
			}
			if math.Abs(f.Slope+0.2) > 1e-6 || !(f.Residual < 1e-9) {
				t.Errorf("%g K: slope %.9f /µm, want −0.2; residual %.3g, want 0", temp, f.Slope, f.Residual)
			}
			if publish.Kind == SelectFit {
				if res.Temperature != f.Temperature {
					t.Errorf("%g K: published %g, fit %g", temp, res.Temperature, f.Temperature)
				}
				for i, m := range models {
					if want := eps(m.Wavelength() * 1e6); math.Abs(res.Channels[i].Fraction/want-1) > 1e-6 {
						t.Errorf("%g K: channel %d fraction %.9f, emissivity %.9f", temp, i, res.Channels[i].Fraction, want)
					}
				}
				// The published ratio is the outer pair's.
				s := signalsOf(models, temp, eps)
				if res.Ratio != s[0]/s[2] {
					t.Errorf("%g K: ratio %g, want outer %g", temp, res.Ratio, s[0]/s[2])
				}
			}
			// The pairs disagree; the outer pair, published by default, reads
			// high and may leave the measuring range.
			if res.Flags&^(AboveRange) != Nongrey || (publish.Kind == SelectFit && res.Flags != Nongrey) {
				t.Errorf("publish %v, %g K: flags %v, want nongrey", publish.Kind, temp, res.Flags)
			}
		}
	}
}

func TestPyrometerGreyTarget(t *testing.T) {
	// The same target made grey (ε = 0.4 in every channel): the pair
	// temperatures agree within 0.01 K, the non-grey index is below
	// 0.01 K, and the fit finds the temperature with a zero slope
	// (PHYSICS.md: "the pair temperatures of a grey target agree").
	models := threeBands(t)
	p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, NongreyLimit: 1, LowSignal: 0.02})
	var res Result
	for _, temp := range []float64{700, 973.15, 1273.15, 2000, 3000} {
		p.Convert(signalsOf(models, temp, func(float64) float64 { return 0.4 }), &res)
		for _, pr := range res.Pairs[:res.NPairs] {
			if d := math.Abs(pr.Temperature - temp); !(d <= 0.01) {
				t.Errorf("%g K: pair (%d, %d) %.6f K", temp, pr.I, pr.J, pr.Temperature)
			}
		}
		if !(res.Nongrey < 0.01) || res.Flags != 0 {
			t.Errorf("%g K: nongrey %g K, flags %v", temp, res.Nongrey, res.Flags)
		}
		if d := math.Abs(res.Fit.Temperature - temp); !(d <= 0.01) || math.Abs(res.Fit.Slope) > 1e-6 {
			t.Errorf("%g K: fit %+v", temp, res.Fit)
		}
		for i, c := range res.Channels[:3] {
			if math.Abs(c.Fraction-0.4) > 1e-6 {
				t.Errorf("%g K: channel %d fraction %.9f, want 0.4", temp, i, c.Fraction)
			}
		}
	}
	// A one-term (grey) fit finds it too, with no slope.
	p = mustPyrometer(t, models, Options{Min: 700, Max: 3000, FitTerms: 1, Publish: Selection{Kind: SelectFit}})
	p.Convert(signalsOf(models, 1500, func(float64) float64 { return 0.4 }), &res)
	if d := math.Abs(res.Temperature - 1500); !(d <= 0.01) || !math.IsNaN(res.Fit.Slope) || !(res.Fit.Residual < 1e-9) {
		t.Errorf("one-term fit: T %.6f, fit %+v", res.Temperature, res.Fit)
	}
}

func TestPyrometerFitWrongModel(t *testing.T) {
	// Four channels, an emissivity that is not log-linear (ln ε curved in
	// λ): the two-term fit is biased and its residual shows that the model
	// does not hold (PHYSICS.md: a wrong emissivity model biases the result,
	// publish the residual; Khan, Allemand & Eagar, Rev. Sci. Instrum. 62,
	// 392, 1991). The bias and residual are checked only for their sign
	// and order of magnitude: the fit is never the truth.
	models := append(threeBands(t), mustBand(t, 1.175e-6, 1.225e-6))
	p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, Publish: Selection{Kind: SelectFit}})
	var res Result
	const temp = 1500.0
	p.Convert(signalsOf(models, temp, func(um float64) float64 { return 0.5 * math.Exp(-2*(um-0.95)*(um-0.95)) }), &res)
	if !res.Fit.OK || !(math.Abs(res.Fit.Temperature-temp) > 1) || !(res.Fit.Residual > 1e-4) {
		t.Errorf("curved ln ε: fit %+v, want biased by more than 1 K with a residual above 1e-4", res.Fit)
	}
	t.Logf("curved ln ε at %g K: fit %.3f K, residual %.3g", temp, res.Fit.Temperature, res.Fit.Residual)
	// The same four channels on a log-linear target: exact again.
	p.Convert(signalsOf(models, temp, func(um float64) float64 { return 0.5 * math.Exp(0.3*(um-0.95)) }), &res)
	if d := math.Abs(res.Fit.Temperature - temp); !(d <= 0.01) || math.Abs(res.Fit.Slope-0.3) > 1e-6 || !(res.Fit.Residual < 1e-9) {
		t.Errorf("log-linear ε on four channels: fit %+v", res.Fit)
	}
}

func TestPyrometerSaturation(t *testing.T) {
	// A channel at or above its saturation level is unusable: Saturated,
	// no brightness temperature, no pair temperature resting on it, no
	// fit; the other pairs still read (common practice, no source).
	models := threeBands(t)
	const temp = 1500.0
	s := signalsOf(models, temp, func(float64) float64 { return 0.8 })
	sat := []float64{0, s[1], 10 * s[2]} // channel 1 exactly at its level
	p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, Saturation: sat})
	var res Result
	p.Convert(s, &res)
	if res.Flags != Saturated {
		t.Errorf("flags %v, want saturated", res.Flags)
	}
	if !math.IsNaN(res.Channels[1].Brightness) || !math.IsNaN(res.Channels[1].Fraction) {
		t.Errorf("saturated channel: brightness %g, fraction %g", res.Channels[1].Brightness, res.Channels[1].Fraction)
	}
	if !math.IsNaN(res.Pairs[0].Temperature) || !math.IsNaN(res.Pairs[1].Temperature) {
		t.Errorf("pairs on the saturated channel: %+v", res.Pairs[:2])
	}
	if math.Abs(res.Pairs[2].Temperature-temp) > 1e-6 || math.Abs(res.Temperature-temp) > 1e-6 {
		t.Errorf("outer pair %g, published %g, want %g", res.Pairs[2].Temperature, res.Temperature, temp)
	}
	if !math.IsNaN(res.Nongrey) || !math.IsNaN(res.Fit.Temperature) || res.Fit.OK {
		t.Errorf("one finite pair: nongrey %g, fit %+v, want NaN", res.Nongrey, res.Fit)
	}
	// Just below the level the channel counts.
	s[1] = math.Nextafter(s[1], 0)
	p.Convert(s, &res)
	if res.Flags != 0 || math.IsNaN(res.Pairs[0].Temperature) || math.IsNaN(res.Channels[1].Brightness) {
		t.Errorf("below saturation: flags %v, pairs %+v", res.Flags, res.Pairs[:3])
	}
	// Publishing a pair on the saturated channel: no temperature, no ratio.
	p = mustPyrometer(t, models, Options{Min: 700, Max: 3000, Saturation: sat, Publish: Selection{Kind: SelectPair, I: 0, J: 1}})
	s[1] = 2 * sat[1]
	p.Convert(s, &res)
	if !math.IsNaN(res.Temperature) || !math.IsNaN(res.Ratio) || res.Flags != Saturated {
		t.Errorf("published pair saturated: T %g, ratio %g, flags %v", res.Temperature, res.Ratio, res.Flags)
	}
	for i, c := range res.Channels[:3] {
		if !math.IsNaN(c.Fraction) {
			t.Errorf("no published temperature: channel %d fraction %g", i, c.Fraction)
		}
	}
	// Ratio's Saturation works the same way.
	r := p.Pair(0, 1)
	if r.Saturation != [2]float64{0, sat[1]} {
		t.Fatalf("Pair(0, 1).Saturation = %v", r.Saturation)
	}
	if got := r.Convert(s[0], s[1]); !math.IsNaN(got.Temperature) || got.Flags != Saturated || !math.IsNaN(got.Channels[1].Brightness) {
		t.Errorf("Ratio with a saturated channel: %+v", got)
	}
}

func TestPyrometerBadSignals(t *testing.T) {
	// NaN, ±Inf, zero and negative signals: NoSignal, NaN where the value
	// rests on that channel, never a panic or a made-up number.
	models := threeBands(t)
	p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, Publish: Selection{Kind: SelectPair, I: 1, J: 2}})
	good := signalsOf(models, 1400, func(float64) float64 { return 0.7 })
	var res Result
	for _, bad := range []float64{math.NaN(), math.Inf(1), math.Inf(-1), 0, -1, math.Copysign(0, -1)} {
		for ch := range 3 {
			s := append([]float64(nil), good...)
			s[ch] = bad
			p.Convert(s, &res)
			if res.Flags&NoSignal == 0 {
				t.Errorf("channel %d = %g: flags %v, want no_signal", ch, bad, res.Flags)
			}
			if (ch == 0) == math.IsNaN(res.Temperature) {
				t.Errorf("channel %d = %g: published (1, 2) temperature %g", ch, bad, res.Temperature)
			}
			for _, pr := range res.Pairs[:res.NPairs] {
				uses := pr.I == ch || pr.J == ch
				if uses != math.IsNaN(pr.Temperature) {
					t.Errorf("channel %d = %g: pair (%d, %d) %g", ch, bad, pr.I, pr.J, pr.Temperature)
				}
			}
			if !math.IsNaN(res.Channels[ch].Brightness) || !math.IsNaN(res.Channels[ch].Fraction) || !same(res.Channels[ch].Signal, bad) {
				t.Errorf("channel %d = %g: %+v", ch, bad, res.Channels[ch])
			}
			if !math.IsNaN(res.Fit.Temperature) || res.Fit.OK || !math.IsNaN(res.Nongrey) {
				t.Errorf("channel %d = %g: fit %+v, nongrey %g", ch, bad, res.Fit, res.Nongrey)
			}
		}
	}
	// A slice of the wrong length is no signal on every channel.
	for _, s := range [][]float64{nil, good[:2], append(good, 1)} {
		p.Convert(s, &res)
		if res.Flags != NoSignal || !math.IsNaN(res.Temperature) || res.N != 3 || !math.IsNaN(res.Channels[0].Signal) {
			t.Errorf("%d signals: %+v", len(s), res)
		}
	}
}

func TestPyrometerRangeEnds(t *testing.T) {
	// The measuring range's ends are inclusive; beyond the solver bracket
	// the published pair and the fit give NaN with a range flag (as
	// Ratio.Convert).
	models := threeBands(t)
	for _, sel := range []Selection{{}, {Kind: SelectFit}} {
		// Grey for the pair, log-linear for the fit: both read true.
		lnEps := func(float64) float64 { return 0.6 }
		if sel.Kind == SelectFit {
			lnEps = func(um float64) float64 { return 0.6 * math.Exp(-0.1*(um-0.9)) }
		}
		p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, Publish: sel})
		lo, hi := p.Bracket()
		if lo != 350 || hi != 4500 {
			t.Fatalf("bracket [%g, %g], want [350, 4500]", lo, hi)
		}
		var res Result
		for _, c := range []struct {
			temp  float64
			flags Flags
			nan   bool
		}{
			{700, 0, false}, {3000, 0, false},
			{699.9, BelowRange, false}, {3000.1, AboveRange, false},
			{350, BelowRange, false}, {4500, AboveRange, false},
			{340, BelowRange, true}, {4600, AboveRange, true},
		} {
			p.Convert(signalsOf(models, c.temp, lnEps), &res)
			if res.Flags&^Nongrey != c.flags || c.nan != math.IsNaN(res.Temperature) {
				t.Errorf("publish %v, %g K: T %.6f flags %v, want flags %v, NaN %v", sel.Kind, c.temp, res.Temperature, res.Flags, c.flags, c.nan)
			}
			if !c.nan && !(res.Temperature >= lo && res.Temperature <= hi) {
				t.Errorf("publish %v, %g K: T %.9f outside the bracket", sel.Kind, c.temp, res.Temperature)
			}
			if !c.nan && math.Abs(res.Temperature-c.temp) > 1e-6 {
				t.Errorf("publish %v at %g K: %.9f", sel.Kind, c.temp, res.Temperature)
			}
		}
	}
}

func TestPyrometerPublish(t *testing.T) {
	// Each selection publishes its own pair (identity with the pair
	// temperatures), including a pair that is not among those reported.
	models := append(threeBands(t), mustBand(t, 1.175e-6, 1.225e-6))
	s := signalsOf(models, 1600, func(um float64) float64 { return 0.5 * (1 - 0.3*(um-0.9)) })
	var res Result
	for _, c := range []struct {
		sel  Selection
		i, j int
	}{
		{Selection{}, 0, 3},
		{Selection{Kind: SelectOuter}, 0, 3},
		{Selection{Kind: SelectPair, I: 1, J: 2}, 1, 2},
		{Selection{Kind: SelectPair, I: 0, J: 2}, 0, 2},
	} {
		p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, Publish: c.sel})
		p.Convert(s, &res)
		want := p.Pair(c.i, c.j).Convert(s[c.i], s[c.j])
		if res.Temperature != want.Temperature || res.Ratio != s[c.i]/s[c.j] {
			t.Errorf("%+v: published %.9f K ratio %g, pair (%d, %d) %.9f K ratio %g", c.sel, res.Temperature, res.Ratio, c.i, c.j, want.Temperature, s[c.i]/s[c.j])
		}
		if res.NPairs != 4 || res.Pairs[3] != (PairResult{I: 0, J: 3, Temperature: res.Pairs[3].Temperature}) {
			t.Errorf("%+v: pairs %+v", c.sel, res.Pairs[:res.NPairs])
		}
		// Fractions at the published temperature.
		for i, m := range models {
			if f := s[i] / m.Signal(res.Temperature); math.Abs(res.Channels[i].Fraction/f-1) > 1e-9 {
				t.Errorf("%+v: channel %d fraction %.12f, S/S_bb %.12f", c.sel, i, res.Channels[i].Fraction, f)
			}
		}
	}
}

func TestPyrometerPair(t *testing.T) {
	models := threeBands(t)
	p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, LowSignal: 0.03, Emissivity: []float64{0.5, 0.4, 0.2}, Saturation: []float64{1e9, 2e9, 3e9}})
	r := p.Pair(0, 2)
	if r.K != 0.5/0.2 || r.Min != 700 || r.Max != 3000 || r.LowSignal != 0.03 || r.Saturation != [2]float64{1e9, 3e9} || r.Short != models[0] || r.Long != models[2] {
		t.Errorf("Pair(0, 2) = %+v", *r)
	}
	if lo, hi := r.Bracket(); lo != 350 || hi != 4500 {
		t.Errorf("Pair(0, 2) bracket [%g, %g]", lo, hi)
	}
	s := signalsOf(models, 1700, func(um float64) float64 { return 0.3 })
	var res Result
	p.Convert(s, &res)
	for _, pr := range res.Pairs[:res.NPairs] {
		got := p.Pair(pr.I, pr.J).Convert(s[pr.I], s[pr.J])
		if got.Temperature != pr.Temperature {
			t.Errorf("Pair(%d, %d) reads %.9f K, Convert's pair %.9f K", pr.I, pr.J, got.Temperature, pr.Temperature)
		}
	}
	// A copy: changing it changes nothing of p.
	r.K = 7
	p.Convert(s, &res)
	if got := p.Pair(0, 2); got.K != 0.5/0.2 || res.Pairs[2].Temperature != p.Pair(0, 2).Convert(s[0], s[2]).Temperature {
		t.Errorf("changed copy leaked: K %g", got.K)
	}
	for _, ij := range [][2]int{{-1, 1}, {1, 1}, {2, 1}, {0, 3}} {
		if p.Pair(ij[0], ij[1]) != nil {
			t.Errorf("Pair(%d, %d) not nil", ij[0], ij[1])
		}
	}
}

func TestPyrometerResultReuse(t *testing.T) {
	// Convert writes every field: a Result used by a three-channel
	// converter and then by a two-channel one holds nothing of the first.
	three := mustPyrometer(t, threeBands(t), Options{Min: 700, Max: 3000})
	two := mustPyrometer(t, threeBands(t)[1:], Options{Min: 700, Max: 3000})
	var res Result
	three.Convert(signalsOf(threeBands(t), 1500, func(float64) float64 { return 0.5 }), &res)
	two.Convert(signalsOf(threeBands(t)[1:], 1500, func(float64) float64 { return 0.5 }), &res)
	fresh := two.Pair(0, 1).Convert(res.Channels[0].Signal, res.Channels[1].Signal)
	if !sameResult(res, fresh) {
		t.Errorf("reused result %+v\nfresh %+v", res, fresh)
	}
}

func TestPyrometerAllocations(t *testing.T) {
	for _, c := range []struct {
		name   string
		models []Model
		o      Options
	}{
		{"two colour", threeBands(t)[1:], Options{Min: 700, Max: 3000, LowSignal: 0.02}},
		{"three colour, fit", threeBands(t), Options{Min: 700, Max: 3000, NongreyLimit: 1, Publish: Selection{Kind: SelectFit}}},
		{"four colour, fit", append(threeBands(t), mustBand(t, 1.175e-6, 1.225e-6)), Options{Min: 700, Max: 3000, Publish: Selection{Kind: SelectFit}}},
	} {
		p := mustPyrometer(t, c.models, c.o)
		s := signalsOf(c.models, 1500, func(um float64) float64 { return 0.4 * (1 - 0.1*um) })
		var res Result
		if n := testing.AllocsPerRun(100, func() { p.Convert(s, &res) }); n != 0 {
			t.Errorf("%s: Convert allocates %g times per call, want 0", c.name, n)
		}
	}
}

func TestNewPyrometerErrors(t *testing.T) {
	m := threeBands(t)
	nan, inf := math.NaN(), math.Inf(1)
	ok := Options{Min: 700, Max: 3000}
	with := func(f func(*Options)) Options { o := ok; f(&o); return o }
	for _, c := range []struct {
		name   string
		models []Model
		o      Options
		want   string
	}{
		{"one channel", m[:1], ok, "1 channel models, need 2 to 8"},
		{"nine channels", append(append(append([]Model{}, m...), m...), m...), ok, "9 channel models"},
		{"nil model", []Model{m[0], nil}, ok, "channel 1: model is nil"},
		{"unordered", []Model{m[1], m[0]}, ok, "channel 1: wavelength"},
		{"same wavelength", []Model{m[0], m[0]}, ok, "shortest wavelength first"},
		{"bad wavelength", []Model{fakeModel{m[0], nan}, m[1]}, ok, "channel 0: wavelength NaN"},
		{"min zero", m, with(func(o *Options) { o.Min = 0 }), "measuring range"},
		{"max below min", m, with(func(o *Options) { o.Max = 600 }), "measuring range"},
		{"max inf", m, with(func(o *Options) { o.Max = inf }), "measuring range"},
		{"low signal 1", m, with(func(o *Options) { o.LowSignal = 1 }), "low-signal limit"},
		{"low signal NaN", m, with(func(o *Options) { o.LowSignal = nan }), "low-signal limit"},
		{"emissivity length", m, with(func(o *Options) { o.Emissivity = []float64{1, 1} }), "emissivity: 2 values for 3 channels"},
		{"emissivity zero", m, with(func(o *Options) { o.Emissivity = []float64{1, 0, 1} }), "emissivity of channel 1"},
		{"emissivity NaN", m, with(func(o *Options) { o.Emissivity = []float64{1, 1, nan} }), "emissivity of channel 2"},
		{"saturation length", m, with(func(o *Options) { o.Saturation = []float64{1} }), "saturation: 1 values for 3 channels"},
		{"saturation negative", m, with(func(o *Options) { o.Saturation = []float64{0, -1, 0} }), "saturation of channel 1"},
		{"saturation inf", m, with(func(o *Options) { o.Saturation = []float64{inf, 0, 0} }), "saturation of channel 0"},
		{"nongrey negative", m, with(func(o *Options) { o.NongreyLimit = -1 }), "non-grey limit"},
		{"nongrey NaN", m, with(func(o *Options) { o.NongreyLimit = nan }), "non-grey limit"},
		{"fit terms 3", m, with(func(o *Options) { o.FitTerms = 3 }), "fit terms 3"},
		{"fit terms 2 of 2 channels", m[:2], with(func(o *Options) { o.FitTerms = 2 }), "at most N − 1 = 1"},
		{"fit terms negative", m, with(func(o *Options) { o.FitTerms = -1 }), "fit terms -1"},
		{"pair reversed", m, with(func(o *Options) { o.Publish = Selection{Kind: SelectPair, I: 2, J: 1} }), "published pair (2, 1)"},
		{"pair out of range", m, with(func(o *Options) { o.Publish = Selection{Kind: SelectPair, I: 0, J: 3} }), "published pair (0, 3)"},
		{"pair same", m, with(func(o *Options) { o.Publish = Selection{Kind: SelectPair, I: 1, J: 1} }), "published pair (1, 1)"},
		{"kind", m, with(func(o *Options) { o.Publish = Selection{Kind: 9} }), "selection kind 9"},
		{"underflow", m, with(func(o *Options) { o.Min = 20 }), "need finite and > 0"},
		{"ratio decreasing", []Model{fakeModel{m[2], 0.5e-6}, fakeModel{m[1], 0.6e-6}}, ok, "signal ratio not strictly increasing"},
	} {
		_, err := NewPyrometer(c.models, c.o)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", c.name, err, c.want)
		}
	}
}

func TestPyrometerZeroValuePanics(t *testing.T) {
	// Using a Pyrometer not built by NewPyrometer is a caller bug.
	defer func() {
		if p := recover(); p == nil || !strings.Contains(p.(string), "NewPyrometer") {
			t.Errorf("panic %v, want one naming NewPyrometer", p)
		}
	}()
	var p Pyrometer
	var res Result
	p.Convert([]float64{1, 1}, &res)
}
