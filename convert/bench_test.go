package convert

import "testing"

// benchRatio is the two-band converter of the performance target: ideal
// bands 0.875–0.925 µm and 1.025–1.075 µm, c2 = C2ITS90, range 700–3000 K.
func benchRatio(b *testing.B) *Ratio {
	b.Helper()
	short, err := NewBand(0.875e-6, 0.925e-6, C2ITS90)
	if err != nil {
		b.Fatal(err)
	}
	long, err := NewBand(1.025e-6, 1.075e-6, C2ITS90)
	if err != nil {
		b.Fatal(err)
	}
	r, err := NewRatio(short, long, 1, 700, 3000, 0.02)
	if err != nil {
		b.Fatal(err)
	}
	return r
}

// BenchmarkRatioConvert measures Ratio.Convert on the two-band pair over a
// spread of temperatures and signal fractions (grey losses of 0–90 %).
// Target: ≤ 2 µs/op and 0 allocs/op.
func BenchmarkRatioConvert(b *testing.B) {
	r := benchRatio(b)
	type pair struct{ s1, s2 float64 }
	var in []pair
	for _, t := range []float64{750, 973.15, 1273.15, 1600, 1873.15, 2273.15, 2600, 2950} {
		for _, f := range []float64{1, 0.5, 0.1} {
			in = append(in, pair{f * r.Short.Signal(t), 0.98 * f * r.Long.Signal(t)})
		}
	}
	b.ReportAllocs()
	b.ResetTimer()
	var sink float64
	for i := 0; b.Loop(); i++ {
		p := in[i%len(in)]
		sink += r.Convert(p.s1, p.s2).Temperature
	}
	_ = sink
}

// BenchmarkBandSignalDeriv measures one band evaluation (S and dS/dT).
func BenchmarkBandSignalDeriv(b *testing.B) {
	band, err := NewBand(0.875e-6, 0.925e-6, C2ITS90)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	var sink float64
	for i := 0; b.Loop(); i++ {
		s, ds := band.SignalDeriv(1000 + float64(i%2000))
		sink += s + ds
	}
	_ = sink
}

// benchSignals are readings of a target at temperatures across the
// measuring range behind grey losses of 0–90 %, with a slight non-grey
// tilt (ε falls 2 % per channel step).
func benchSignals(models []Model) [][]float64 {
	var in [][]float64
	for _, t := range []float64{750, 973.15, 1273.15, 1600, 1873.15, 2273.15, 2600, 2950} {
		for _, f := range []float64{1, 0.5, 0.1} {
			s := make([]float64, len(models))
			for i, m := range models {
				s[i] = f * (1 - 0.02*float64(i)) * m.Signal(t)
			}
			in = append(in, s)
		}
	}
	return in
}

// BenchmarkPyrometerTwoColour measures Pyrometer.Convert on two ideal
// 50 nm bands, 0.875–0.925 µm and 1.025–1.075 µm, range 700–3000 K.
// Target: ≤ 0.6 µs/op and 0 allocs/op.
func BenchmarkPyrometerTwoColour(b *testing.B) {
	models := []Model{mustBand(b, 0.875e-6, 0.925e-6), mustBand(b, 1.025e-6, 1.075e-6)}
	p, err := NewPyrometer(models, Options{Min: 700, Max: 3000, LowSignal: 0.02})
	if err != nil {
		b.Fatal(err)
	}
	in := benchSignals(models)
	var res Result
	b.ReportAllocs()
	b.ResetTimer()
	var sink float64
	for i := 0; b.Loop(); i++ {
		p.Convert(in[i%len(in)], &res)
		sink += res.Temperature
	}
	_ = sink
}

// BenchmarkPyrometerThreeColourFit measures Pyrometer.Convert on three
// ideal 50 nm bands at 0.75, 0.9 and 1.05 µm with the two-term fit
// published, range 700–3000 K. Target: ≤ 5 µs/op and 0 allocs/op.
func BenchmarkPyrometerThreeColourFit(b *testing.B) {
	models := []Model{mustBand(b, 0.725e-6, 0.775e-6), mustBand(b, 0.875e-6, 0.925e-6), mustBand(b, 1.025e-6, 1.075e-6)}
	p, err := NewPyrometer(models, Options{Min: 700, Max: 3000, LowSignal: 0.02, Publish: Selection{Kind: SelectFit}, NongreyLimit: 5})
	if err != nil {
		b.Fatal(err)
	}
	in := benchSignals(models)
	var res Result
	b.ReportAllocs()
	b.ResetTimer()
	var sink float64
	for i := 0; b.Loop(); i++ {
		p.Convert(in[i%len(in)], &res)
		sink += res.Temperature
	}
	_ = sink
}

// BenchmarkPyrometerEightColourFit measures Pyrometer.Convert on eight
// ideal 40 nm bands from 0.7 to 1.4 µm with the two-term fit published.
func BenchmarkPyrometerEightColourFit(b *testing.B) {
	models := eightBands(b)
	p, err := NewPyrometer(models, Options{Min: 700, Max: 3000, Publish: Selection{Kind: SelectFit}, NongreyLimit: 5})
	if err != nil {
		b.Fatal(err)
	}
	in := benchSignals(models)
	var res Result
	b.ReportAllocs()
	b.ResetTimer()
	var sink float64
	for i := 0; b.Loop(); i++ {
		p.Convert(in[i%len(in)], &res)
		sink += res.Temperature
	}
	_ = sink
}

// BenchmarkResponsivitySignalDeriv measures one evaluation of a
// triangular responsivity (0.85–0.92–0.95 µm) at 700–2700 K.
func BenchmarkResponsivitySignalDeriv(b *testing.B) {
	m, err := NewResponsivity([]float64{0.85e-6, 0.92e-6, 0.95e-6}, []float64{0, 1, 0}, C2ITS90)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	var sink float64
	for i := 0; b.Loop(); i++ {
		s, ds := m.SignalDeriv(700 + float64(i%2000))
		sink += s + ds
	}
	_ = sink
}
