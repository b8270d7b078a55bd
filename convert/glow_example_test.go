package convert_test

import (
	"fmt"

	"glowgate/convert"
)

func ExampleGlowColor() {
	// CIE illuminant A (2856 K) and a strand at 1150 °C.
	for _, tK := range []float64{2856, 1150 + 273.15} {
		x, y, rgb := convert.GlowColor(tK)
		fmt.Printf("%.2f K: x = %.4f, y = %.4f, sRGB #%02x%02x%02x\n", tK, x, y, rgb[0], rgb[1], rgb[2])
	}
	// Output:
	// 2856.00 K: x = 0.4475, y = 0.4074, sRGB #ffb264
	// 1423.15 K: x = 0.5955, y = 0.3876, sRGB #ff5f00
}
