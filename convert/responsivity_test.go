package convert

import (
	"math"
	"strings"
	"testing"
)

func mustResponsivity(t testing.TB, lambda, r []float64) *Responsivity {
	t.Helper()
	m, err := NewResponsivity(lambda, r, C2ITS90)
	if err != nil {
		t.Fatalf("NewResponsivity(%v, %v): %v", lambda, r, err)
	}
	return m
}

func TestResponsivityRectangleIsBand(t *testing.T) {
	// A flat table over [lo, hi] is the ideal band (identity of the
	// definitions; Band is checked against scipy.integrate.quad): equal
	// within 1e-9 relative, signal and derivative, 50 K to 30 000 K.
	for _, c := range []struct {
		lambda, r []float64
		scale     float64
	}{
		{[]float64{shortLo, shortHi}, []float64{1, 1}, 1},
		{[]float64{longLo, 1.05e-6, longHi}, []float64{2.5, 2.5, 2.5}, 2.5},
		{[]float64{0.8e-6, 0.9e-6, 1.0e-6, 1.1e-6}, []float64{1, 1, 1, 1}, 1},
		{[]float64{8e-6, 14e-6}, []float64{1, 1}, 1},
	} {
		m := mustResponsivity(t, c.lambda, c.r)
		b := mustBand(t, c.lambda[0], c.lambda[len(c.lambda)-1])
		worst := 0.0
		for temp := 50.0; temp <= 30000; temp *= 1.07 {
			s, ds := m.SignalDeriv(temp)
			bs, bds := b.SignalDeriv(temp)
			if bs < 1e-250 {
				continue
			}
			rel := math.Max(math.Abs(s/(c.scale*bs)-1), math.Abs(ds/(c.scale*bds)-1))
			if !(rel <= 1e-9) {
				t.Errorf("table %v at %.2f K: S %.16g dS %.16g, band ×%g %.16g %.16g (rel %.2g)", c.lambda, temp, s, ds, c.scale, c.scale*bs, c.scale*bds, rel)
			}
			worst = math.Max(worst, rel)
		}
		if got, want := m.Wavelength(), b.Wavelength(); math.Abs(got/want-1) > 1e-15 {
			t.Errorf("table %v: centroid %g, band centre %g", c.lambda, got, want)
		}
		t.Logf("table %v: worst relative difference from Band %.2g", c.lambda, worst)
	}
}

func TestResponsivityMatchesScipy(t *testing.T) {
	// Source: ../testdata/responsivity_reference.csv, written by
	// responsivity_reference.py with scipy.integrate.quad per interval
	// (epsrel 1e-13): a triangle and a broad five-point curve. Within 1e-9
	// as tabulated (C1L is scipy's 2hc² to ten digits) and 1e-10 with the
	// table's c1L; the centroid within 1e-13.
	tb := readRefTable(t, "responsivity_reference.csv")
	if !strings.Contains(tb.comments[0], "scipy ") {
		t.Errorf("responsivity_reference.csv header does not name the scipy version: %q", tb.comments[0])
	}
	if c2 := tb.commentValue(t, "c2"); c2 != C2ITS90 {
		t.Fatalf("table made with c2 = %g, want %g", c2, C2ITS90)
	}
	scale := C1L / tb.commentValue(t, "c1L")
	shapes := []*Responsivity{
		// As in responsivity_reference.py.
		mustResponsivity(t, []float64{0.85e-6, 0.92e-6, 0.95e-6}, []float64{0, 1, 0}),
		mustResponsivity(t, []float64{0.8e-6, 0.9e-6, 1.0e-6, 1.1e-6, 1.2e-6}, []float64{0.1, 0.6, 1.0, 0.8, 0.0}),
	}
	is, it, isig, ic := tb.col(t, "shape"), tb.col(t, "t_K"), tb.col(t, "signal"), tb.col(t, "centroid_m")
	worst := 0.0
	for _, row := range tb.rows {
		m := shapes[int(row[is])]
		got := m.Signal(row[it])
		worst = math.Max(worst, math.Abs(got/(row[isig]*scale)-1))
		if rel := math.Abs(got/row[isig] - 1); !(rel <= 1e-9) {
			t.Errorf("shape %g at %g K: %.16g, scipy %.16g (rel %.2g)", row[is], row[it], got, row[isig], rel)
		}
		if rel := math.Abs(got/(row[isig]*scale) - 1); !(rel <= 1e-10) {
			t.Errorf("shape %g at %g K with the table's c1L: %.16g, scipy %.16g (rel %.2g)", row[is], row[it], got, row[isig]*scale, rel)
		}
		if math.Abs(m.Wavelength()/row[ic]-1) > 1e-13 {
			t.Errorf("shape %g: centroid %.16g m, scipy %.16g m", row[is], m.Wavelength(), row[ic])
		}
	}
	t.Logf("largest relative deviation from scipy (same c1L): %.2g", worst)
	// A triangle's centroid is the mean of its corners (geometry).
	if got, want := shapes[0].Wavelength(), (0.85e-6+0.92e-6+0.95e-6)/3; math.Abs(got/want-1) > 1e-15 {
		t.Errorf("triangle centroid %.16g, mean of corners %.16g", got, want)
	}
}

func TestResponsivityDerivative(t *testing.T) {
	// dS/dT against a fourth-order central difference (identity).
	m := mustResponsivity(t, []float64{0.8e-6, 0.9e-6, 1.0e-6, 1.1e-6, 1.2e-6}, []float64{0.1, 0.6, 1.0, 0.8, 0.0})
	for _, temp := range []float64{300, 973.15, 2000, 5000} {
		h := 1e-4 * temp
		fd := (8*(m.Signal(temp+h)-m.Signal(temp-h)) - (m.Signal(temp+2*h) - m.Signal(temp-2*h))) / (12 * h)
		s, ds := m.SignalDeriv(temp)
		if s != m.Signal(temp) || math.Abs(ds/fd-1) > 1e-9 {
			t.Errorf("%g K: S %g, dS/dT %.12g, central difference %.12g", temp, s, ds, fd)
		}
	}
}

func TestResponsivityDomain(t *testing.T) {
	m := mustResponsivity(t, []float64{0.85e-6, 0.92e-6, 0.95e-6}, []float64{0, 1, 0})
	if s, ds := m.SignalDeriv(0); s != 0 || ds != 0 {
		t.Errorf("SignalDeriv(0) = %g, %g", s, ds)
	}
	if s := m.Signal(-1); s != 0 {
		t.Errorf("Signal(-1) = %g", s)
	}
	if s, ds := m.SignalDeriv(math.NaN()); !math.IsNaN(s) || !math.IsNaN(ds) {
		t.Errorf("SignalDeriv(NaN) = %g, %g", s, ds)
	}
	if s := m.Signal(math.Inf(1)); !math.IsInf(s, 1) {
		t.Errorf("Signal(+Inf) = %g", s)
	}
	if s := m.Signal(5); s != 0 {
		t.Errorf("Signal(5 K) = %g, want 0 (exp overflows)", s)
	}
	// The quadrature is checked down to c2/(400·λ_min).
	if got, want := m.MinTemperature(), C2ITS90/(400*0.85e-6); math.Abs(got/want-1) > 1e-12 || m.C2() != C2ITS90 {
		t.Errorf("MinTemperature %g, want %g; C2 %g", got, want, m.C2())
	}
	// Zero stretches inside the table contribute nothing.
	gap := mustResponsivity(t, []float64{0.8e-6, 0.85e-6, 0.9e-6, 0.95e-6, 1.0e-6}, []float64{1, 0, 0, 0, 1})
	a := mustResponsivity(t, []float64{0.8e-6, 0.85e-6}, []float64{1, 0})
	b := mustResponsivity(t, []float64{0.95e-6, 1.0e-6}, []float64{0, 1})
	for _, temp := range []float64{500, 1500, 3000} {
		if got, want := gap.Signal(temp), a.Signal(temp)+b.Signal(temp); math.Abs(got/want-1) > 1e-12 {
			t.Errorf("%g K: table with a gap %.16g, its two parts %.16g", temp, got, want)
		}
	}
}

func TestNewResponsivityErrors(t *testing.T) {
	nan, inf := math.NaN(), math.Inf(1)
	for _, c := range []struct {
		lambda, r []float64
		c2        float64
		want      string
	}{
		{[]float64{1e-6}, []float64{1}, C2ITS90, "1 points, need at least 2"},
		{nil, nil, C2ITS90, "0 points"},
		{[]float64{1e-6, 2e-6}, []float64{1}, C2ITS90, "2 wavelengths but 1 values"},
		{[]float64{1e-6, 1e-6}, []float64{1, 1}, C2ITS90, "point 1: wavelength 1e-06 m not above point 0's"},
		{[]float64{2e-6, 1e-6}, []float64{1, 1}, C2ITS90, "point 1: wavelength"},
		{[]float64{0, 1e-6}, []float64{1, 1}, C2ITS90, "point 0: wavelength 0 m"},
		{[]float64{nan, 1e-6}, []float64{1, 1}, C2ITS90, "point 0: wavelength NaN"},
		{[]float64{1e-6, inf}, []float64{1, 1}, C2ITS90, "point 1: wavelength +Inf"},
		{[]float64{1e-6, 2e-6}, []float64{1, -0.1}, C2ITS90, "point 1: value -0.1"},
		{[]float64{1e-6, 2e-6}, []float64{nan, 1}, C2ITS90, "point 0: value NaN"},
		{[]float64{1e-6, 2e-6, 3e-6}, []float64{0, 0, 0}, C2ITS90, "all values are zero"},
		{[]float64{1e-6, 2e-6}, []float64{1, 1}, 0, "c2 0"},
		{[]float64{1e-6, 2e-6}, []float64{1, 1}, nan, "c2 NaN"},
	} {
		_, err := NewResponsivity(c.lambda, c.r, c.c2)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("NewResponsivity(%v, %v, %g): error %v, want one containing %q", c.lambda, c.r, c.c2, err, c.want)
		}
	}
}

func TestResponsivityPyrometer(t *testing.T) {
	// Tabulated channels in a pyrometer: a grey target's signals convert
	// back to its temperature (identity), and the table is not kept (the
	// caller may reuse its slices).
	l1, r1 := []float64{0.85e-6, 0.92e-6, 0.95e-6}, []float64{0, 1, 0}
	l2, r2 := []float64{1.0e-6, 1.05e-6, 1.1e-6}, []float64{0.2, 1, 0.5}
	models := []Model{mustResponsivity(t, l1, r1), mustResponsivity(t, l2, r2)}
	r1[1], l2[0] = 7, 0 // changes nothing
	p := mustPyrometer(t, models, Options{Min: 700, Max: 3000})
	var res Result
	for _, temp := range []float64{700, 1234.5, 3000} {
		p.Convert(signalsOf(models, temp, func(float64) float64 { return 0.3 }), &res)
		if math.Abs(res.Temperature/temp-1) > 1e-9 || res.Flags != 0 {
			t.Errorf("%g K: reads %.9f K, flags %v", temp, res.Temperature, res.Flags)
		}
	}
}
