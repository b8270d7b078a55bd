package convert_test

import (
	"fmt"

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
