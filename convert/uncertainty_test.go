package convert_test

import (
	"bufio"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"glowgate/convert"
)

// uncBands returns the ideal 0.875–0.925 µm and 1.025–1.075 µm bands
// (c2 of ITS-90) of the reference script.
func uncBands(t testing.TB) (short, long *convert.Band) {
	t.Helper()
	short, err := convert.NewBand(0.875e-6, 0.925e-6, convert.C2ITS90)
	if err != nil {
		t.Fatal(err)
	}
	long, err = convert.NewBand(1.025e-6, 1.075e-6, convert.C2ITS90)
	if err != nil {
		t.Fatal(err)
	}
	return short, long
}

// uncReadCSV reads a reference table from ../testdata: '#' lines are
// comments, the first other line names the columns.
func uncReadCSV(t *testing.T, name string) []map[string]float64 {
	t.Helper()
	path := filepath.Join("..", "testdata", name)
	f, err := os.Open(path)
	if err != nil {
		t.Fatalf("open reference table: %v", err)
	}
	defer f.Close()
	var cols []string
	var rows []map[string]float64
	sc := bufio.NewScanner(f)
	for line := 1; sc.Scan(); line++ {
		text := strings.TrimSpace(sc.Text())
		switch {
		case text == "" || strings.HasPrefix(text, "#"):
		case cols == nil:
			cols = strings.Split(text, ",")
		default:
			fields := strings.Split(text, ",")
			if len(fields) != len(cols) {
				t.Fatalf("%s:%d: %d fields, want %d", path, line, len(fields), len(cols))
			}
			row := map[string]float64{}
			for i, s := range fields {
				v, err := strconv.ParseFloat(s, 64)
				if err != nil {
					t.Fatalf("%s:%d: %v", path, line, err)
				}
				row[cols[i]] = v
			}
			rows = append(rows, row)
		}
	}
	if err := sc.Err(); err != nil {
		t.Fatalf("read %s: %v", path, err)
	}
	if len(rows) == 0 {
		t.Fatalf("%s: no rows", path)
	}
	return rows
}

func uncInputs(row map[string]float64) convert.UncertaintyInputs {
	return convert.UncertaintyInputs{
		Noise:       [2]float64{row["u1"], row["u2"]},
		Correlation: row["r"],
		KRel:        row["k_rel"],
		Calibration: row["u_cal_K"],
	}
}

func TestRatioUncertaintyMatchesScipy(t *testing.T) {
	// Source: ../testdata/uncertainty_ratio.csv, written by
	// testdata/uncertainty_ratio.py (scipy.integrate.quad band radiances,
	// ∂lnR/∂T by a central difference with Richardson extrapolation, GUM
	// propagation with numpy). Independent of the Go code: numerical
	// derivative of the band integrals, where Go uses the models' analytic
	// dS/dT. Brief: within 1 %; the agreement is far closer, so the check
	// is 1e-6 relative.
	short, long := uncBands(t)
	for _, row := range uncReadCSV(t, "uncertainty_ratio.csv") {
		temp, want := row["t_K"], row["U_K"]
		got := convert.RatioUncertainty(short, long, temp, uncInputs(row))
		if math.Abs(got/want-1) > 1e-6 {
			t.Errorf("T = %g K, %+v: U = %.9g K, scipy %.9g K", temp, uncInputs(row), got, want)
		}
		// The same sensitivity from the reference: with only k's
		// uncertainty, U = 2·u(k)/k / |∂lnR/∂T|.
		in := convert.UncertaintyInputs{KRel: 0.01}
		if got, want := convert.RatioUncertainty(short, long, temp, in), 2*0.01/row["dlnR_dT"]; math.Abs(got/want-1) > 1e-6 {
			t.Errorf("T = %g K, k only: U = %.9g K, want 2·0.01/(%.9g K⁻¹) = %.9g K", temp, got, row["dlnR_dT"], want)
		}
	}
}

func TestRatioUncertaintyCommonNoise(t *testing.T) {
	// JCGM 100:2008 5.2.2 with r = 1 and u1 = u2: the channel noise cancels
	// in the ratio, u_r(R)² = (u1 − u2)² = 0, and only k and the
	// calibration remain, U = 2·√((u(k)/k / |∂lnR/∂T|)² + u_cal²).
	// ∂lnR/∂T from ../testdata/uncertainty_ratio.csv (scipy), row 1500 K.
	short, long := uncBands(t)
	var sens float64
	for _, row := range uncReadCSV(t, "uncertainty_ratio.csv") {
		if row["t_K"] == 1500 {
			sens = row["dlnR_dT"]
		}
	}
	if sens == 0 {
		t.Fatal("reference table has no 1500 K row")
	}
	for _, u := range []float64{0, 1e-4, 3e-3, 0.05} {
		in := convert.UncertaintyInputs{Noise: [2]float64{u, u}, Correlation: 1, KRel: 0.004, Calibration: 1}
		got := convert.RatioUncertainty(short, long, 1500, in)
		want := 2 * math.Hypot(0.004/sens, 1)
		if math.Abs(got/want-1) > 1e-6 {
			t.Errorf("u1 = u2 = %g, r = 1: U = %.9g K, want %.9g K", u, got, want)
		}
	}
}

func TestRatioUncertaintyMonotonic(t *testing.T) {
	// U grows with the noise scaled in both channels (u_r ∝ scale), and
	// with one channel's noise when r ≤ 0 (∂u_r²/∂u1 = 2(u1 − r·u2) > 0).
	// For r > 0 it falls while u1 < r·u2: correlated noise cancels in the
	// ratio (JCGM 100:2008 5.2.2, the sign of the covariance term).
	short, long := uncBands(t)
	const temp = 1273.15
	u := func(u1, u2, r float64) float64 {
		return convert.RatioUncertainty(short, long, temp, convert.UncertaintyInputs{Noise: [2]float64{u1, u2}, Correlation: r, KRel: 0.002, Calibration: 0.5})
	}
	for _, r := range []float64{-1, -0.3, 0, 0.5, 0.99} {
		prev := 0.0
		for s := 0.0; s <= 10; s += 0.25 {
			got := u(0.001*s, 0.0015*s, r)
			if s > 0 && !(got > prev) {
				t.Errorf("r = %g, scale %g: U = %g K not above %g K", r, s, got, prev)
			}
			prev = got
		}
	}
	for _, r := range []float64{-1, -0.5, 0} {
		prev := 0.0
		for u1 := 0.0; u1 <= 0.01; u1 += 5e-4 {
			got := u(u1, 0.002, r)
			if u1 > 0 && !(got > prev) {
				t.Errorf("r = %g, u1 = %g: U = %g K not above %g K", r, u1, got, prev)
			}
			prev = got
		}
	}
	if a, b := u(0, 0.002, 0.9), u(0.0018, 0.002, 0.9); !(b < a) {
		t.Errorf("r = 0.9: U(u1 = 0.0018) = %g K, want below U(u1 = 0) = %g K", b, a)
	}
}

// uncLine is a monochromatic channel at wavelength lambda, m: Planck's
// radiance with the analytic derivative ∂L/∂T = L·(x/T)·eˣ/(eˣ − 1),
// x = c2/(λT).
type uncLine struct{ lambda float64 }

func (m uncLine) Signal(t float64) float64 { return convert.Planck(m.lambda, t, convert.C2ITS90) }

func (m uncLine) SignalDeriv(t float64) (float64, float64) {
	l := m.Signal(t)
	x := convert.C2ITS90 / (m.lambda * t)
	return l, l * x / t / -math.Expm1(-x)
}

func (m uncLine) Wavelength() float64 { return m.lambda }

func TestLogRadianceDerivativeIdentity(t *testing.T) {
	// PHYSICS.md: for a monochromatic channel
	//   ∂lnL/∂T = (c2/(λT²)) / (1 − exp(−c2/(λT))).
	// Checked against a central difference of ln Planck (step 1e-4·T,
	// Richardson-extrapolated), and against a 0.1 nm band's S'/S from
	// convert.Band, which must approach it.
	for _, lambda := range []float64{0.65e-6, 0.9e-6, 1.05e-6, 1.6e-6, 3.9e-6, 10e-6} {
		for _, temp := range []float64{300, 1000, 3000} {
			x := convert.C2ITS90 / (lambda * temp)
			want := x / temp / -math.Expm1(-x)
			lnL := func(t float64) float64 { return math.Log(convert.Planck(lambda, t, convert.C2ITS90)) }
			central := func(h float64) float64 { return (lnL(temp+h) - lnL(temp-h)) / (2 * h) }
			h := 1e-4 * temp
			num := (4*central(h/2) - central(h)) / 3
			if math.Abs(num/want-1) > 1e-7 {
				t.Errorf("λ = %g m, T = %g K: numerical ∂lnL/∂T %.10g, identity %.10g", lambda, temp, num, want)
			}
			b, err := convert.NewBand(lambda-0.05e-9, lambda+0.05e-9, convert.C2ITS90)
			if err != nil {
				t.Fatal(err)
			}
			s, ds := b.SignalDeriv(temp)
			if math.Abs(ds/s/want-1) > 1e-6 {
				t.Errorf("λ = %g m, T = %g K: 0.1 nm band S'/S %.10g, identity %.10g", lambda, temp, ds/s, want)
			}
		}
	}
}

func TestRatioUncertaintyWienLimit(t *testing.T) {
	// PHYSICS.md ratio sensitivity: dT/T = −(ΛT/c2)·dk/k, Λ = λ1λ2/(λ2 − λ1),
	// Wien's limit of ∂lnR/∂T = c2/(ΛT²). Two monochromatic channels at
	// 0.9 and 1.05 µm at 1000 K, where Wien's law is off by
	// exp(−c2/(λT)) ≈ 1e-6 relative: U = 2·u_r·ΛT²/c2 to 1e-5. And the
	// exact form with the identity above to 1e-12.
	l1, l2 := 0.9e-6, 1.05e-6
	lam := l1 * l2 / (l2 - l1)
	const temp = 1000.0
	in := convert.UncertaintyInputs{Noise: [2]float64{0.001, 0.002}, Correlation: 0.25, KRel: 0.003}
	ur := math.Sqrt(0.001*0.001 + 0.002*0.002 - 2*0.25*0.001*0.002 + 0.003*0.003)
	got := convert.RatioUncertainty(uncLine{l1}, uncLine{l2}, temp, in)
	wien := 2 * ur * lam * temp * temp / convert.C2ITS90
	if math.Abs(got/wien-1) > 1e-5 {
		t.Errorf("U = %.9g K, Wien limit %.9g K", got, wien)
	}
	d := func(l float64) float64 {
		x := convert.C2ITS90 / (l * temp)
		return x / temp / -math.Expm1(-x)
	}
	if exact := 2 * ur / (d(l1) - d(l2)); math.Abs(got/exact-1) > 1e-12 {
		t.Errorf("U = %.15g K, from the identity %.15g K", got, exact)
	}
}

func TestRatioUncertaintyInvalid(t *testing.T) {
	short, long := uncBands(t)
	ok := convert.UncertaintyInputs{Noise: [2]float64{0.001, 0.001}, Correlation: 0.2, KRel: 0.002, Calibration: 1}
	if u := convert.RatioUncertainty(short, long, 1300, ok); !(u > 0) || math.IsInf(u, 0) {
		t.Fatalf("valid inputs: U = %g", u)
	}
	nan, inf := math.NaN(), math.Inf(1)
	for _, c := range []struct {
		name        string
		short, long convert.Model
		temp        float64
		edit        func(*convert.UncertaintyInputs)
	}{
		{"nil short", nil, long, 1300, nil},
		{"nil long", short, nil, 1300, nil},
		{"NaN T", short, long, nan, nil},
		{"zero T", short, long, 0, nil},
		{"negative T", short, long, -5, nil},
		{"infinite T", short, long, inf, nil},
		{"NaN noise", short, long, 1300, func(in *convert.UncertaintyInputs) { in.Noise[0] = nan }},
		{"negative noise", short, long, 1300, func(in *convert.UncertaintyInputs) { in.Noise[1] = -1e-3 }},
		{"infinite noise", short, long, 1300, func(in *convert.UncertaintyInputs) { in.Noise[1] = inf }},
		{"r above 1", short, long, 1300, func(in *convert.UncertaintyInputs) { in.Correlation = 1.5 }},
		{"r below -1", short, long, 1300, func(in *convert.UncertaintyInputs) { in.Correlation = -1.01 }},
		{"NaN r", short, long, 1300, func(in *convert.UncertaintyInputs) { in.Correlation = nan }},
		{"NaN k", short, long, 1300, func(in *convert.UncertaintyInputs) { in.KRel = nan }},
		{"negative k", short, long, 1300, func(in *convert.UncertaintyInputs) { in.KRel = -0.1 }},
		{"NaN calibration", short, long, 1300, func(in *convert.UncertaintyInputs) { in.Calibration = nan }},
		{"negative calibration", short, long, 1300, func(in *convert.UncertaintyInputs) { in.Calibration = -1 }},
		{"same channel twice", short, short, 1300, nil}, // ∂lnR/∂T = 0
		{"underflowing signals", short, long, 1e-3, nil},
	} {
		in := ok
		if c.edit != nil {
			c.edit(&in)
		}
		if u := convert.RatioUncertainty(c.short, c.long, c.temp, in); !math.IsNaN(u) {
			t.Errorf("%s: U = %g, want NaN", c.name, u)
		}
	}
}

// BenchmarkRatioUncertainty measures one RatioUncertainty on the two-band
// pair. Target: ≤ ~100 ns/op, 0 allocs/op.
func BenchmarkRatioUncertainty(b *testing.B) {
	short, long := uncBands(b)
	in := convert.UncertaintyInputs{Noise: [2]float64{0.002, 0.0015}, Correlation: 0.3, KRel: 0.005, Calibration: 1.5}
	b.ReportAllocs()
	var sink float64
	for i := 0; b.Loop(); i++ {
		sink += convert.RatioUncertainty(short, long, 1000+float64(i%1000), in)
	}
	_ = sink
}

// BenchmarkRatioUncertaintySakumaHattori measures RatioUncertainty on
// Sakuma–Hattori channel models, whose SignalDeriv is one exponential: the
// cost of the propagation itself.
func BenchmarkRatioUncertaintySakumaHattori(b *testing.B) {
	short, long := uncBands(b)
	m1, err := short.SakumaHattori(1273.15)
	if err != nil {
		b.Fatal(err)
	}
	m2, err := long.SakumaHattori(1273.15)
	if err != nil {
		b.Fatal(err)
	}
	in := convert.UncertaintyInputs{Noise: [2]float64{0.002, 0.0015}, Correlation: 0.3, KRel: 0.005, Calibration: 1.5}
	b.ReportAllocs()
	var sink float64
	for i := 0; b.Loop(); i++ {
		sink += convert.RatioUncertainty(m1, m2, 1000+float64(i%1000), in)
	}
	_ = sink
}

func ExampleRatioUncertainty() {
	short, err := convert.NewBand(0.875e-6, 0.925e-6, convert.C2ITS90)
	if err != nil {
		panic(err)
	}
	long, err := convert.NewBand(1.025e-6, 1.075e-6, convert.C2ITS90)
	if err != nil {
		panic(err)
	}
	// Signal noise 0.2 % and 0.15 %, correlated with r = 0.3; emissivity
	// ratio known to 0.5 %; calibration to 1.5 K.
	in := convert.UncertaintyInputs{
		Noise:       [2]float64{0.002, 0.0015},
		Correlation: 0.3,
		KRel:        0.005,
		Calibration: 1.5,
	}
	u := convert.RatioUncertainty(short, long, 1273.15, in)
	fmt.Printf("T = 1273.15 K ± %.2f K (k = %d)\n", u, convert.CoverageFactor)
	// Output:
	// T = 1273.15 K ± 8.31 K (k = 2)
}
