package convert

import "math"

// Glow colour: the chromaticity of a blackbody and an sRGB swatch of it.
//
// The colour-matching functions are tabulated, not fitted: the analytic
// multi-lobe Gaussian fit of Wyman, Sloan & Shirley ("Simple Analytic
// Approximations to the CIE XYZ Color Matching Functions", JCGT 2(2), 2013)
// puts CIE illuminant A at x = 0.44639, y = 0.40849, 0.0012 and 0.0010 away
// from the published chromaticity, where the table below lands within
// 0.00004.

// Grid of the colour-matching-function table: 5 nm steps from 380 nm to
// 780 nm, the interval and range CIE 15:2004 recommends for colorimetric
// summation.
const (
	cmfFirst = 380e-9 // m, wavelength of the first row
	cmfStep  = 5e-9   // m
	cmfRows  = 81     // 380 nm to 780 nm inclusive
)

// cie1931 returns the colour-matching functions x̄(λ), ȳ(λ), z̄(λ) of the
// CIE 1931 standard colorimetric observer (2°), one row per 5 nm from
// 380 nm to 780 nm, as CIE 15:2004 (Colorimetry, 3rd ed., Table T.4)
// tabulates them to six decimals. The rows were transcribed from the CIE
// 1931 standard observer table: every fifth row of a copy of the CIE's
// 1 nm data set ("Colour-matching functions of CIE 1931 standard
// colorimetric observer", CIE 2019, DOI 10.25039/CIE.DS.xvudnb9b, file
// CIE_xyz_1931_2deg.csv), rounded to six decimals, which gives the values
// of the 5 nm table. ȳ is the photopic luminous efficiency V(λ), 1 at
// 555 nm. The table is built on each call (it lives on the stack: convert
// keeps no package-level state).
func cie1931() [cmfRows][3]float64 {
	return [cmfRows][3]float64{
		{0.001368, 0.000039, 0.006450}, // 380 nm
		{0.002236, 0.000064, 0.010550}, // 385 nm
		{0.004243, 0.000120, 0.020050}, // 390 nm
		{0.007650, 0.000217, 0.036210}, // 395 nm
		{0.014310, 0.000396, 0.067850}, // 400 nm
		{0.023190, 0.000640, 0.110200}, // 405 nm
		{0.043510, 0.001210, 0.207400}, // 410 nm
		{0.077630, 0.002180, 0.371300}, // 415 nm
		{0.134380, 0.004000, 0.645600}, // 420 nm
		{0.214770, 0.007300, 1.039050}, // 425 nm
		{0.283900, 0.011600, 1.385600}, // 430 nm
		{0.328500, 0.016840, 1.622960}, // 435 nm
		{0.348280, 0.023000, 1.747060}, // 440 nm
		{0.348060, 0.029800, 1.782600}, // 445 nm
		{0.336200, 0.038000, 1.772110}, // 450 nm
		{0.318700, 0.048000, 1.744100}, // 455 nm
		{0.290800, 0.060000, 1.669200}, // 460 nm
		{0.251100, 0.073900, 1.528100}, // 465 nm
		{0.195360, 0.090980, 1.287640}, // 470 nm
		{0.142100, 0.112600, 1.041900}, // 475 nm
		{0.095640, 0.139020, 0.812950}, // 480 nm
		{0.057950, 0.169300, 0.616200}, // 485 nm
		{0.032010, 0.208020, 0.465180}, // 490 nm
		{0.014700, 0.258600, 0.353300}, // 495 nm
		{0.004900, 0.323000, 0.272000}, // 500 nm
		{0.002400, 0.407300, 0.212300}, // 505 nm
		{0.009300, 0.503000, 0.158200}, // 510 nm
		{0.029100, 0.608200, 0.111700}, // 515 nm
		{0.063270, 0.710000, 0.078250}, // 520 nm
		{0.109600, 0.793200, 0.057250}, // 525 nm
		{0.165500, 0.862000, 0.042160}, // 530 nm
		{0.225750, 0.914850, 0.029840}, // 535 nm
		{0.290400, 0.954000, 0.020300}, // 540 nm
		{0.359700, 0.980300, 0.013400}, // 545 nm
		{0.433450, 0.994950, 0.008750}, // 550 nm
		{0.512050, 1.000000, 0.005750}, // 555 nm
		{0.594500, 0.995000, 0.003900}, // 560 nm
		{0.678400, 0.978600, 0.002750}, // 565 nm
		{0.762100, 0.952000, 0.002100}, // 570 nm
		{0.842500, 0.915400, 0.001800}, // 575 nm
		{0.916300, 0.870000, 0.001650}, // 580 nm
		{0.978600, 0.816300, 0.001400}, // 585 nm
		{1.026300, 0.757000, 0.001100}, // 590 nm
		{1.056700, 0.694900, 0.001000}, // 595 nm
		{1.062200, 0.631000, 0.000800}, // 600 nm
		{1.045600, 0.566800, 0.000600}, // 605 nm
		{1.002600, 0.503000, 0.000340}, // 610 nm
		{0.938400, 0.441200, 0.000240}, // 615 nm
		{0.854450, 0.381000, 0.000190}, // 620 nm
		{0.751400, 0.321000, 0.000100}, // 625 nm
		{0.642400, 0.265000, 0.000050}, // 630 nm
		{0.541900, 0.217000, 0.000030}, // 635 nm
		{0.447900, 0.175000, 0.000020}, // 640 nm
		{0.360800, 0.138200, 0.000010}, // 645 nm
		{0.283500, 0.107000, 0.000000}, // 650 nm
		{0.218700, 0.081600, 0.000000}, // 655 nm
		{0.164900, 0.061000, 0.000000}, // 660 nm
		{0.121200, 0.044580, 0.000000}, // 665 nm
		{0.087400, 0.032000, 0.000000}, // 670 nm
		{0.063600, 0.023200, 0.000000}, // 675 nm
		{0.046770, 0.017000, 0.000000}, // 680 nm
		{0.032900, 0.011920, 0.000000}, // 685 nm
		{0.022700, 0.008210, 0.000000}, // 690 nm
		{0.015840, 0.005723, 0.000000}, // 695 nm
		{0.011359, 0.004102, 0.000000}, // 700 nm
		{0.008111, 0.002929, 0.000000}, // 705 nm
		{0.005790, 0.002091, 0.000000}, // 710 nm
		{0.004109, 0.001484, 0.000000}, // 715 nm
		{0.002899, 0.001047, 0.000000}, // 720 nm
		{0.002049, 0.000740, 0.000000}, // 725 nm
		{0.001440, 0.000520, 0.000000}, // 730 nm
		{0.001000, 0.000361, 0.000000}, // 735 nm
		{0.000690, 0.000249, 0.000000}, // 740 nm
		{0.000476, 0.000172, 0.000000}, // 745 nm
		{0.000332, 0.000120, 0.000000}, // 750 nm
		{0.000235, 0.000085, 0.000000}, // 755 nm
		{0.000166, 0.000060, 0.000000}, // 760 nm
		{0.000117, 0.000042, 0.000000}, // 765 nm
		{0.000083, 0.000030, 0.000000}, // 770 nm
		{0.000059, 0.000021, 0.000000}, // 775 nm
		{0.000042, 0.000015, 0.000000}, // 780 nm
	}
}

// GlowColor returns the colour a blackbody at temperature tK (kelvin)
// glows with: its CIE 1931 chromaticity (x, y) and an sRGB swatch rgb of
// that chromaticity at full brightness.
//
// The tristimulus values are sums over the 5 nm table of cie1931 (CIE
// 15:2004, 380–780 nm) weighted by Planck's law with the ITS-90 second
// radiation constant (C2ITS90),
//
//	X = Σ L(λ,T) x̄(λ),  Y = Σ L(λ,T) ȳ(λ),  Z = Σ L(λ,T) z̄(λ)
//	x = X/(X+Y+Z),      y = Y/(X+Y+Z)
//
// with L in any unit (it cancels): here L(λ,T)/L(780 nm,T), written so
// that neither term overflows nor all terms underflow at any T > 0. Check
// value: CIE standard illuminant A, a Planckian radiator at 2856 K, has
// x = 0.44757, y = 0.40745 (CIE 15:2004); GlowColor(2856) is within
// 0.00004 of both. Far below 1000 K the sums approach the chromaticity of
// the table's longest wavelength (x ≈ 0.737, y ≈ 0.263); as T grows the
// colour moves from deep red through orange and white towards the blue
// Rayleigh–Jeans limit.
//
// The swatch is the sRGB colour (IEC 61966-2-1) of the chromaticity, with
// the brightness left out: XYZ = (x/y, 1, (1−x−y)/y) goes through the sRGB
// matrix to linear RGB, a negative component (a chromaticity outside the
// sRGB gamut, which is the case for every blackbody below about 1900 K) is
// set to 0, the triple is scaled so that its largest component is 1, and
// each component is encoded with the sRGB transfer function and rounded
// to 0..255. So the swatch shows the hue of the glow, not how bright it is:
// a target at 700 °C and one at 1500 °C differ in colour here, not in
// lightness.
//
// For tK ≤ 0, NaN or +Inf there is no glow: x and y are NaN and rgb is
// black.
func GlowColor(tK float64) (x, y float64, rgb [3]uint8) {
	if !(tK > 0) || math.IsInf(tK, 1) {
		return math.NaN(), math.NaN(), [3]uint8{}
	}
	X, Y, Z := planckTristimulus(tK, C2ITS90)
	s := X + Y + Z
	x, y = X/s, Y/s
	return x, y, chromaticitySRGB(x, y)
}

// planckTristimulus returns the CIE 1931 tristimulus values of a
// blackbody at t (K, > 0) with second radiation constant c2 (m·K),
// relative to its spectral radiance at 780 nm:
//
//	w(λ) = L(λ,T)/L(λmax,T) = (λmax/λ)⁵ · expm1(a_max)/expm1(a)
//	     = (λmax/λ)⁵ · exp(a_max − a) · expm1(−a_max)/expm1(−a)
//
// with a = c2/(λT), a_max = c2/(λmax T), λmax = 780 nm. The second form
// keeps every factor finite: exp(a_max − a) ≤ 1 and the expm1 ratio lies
// in (0, 1]. The term at 780 nm is 1, so the sums are never all zero,
// even when c2/T overflows.
func planckTristimulus(t, c2 float64) (X, Y, Z float64) {
	cmf := cie1931()
	lmax := cmfWavelength(cmfRows - 1)
	b := c2 / t // m; +Inf for t far below c2
	emax := math.Expm1(-b / lmax)
	for i := range cmf {
		l := cmfWavelength(i)
		// a_max − a = −b·(1/λ − 1/λmax), kept apart from b so that an
		// infinite b with λ = λmax gives exp(0) and not exp(NaN).
		e := 1.0
		if d := 1/l - 1/lmax; d > 0 {
			e = math.Exp(-b * d)
		}
		r := lmax / l
		r2 := r * r
		w := r2 * r2 * r * e * emax / math.Expm1(-b/l)
		X += w * cmf[i][0]
		Y += w * cmf[i][1]
		Z += w * cmf[i][2]
	}
	return X, Y, Z
}

// cmfWavelength returns the wavelength of row i of cie1931, m. Every
// wavelength is computed this one way, so that the last row and λmax are
// the same number.
func cmfWavelength(i int) float64 {
	return cmfFirst + float64(i)*cmfStep
}

// chromaticitySRGB returns the sRGB colour of chromaticity (x, y) at full
// brightness, as GlowColor describes: XYZ with Y = 1, the IEC 61966-2-1
// matrix
//
//	R =  3.2406 X − 1.5372 Y − 0.4986 Z
//	G = −0.9689 X + 1.8758 Y + 0.0415 Z
//	B =  0.0557 X − 0.2040 Y + 1.0570 Z
//
// negative components set to 0, scaled so the largest is 1, then the sRGB
// transfer function: 12.92·v for v ≤ 0.0031308, else 1.055·v^(1/2.4) − 0.055.
// A chromaticity with y ≤ 0 or a non-finite coordinate gives black.
func chromaticitySRGB(x, y float64) [3]uint8 {
	if !(y > 0) || math.IsNaN(x) || math.IsInf(x, 0) || math.IsInf(y, 0) {
		return [3]uint8{}
	}
	X, Y, Z := x/y, 1.0, (1-x-y)/y
	lin := [3]float64{
		3.2406*X - 1.5372*Y - 0.4986*Z,
		-0.9689*X + 1.8758*Y + 0.0415*Z,
		0.0557*X - 0.2040*Y + 1.0570*Z,
	}
	m := 0.0
	for i, v := range lin {
		if !(v > 0) {
			lin[i] = 0
		}
		m = math.Max(m, lin[i])
	}
	var rgb [3]uint8
	if m == 0 {
		return rgb
	}
	for i, v := range lin {
		v /= m
		if v <= 0.0031308 {
			v *= 12.92
		} else {
			v = 1.055*math.Pow(v, 1/2.4) - 0.055
		}
		rgb[i] = uint8(math.Round(255 * math.Min(1, math.Max(0, v))))
	}
	return rgb
}
