package convert

import (
	"math"
	"testing"
)

func TestGlowColorIlluminantA(t *testing.T) {
	// CIE 15:2004: standard illuminant A is a Planckian radiator at 2856 K
	// (on the ITS-90 c2 = 1.4388e-2 m·K) with chromaticity x = 0.44757,
	// y = 0.40745. glowgate requires agreement within 0.0005; the 5 nm
	// summation lands within 0.00004.
	x, y, rgb := GlowColor(2856)
	if math.Abs(x-0.44757) > 0.0005 || math.Abs(y-0.40745) > 0.0005 {
		t.Errorf("GlowColor(2856 K) = (%.5f, %.5f), want (0.44757, 0.40745) ± 0.0005 (CIE 15:2004, illuminant A)", x, y)
	}
	// A warm, orange-white: red full, green over blue, blue well above 0.
	if rgb[0] != 255 || !(rgb[1] > rgb[2]) || rgb[2] < 50 {
		t.Errorf("GlowColor(2856 K) swatch = %v, want a warm white (255, g > b, b ≥ 50)", rgb)
	}
}

func TestGlowColorIlluminantAOldConstant(t *testing.T) {
	// CIE 15:2004 writes illuminant A's spectrum with the old constant
	// c2 = 1.435e-2 m·K at 2848 K, which is the same spectrum as 2856 K
	// on c2 = 1.4388e-2 (only c2/T enters). Same chromaticity, same source.
	X, Y, Z := planckTristimulus(2848, 1.435e-2)
	x, y := X/(X+Y+Z), Y/(X+Y+Z)
	if math.Abs(x-0.44757) > 0.0005 || math.Abs(y-0.40745) > 0.0005 {
		t.Errorf("illuminant A with c2 = 1.435e-2 at 2848 K: (%.5f, %.5f), want (0.44757, 0.40745) ± 0.0005 (CIE 15:2004)", x, y)
	}
}

func TestCIE1931Table(t *testing.T) {
	cmf := cie1931()
	// Sums of the 5 nm table over 380–780 nm, as printed at the foot of the
	// CIE 1931 5 nm table (CIE 15:2004 Table T.4; figures from memory):
	// 21.371524, 21.371327, 21.371540. A mistyped row shows here.
	want := [3]float64{21.371524, 21.371327, 21.371540}
	var sum [3]float64
	for _, row := range cmf {
		for j := range row {
			sum[j] += row[j]
		}
	}
	for j := range sum {
		if math.Abs(sum[j]-want[j]) > 5e-7 {
			t.Errorf("column %d sums to %.6f, want %.6f (CIE 15:2004 Table T.4)", j, sum[j], want[j])
		}
	}
	// ȳ is V(λ), whose maximum 1 lies at 555 nm (CIE 1931 definition).
	peak := 0
	for i, row := range cmf {
		if row[1] > cmf[peak][1] {
			peak = i
		}
		for j, v := range row {
			if !(v >= 0) {
				t.Errorf("row %d column %d = %v, want ≥ 0", i, j, v)
			}
		}
	}
	if nm := 380 + 5*peak; nm != 555 || cmf[peak][1] != 1 {
		t.Errorf("ȳ peaks at %d nm with %v, want 1 at 555 nm", nm, cmf[peak][1])
	}
	// Spot rows of CIE 15:2004 Table T.4 (the 1 nm CIE data set, DOI
	// 10.25039/CIE.DS.xvudnb9b, at the same wavelengths).
	spots := []struct {
		nm      int
		x, y, z float64
	}{
		{380, 0.001368, 0.000039, 0.006450},
		{445, 0.348060, 0.029800, 1.782600},
		{600, 1.062200, 0.631000, 0.000800},
		{780, 0.000042, 0.000015, 0},
	}
	for _, s := range spots {
		row := cmf[(s.nm-380)/5]
		if row != [3]float64{s.x, s.y, s.z} {
			t.Errorf("%d nm: %v, want [%v %v %v]", s.nm, row, s.x, s.y, s.z)
		}
	}
}

func TestGlowColorLocus(t *testing.T) {
	// Identities of the Planckian locus: x falls monotonically with T over
	// the range of hot targets and beyond; the swatch is pure red below
	// about 800 K and gains green, then blue, as T rises; the locus
	// approaches the chromaticity of the λ⁻⁴ (Rayleigh–Jeans) weighting.
	prevX := math.Inf(1)
	for tK := 900.0; tK <= 20000; tK += 100 {
		x, y, rgb := GlowColor(tK)
		if !(x < prevX) {
			t.Fatalf("x(%g K) = %v not below x at %g K = %v", tK, x, tK-100, prevX)
		}
		prevX = x
		if !(y > 0.2 && y < 0.45) {
			t.Errorf("y(%g K) = %v outside the locus band 0.2..0.45", tK, y)
		}
		if tK < 6000 && !(rgb[0] == 255 && rgb[0] >= rgb[1] && rgb[1] >= rgb[2]) {
			t.Errorf("swatch at %g K = %v, want red ≥ green ≥ blue with red full", tK, rgb)
		}
	}
	if _, _, rgb := GlowColor(700); rgb != [3]uint8{255, 0, 0} {
		t.Errorf("swatch at 700 K = %v, want pure red (chromaticity outside the sRGB gamut)", rgb)
	}
	if _, _, rgb := GlowColor(15000); !(rgb[2] == 255 && rgb[0] < rgb[1]) {
		t.Errorf("swatch at 15000 K = %v, want blue full and red lowest", rgb)
	}

	// Rayleigh–Jeans limit: weights λ⁻⁴ over the same table.
	cmf := cie1931()
	var X, Y, Z float64
	for i, row := range cmf {
		l := 380 + 5*float64(i)
		w := math.Pow(l, -4)
		X += w * row[0]
		Y += w * row[1]
		Z += w * row[2]
	}
	xRJ, yRJ := X/(X+Y+Z), Y/(X+Y+Z)
	x, y, _ := GlowColor(1e9)
	if math.Abs(x-xRJ) > 1e-4 || math.Abs(y-yRJ) > 1e-4 {
		t.Errorf("GlowColor(1e9 K) = (%.5f, %.5f), want the Rayleigh–Jeans limit (%.5f, %.5f)", x, y, xRJ, yRJ)
	}

	// Very low temperatures: no overflow or 0/0; the colour of the
	// longest tabulated wavelength, 780 nm.
	x780, y780 := cmf[80][0]/(cmf[80][0]+cmf[80][1]+cmf[80][2]), cmf[80][1]/(cmf[80][0]+cmf[80][1]+cmf[80][2])
	for _, tK := range []float64{1e-300, 1e-3, 1, 20} {
		x, y, rgb := GlowColor(tK)
		if math.Abs(x-x780) > 1e-5 || math.Abs(y-y780) > 1e-5 || rgb != [3]uint8{255, 0, 0} {
			t.Errorf("GlowColor(%g K) = (%v, %v, %v), want (%.5f, %.5f, [255 0 0])", tK, x, y, rgb, x780, y780)
		}
	}
}

func TestGlowColorBadInput(t *testing.T) {
	for _, tK := range []float64{0, -1, math.Copysign(0, -1), math.NaN(), math.Inf(1), math.Inf(-1)} {
		x, y, rgb := GlowColor(tK)
		if !math.IsNaN(x) || !math.IsNaN(y) || rgb != [3]uint8{} {
			t.Errorf("GlowColor(%v) = (%v, %v, %v), want (NaN, NaN, black)", tK, x, y, rgb)
		}
	}
}

func TestChromaticitySRGB(t *testing.T) {
	// IEC 61966-2-1: the sRGB primaries and the D65 white point map to the
	// pure primaries and to white (±1 count: the matrix is printed to four
	// decimals).
	cases := []struct {
		name string
		x, y float64
		want [3]uint8
	}{
		{"D65 white", 0.3127, 0.3290, [3]uint8{255, 255, 255}},
		{"red primary", 0.64, 0.33, [3]uint8{255, 0, 0}},
		{"green primary", 0.30, 0.60, [3]uint8{0, 255, 0}},
		{"blue primary", 0.15, 0.06, [3]uint8{0, 0, 255}},
		{"y = 0", 0.3, 0, [3]uint8{}},
		{"NaN", math.NaN(), 0.3, [3]uint8{}},
	}
	for _, c := range cases {
		got := chromaticitySRGB(c.x, c.y)
		for i := range got {
			if d := int(got[i]) - int(c.want[i]); d < -1 || d > 1 {
				t.Errorf("%s (%v, %v): %v, want %v ± 1", c.name, c.x, c.y, got, c.want)
				break
			}
		}
	}
}

func BenchmarkGlowColor(b *testing.B) {
	for i := 0; b.Loop(); i++ {
		GlowColor(1000 + float64(i%2000))
	}
}
