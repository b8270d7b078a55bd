package convert_test

import (
	"fmt"
	"math"

	"glowgate/convert"
)

func ExamplePlanck() {
	// Spectral radiance of a blackbody at 1000 °C seen at 0.9 µm, with the
	// ITS-90 second radiation constant.
	l := convert.Planck(0.9e-6, 1273.15, convert.C2ITS90)
	fmt.Printf("L = %.4e W·m⁻³·sr⁻¹\n", l)
	// Output:
	// L = 7.1019e+08 W·m⁻³·sr⁻¹
}

func ExampleRatio_Convert() {
	short, err := convert.NewBand(0.875e-6, 0.925e-6, convert.C2ITS90)
	if err != nil {
		panic(err)
	}
	long, err := convert.NewBand(1.025e-6, 1.075e-6, convert.C2ITS90)
	if err != nil {
		panic(err)
	}
	// Grey target (k = 1), measuring range 700–3000 K, low-signal limit 2 %.
	r, err := convert.NewRatio(short, long, 1, 700, 3000, 0.02)
	if err != nil {
		panic(err)
	}
	// A target at 1273.15 K seen through a window and smoke that pass 30 %
	// in both channels.
	res := r.Convert(0.3*short.Signal(1273.15), 0.3*long.Signal(1273.15))
	fmt.Printf("T = %.2f K, fractions %.2f %.2f, flags %v\n", res.Temperature, res.Channels[0].Fraction, res.Channels[1].Fraction, res.Flags)
	// Brightness temperatures read low by the 70 % loss (scipy brentq on
	// quad band radiances: 1161.572 K and 1144.945 K).
	fmt.Printf("brightness %.1f K %.1f K\n", res.Channels[0].Brightness, res.Channels[1].Brightness)

	// The same target behind 99 % obstruction: the reading holds, the
	// low-signal flag says how far to trust it.
	res = r.Convert(0.01*short.Signal(1273.15), 0.01*long.Signal(1273.15))
	fmt.Printf("T = %.2f K, flags %v\n", res.Temperature, res.Flags)

	// A dead channel gives no temperature.
	res = r.Convert(0, long.Signal(1273.15))
	fmt.Printf("T = %.2f K, flags %v\n", res.Temperature, res.Flags)
	// Output:
	// T = 1273.15 K, fractions 0.30 0.30, flags ok
	// brightness 1161.6 K 1144.9 K
	// T = 1273.15 K, flags low_signal
	// T = NaN K, flags no_signal
}

func ExampleFlags_Names() {
	f := convert.LowSignal | convert.AboveRange
	fmt.Println(f.Names())
	// Output:
	// [low_signal above_range]
}

func ExamplePyrometer_Convert() {
	short, err := convert.NewBand(0.875e-6, 0.925e-6, convert.C2ITS90)
	if err != nil {
		panic(err)
	}
	long, err := convert.NewBand(1.025e-6, 1.075e-6, convert.C2ITS90)
	if err != nil {
		panic(err)
	}
	// A two-colour head: measuring range 700–3000 K, low-signal limit 5 %,
	// the long channel saturating at 200 W·m⁻²·sr⁻¹.
	p, err := convert.NewPyrometer([]convert.Model{short, long}, convert.Options{
		Min: 700, Max: 3000, LowSignal: 0.05, Saturation: []float64{0, 200},
	})
	if err != nil {
		panic(err)
	}
	var res convert.Result
	// A grey target at 1500 K behind a neutral loss that passes 20 %.
	p.Convert([]float64{0.2 * short.Signal(1500), 0.2 * long.Signal(1500)}, &res)
	fmt.Printf("T = %.3f K, fractions %.3f %.3f, flags %v\n", res.Temperature, res.Channels[0].Fraction, res.Channels[1].Fraction, res.Flags)

	// The same target at 2500 K without the loss: the long channel
	// saturates, so there is no temperature.
	p.Convert([]float64{short.Signal(2500), long.Signal(2500)}, &res)
	fmt.Printf("T = %.3f K, flags %v\n", res.Temperature, res.Flags)
	// Output:
	// T = 1500.000 K, fractions 0.200 0.200, flags ok
	// T = NaN K, flags saturated
}

func ExamplePyrometer_Convert_threeColour() {
	var models []convert.Model
	for _, centre := range []float64{0.75e-6, 0.9e-6, 1.05e-6} {
		b, err := convert.NewBand(centre-25e-9, centre+25e-9, convert.C2ITS90)
		if err != nil {
			panic(err)
		}
		models = append(models, b)
	}
	// Three colours; the multi-colour fit (ln ε = a + b·λ) is published,
	// and a spread of the pair temperatures above 5 K flags the target.
	// The fit is exact here only because the target's emissivity is of the
	// fit's form; it is an estimate, never the truth.
	p, err := convert.NewPyrometer(models, convert.Options{
		Min: 700, Max: 3000, NongreyLimit: 5, Publish: convert.Selection{Kind: convert.SelectFit},
	})
	if err != nil {
		panic(err)
	}
	// A target at 1800 K whose emissivity falls with wavelength:
	// ε = 0.5·exp(−0.3·(λ − 0.9 µm)/µm).
	signals := make([]float64, len(models))
	for i, m := range models {
		um := m.Wavelength() * 1e6
		signals[i] = 0.5 * math.Exp(-0.3*(um-0.9)) * m.Signal(1800)
	}
	var res convert.Result
	p.Convert(signals, &res)
	for _, pr := range res.Pairs[:res.NPairs] {
		fmt.Printf("pair %d/%d: %.1f K\n", pr.I, pr.J, pr.Temperature)
	}
	fmt.Printf("non-grey index %.1f K, flags %v\n", res.Nongrey, res.Flags)
	fmt.Printf("fit: T = %.3f K, slope %.3f /µm, residual below 1e-9: %v\n", res.Fit.Temperature, res.Fit.Slope, res.Fit.Residual < 1e-9)
	fmt.Printf("published T = %.3f K\n", res.Temperature)
	// Output:
	// pair 0/1: 1847.1 K
	// pair 1/2: 1866.6 K
	// pair 0/2: 1855.2 K
	// non-grey index 19.4 K, flags nongrey
	// fit: T = 1800.000 K, slope -0.300 /µm, residual below 1e-9: true
	// published T = 1800.000 K
}

func ExampleC2ByName() {
	c2, err := convert.C2ByName("codata2018")
	if err != nil {
		panic(err)
	}
	fmt.Println(c2, convert.C2ITS90)
	// Output:
	// 0.01438776877 0.014388
}
