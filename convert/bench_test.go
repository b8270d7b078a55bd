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
