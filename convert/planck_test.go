package convert

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/integrate/quad"
)

// Constants of the tests (CODATA 2018; TestConstantsMatchScipy checks
// them against scipy.constants).
const (
	sigmaSB = 5.670374419e-8 // Stefan–Boltzmann constant, W·m⁻²·K⁻⁴
	wienB   = 2.897771955e-3 // Wien displacement constant, m·K
)

// planckPeak returns the wavelength of the maximum of L(λ, T) by golden-
// section search on Planck itself.
func planckPeak(t, c2 float64) float64 {
	a, b := 1e-3/t, 5e-3/t
	for range 200 {
		m1 := b - (b-a)/math.Phi
		m2 := a + (b-a)/math.Phi
		if Planck(m1, t, c2) > Planck(m2, t, c2) {
			b = m2
		} else {
			a = m1
		}
	}
	return (a + b) / 2
}

func TestPlanckPeak(t *testing.T) {
	for _, temp := range []float64{300, 1000, 2856, 6000} {
		lm := planckPeak(temp, C2CODATA2018)
		// Wien displacement b = 2.897771955e-3 m·K (CODATA 2018), with the
		// CODATA c2 since b = c2/4.965114231744276.
		if got := lm * temp; math.Abs(got-wienB) > 0.01e-6 {
			t.Errorf("T=%g K: peak at λT = %.6f µm·K, want %.6f (CODATA 2018 Wien b)", temp, got*1e6, wienB*1e6)
		}
		// Peak L/(σT⁵) ≈ 0.722318e-4 (µm·K·sr)⁻¹ (Incropera & DeWitt,
		// blackbody radiation functions table). That table was made with
		// older constants; with CODATA 2018 c1L, c2 and σ the value is
		// 0.7222935e-4, 3.4e-5 relative below it, so the tolerance is 5e-5.
		got := Planck(lm, temp, C2CODATA2018) / (sigmaSB * math.Pow(temp, 5)) * 1e-6
		if rel := math.Abs(got/0.722318e-4 - 1); rel > 5e-5 {
			t.Errorf("T=%g K: peak L/(σT⁵) = %.7e (µm·K·sr)⁻¹, want 0.722318e-4 within 5e-5 relative (off %.2e)", temp, got, rel)
		}
	}
}

func TestBlackbodyFraction(t *testing.T) {
	// F(0→λT) = π∫₀^λ L dλ / (σT⁴) (Incropera & DeWitt, blackbody radiation
	// functions table; sixth digit differs with older constants, hence 2e-5
	// relative). Integral by gonum's fixed Gauss–Legendre rule, 400 nodes.
	const temp = 1000.0
	for _, c := range []struct{ lt, want float64 }{
		{2898, 0.250108},
		{3000, 0.273232},
	} {
		lam := c.lt * 1e-6 / temp
		l := quad.Fixed(func(x float64) float64 { return Planck(x, temp, C2CODATA2018) }, 0, lam, 400, nil, 0)
		got := math.Pi * l / (sigmaSB * math.Pow(temp, 4))
		if math.Abs(got/c.want-1) > 2e-5 {
			t.Errorf("F(0→%g µm·K) = %.6f, want %.6f (Incropera & DeWitt)", c.lt, got, c.want)
		}
	}
}

func TestWienApproximationError(t *testing.T) {
	// Wien's law drops the −1 of Planck's: L_W/L − 1 = −exp(−c2/λT)
	// exactly (algebra of the two formulas, PHYSICS.md).
	for _, lt := range []float64{500, 1000, 2000, 2898, 3000, 5000, 1e4, 1e5} { // µm·K
		lam, temp := 1e-6, lt
		got := Wien(lam, temp, C2ITS90)/Planck(lam, temp, C2ITS90) - 1
		want := -math.Exp(-C2ITS90 / (lam * temp))
		if math.Abs(got-want) > 1e-13 {
			t.Errorf("λT=%g µm·K: Wien/Planck − 1 = %.15g, want −exp(−c2/λT) = %.15g", lt, got, want)
		}
		// Under 1 % for λT < 3000 µm·K (IES definition of "Wien radiation
		// law"); under 0.1 % for λT < 2000 µm·K (IEC 60050-845).
		if lt < 3000 && math.Abs(got) >= 0.01 {
			t.Errorf("λT=%g µm·K: Wien error %.3g, IES says < 1 %%", lt, got)
		}
		if lt < 2000 && math.Abs(got) >= 0.001 {
			t.Errorf("λT=%g µm·K: Wien error %.3g, IEC 60050-845 says < 0.1 %%", lt, got)
		}
	}
}

func TestPlanckDomain(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	for _, c := range []struct {
		lam, temp, c2 float64
		want          float64 // NaN means NaN
	}{
		{1e-6, 0, C2ITS90, 0},
		{1e-6, -5, C2ITS90, 0},
		{0, 1000, C2ITS90, 0},
		{-1e-6, 1000, C2ITS90, 0},
		{1e-6, 1000, 0, 0},
		{inf, 1000, C2ITS90, 0},
		{1e-6, 1, C2ITS90, 0}, // exp(14388) overflows: radiance 0
		{nan, 1000, C2ITS90, nan},
		{1e-6, nan, C2ITS90, nan},
		{1e-6, 1000, nan, nan},
	} {
		for name, f := range map[string]func(float64, float64, float64) float64{"Planck": Planck, "Wien": Wien} {
			got := f(c.lam, c.temp, c.c2)
			if math.IsNaN(c.want) != math.IsNaN(got) || (!math.IsNaN(c.want) && got != c.want) {
				t.Errorf("%s(%g, %g, %g) = %g, want %g", name, c.lam, c.temp, c.c2, got, c.want)
			}
		}
	}
	// Rayleigh–Jeans limit λT ≫ c2: L → c1L·T/(c2·λ⁴)·(1 − x/2), x = c2/λT
	// (series of 1/(eˣ − 1)); math.Expm1 keeps this exact.
	lam, temp := 1.0, 1e9
	x := C2ITS90 / (lam * temp)
	want := C1L * temp / (C2ITS90 * lam * lam * lam * lam) * (1 - x/2 + x*x/12)
	if got := Planck(lam, temp, C2ITS90); math.Abs(got/want-1) > 1e-14 {
		t.Errorf("Rayleigh–Jeans limit: Planck = %.17g, want %.17g", got, want)
	}
}

func TestPlanckValue(t *testing.T) {
	// L(0.9 µm, 1273.15 K) with c2 = 0.014388 m·K and c1L = 1.191042972e-16,
	// from the formula with scipy.constants 2hc² (scipy 1.10.1):
	// 1.1910429723971884e-16 / 0.9e-6**5 / expm1(0.014388/(0.9e-6*1273.15))
	// = 710191376.627604 W·m⁻³·sr⁻¹; the constant C1L is rounded to ten
	// digits (3.3e-10 relative).
	const want = 710191376.627604
	if got := Planck(0.9e-6, 1273.15, C2ITS90); math.Abs(got/want-1) > 1e-9 {
		t.Errorf("Planck(0.9 µm, 1273.15 K) = %.16g, want %.16g", got, want)
	}
}
