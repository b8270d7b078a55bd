package convert

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

func TestTuneEmissivityRatioScipySignals(t *testing.T) {
	// Source: ../testdata/band_radiance.csv (scipy.integrate.quad band
	// radiance of the 0.875–0.925 and 1.025–1.075 µm bands). A target with
	// ε_short = 0.8·1.03 and ε_long = 0.8 at the table's 1000–2000 K rows
	// has k = ε_short/ε_long = 1.03; tuning on glowgate's band models
	// recovers it within 1e-6 (the models agree with scipy to 1e-12).
	tb := readRefTable(t, "band_radiance.csv")
	it, i1, i2 := tb.col(t, "t_K"), tb.col(t, "s_short"), tb.col(t, "s_long")
	var pts []TunePoint
	for _, row := range tb.rows {
		if row[it] >= 1000 && row[it] <= 2000 {
			pts = append(pts, TunePoint{Reference: row[it], Short: 0.8 * 1.03 * row[i1], Long: 0.8 * row[i2]})
		}
	}
	short, long := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	res, err := TuneEmissivityRatio(short, long, pts, 1)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(res.K/1.03-1) > 1e-6 {
		t.Errorf("k = %.12g, want 1.03", res.K)
	}
	if len(res.PerPoint) != len(pts) {
		t.Fatalf("%d per-point values for %d points", len(res.PerPoint), len(pts))
	}
	for i, k := range res.PerPoint {
		if math.Abs(k/1.03-1) > 1e-6 {
			t.Errorf("point %d (%g K): k = %.12g, want 1.03", i+1, pts[i].Reference, k)
		}
	}
	if res.TemperatureDependent || math.IsNaN(res.Slope) || math.IsNaN(res.SlopeP) {
		t.Errorf("constant k: slope %g, p %g, temperature dependent %v", res.Slope, res.SlopeP, res.TemperatureDependent)
	}
	// With no scatter, U is the reference part alone: k·uRef·mean g.
	var g float64
	for _, p := range pts {
		b1, d1 := short.SignalDeriv(p.Reference)
		b2, d2 := long.SignalDeriv(p.Reference)
		g += (d1/b1 - d2/b2) / float64(len(pts))
	}
	if want := res.K * g; math.Abs(res.U/want-1) > 1e-6 {
		t.Errorf("U = %.6g, want k·uRef·mean g = %.6g", res.U, want)
	}
}

func TestTuneEmissivityRatioScipyReadings(t *testing.T) {
	// Source: ../testdata/emissivity_ratio.csv (scipy quad + brentq): an
	// instrument set to k_set reads t_read on a target at t_true with
	// ε_short/ε_long = eps_ratio. Its signal ratio is
	// k_set·S1,bb(t_read)/S2,bb(t_read), so tuning against the reference
	// t_true gives k = [S1,bb/S2,bb](T_R)/[S1,bb/S2,bb](T_ref)·k_set =
	// eps_ratio (PHYSICS.md, "Setting k from a reference"), here within
	// 1e-9 (brentq's xtol of 1e-10 K).
	tb := readRefTable(t, "emissivity_ratio.csv")
	short, long := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	itt, ie, ik, ir := tb.col(t, "t_true_K"), tb.col(t, "eps_ratio"), tb.col(t, "k_set"), tb.col(t, "t_read_K")
	for _, row := range tb.rows {
		p := TunePoint{Reference: row[itt], Short: 0.6 * row[ik] * short.Signal(row[ir]), Long: 0.6 * long.Signal(row[ir])}
		res, err := TuneEmissivityRatio(short, long, []TunePoint{p}, 0)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(res.K/row[ie]-1) > 1e-9 {
			t.Errorf("t_true %g K, t_read %g K, k_set %g: k = %.12g, want %g", row[itt], row[ir], row[ik], res.K, row[ie])
		}
		if res.U != 0 || !math.IsNaN(res.Slope) || !math.IsNaN(res.SlopeP) || res.TemperatureDependent {
			t.Errorf("one point, uRef 0: U %g slope %g p %g dependent %v", res.U, res.Slope, res.SlopeP, res.TemperatureDependent)
		}
	}
}

func TestTuneEmissivityRatioUncertainty(t *testing.T) {
	// One point: U = k·g(T)·uRef with g = ∂ln(S1,bb/S2,bb)/∂T. In Wien's
	// approximation g = c2/(Λ·T²), Λ = λ1λ2/(λ2 − λ1) (PHYSICS.md); for
	// 50 nm bands at 0.9/1.05 µm and 1500 K the exact g is within 1 % of
	// it.
	short, long := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	const temp, uRef = 1500.0, 2.0
	p := TunePoint{Reference: temp, Short: 1.02 * short.Signal(temp), Long: long.Signal(temp)}
	res, err := TuneEmissivityRatio(short, long, []TunePoint{p}, uRef)
	if err != nil {
		t.Fatal(err)
	}
	lambda := 0.9e-6 * 1.05e-6 / (1.05e-6 - 0.9e-6)
	wien := 1.02 * uRef * C2ITS90 / (lambda * temp * temp)
	if math.Abs(res.U/wien-1) > 0.01 {
		t.Errorf("U = %.6g, Wien estimate %.6g", res.U, wien)
	}

	// Two points at one temperature with k 1.01 and 1.03, uRef 0: the
	// scatter term alone, k·s/√n with s the standard deviation of ln k
	// (GUM, JCGM 100:2008, 4.2.3).
	pts := []TunePoint{
		{Reference: temp, Short: 1.01 * short.Signal(temp), Long: long.Signal(temp)},
		{Reference: temp, Short: 1.03 * short.Signal(temp), Long: long.Signal(temp)},
	}
	res, err = TuneEmissivityRatio(short, long, pts, 0)
	if err != nil {
		t.Fatal(err)
	}
	l1, l2 := math.Log(1.01), math.Log(1.03)
	k := math.Exp((l1 + l2) / 2)
	s := math.Abs(l2-l1) / math.Sqrt2
	if math.Abs(res.K/k-1) > 1e-12 || math.Abs(res.U/(k*s/math.Sqrt2)-1) > 1e-9 {
		t.Errorf("k %.12g U %.6g, want %.12g and %.6g", res.K, res.U, k, k*s/math.Sqrt2)
	}
	if !math.IsNaN(res.Slope) {
		t.Errorf("points at one temperature: slope %g, want NaN", res.Slope)
	}
}

// synthPoints returns points at temps with emissivity ratio kOf(T) and a
// relative Gaussian noise of rel on each signal.
func synthPoints(short, long Model, temps []float64, kOf func(float64) float64, rel float64, rng *rand.Rand) []TunePoint {
	pts := make([]TunePoint, len(temps))
	for i, temp := range temps {
		pts[i] = TunePoint{
			Reference: temp,
			Short:     0.7 * kOf(temp) * short.Signal(temp) * (1 + rel*rng.NormFloat64()),
			Long:      0.7 * long.Signal(temp) * (1 + rel*rng.NormFloat64()),
		}
	}
	return pts
}

func TestTuneEmissivityRatioTemperatureDependence(t *testing.T) {
	short, long := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	temps := celsiusRange(900, 1500, 50)
	rng := rand.New(rand.NewPCG(7, 11))

	// k rising linearly by 2 % over 600 K, signals with 0.05 % noise: the
	// slope is found (p < 0.01) and flagged. Invented scenario.
	const slope = 0.02 / 600
	rising := func(temp float64) float64 { return 1.03 + slope*(temp-1473.15) }
	res, err := TuneEmissivityRatio(short, long, synthPoints(short, long, temps, rising, 5e-4, rng), 1)
	if err != nil {
		t.Fatal(err)
	}
	if !(res.SlopeP < 0.01) || !res.TemperatureDependent {
		t.Errorf("rising k: p %g, temperature dependent %v", res.SlopeP, res.TemperatureDependent)
	}
	if math.Abs(res.Slope/slope-1) > 0.1 {
		t.Errorf("rising k: slope %.4g /K, want %.4g", res.Slope, slope)
	}
	t.Logf("rising k: slope %.4g /K, p %.3g, U %.3g", res.Slope, res.SlopeP, res.U)

	// The same noise on a constant k: not flagged.
	constant := func(float64) float64 { return 1.03 }
	res, err = TuneEmissivityRatio(short, long, synthPoints(short, long, temps, constant, 5e-4, rng), 1)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("constant k: slope %.3g /K, p %.3g, U %.3g", res.Slope, res.SlopeP, res.U)
	if res.TemperatureDependent {
		t.Errorf("constant k: slope %g p %g flagged as temperature dependent", res.Slope, res.SlopeP)
	}
	// Noise-free constant k: the slope is rounding and never flagged,
	// even with a perfect reference.
	res, err = TuneEmissivityRatio(short, long, synthPoints(short, long, temps, constant, 0, rng), 0)
	if err != nil {
		t.Fatal(err)
	}
	if res.TemperatureDependent || math.Abs(res.K/1.03-1) > 1e-12 {
		t.Errorf("noise-free constant k: k %.15g slope %g p %g dependent %v", res.K, res.Slope, res.SlopeP, res.TemperatureDependent)
	}
}

func TestTuneEmissivityRatioFalseAlarmRate(t *testing.T) {
	// Under the null hypothesis (constant k, Gaussian noise) the slope's
	// p-value is uniform, so p < 0.05 in 5 % of trials: 2000 trials land
	// within 5 % ± 3 binomial standard deviations (±1.5 %).
	short, long := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	temps := celsiusRange(900, 1500, 100)
	rng := rand.New(rand.NewPCG(3, 5))
	constant := func(float64) float64 { return 0.97 }
	const trials = 2000
	low := 0
	for range trials {
		res, err := TuneEmissivityRatio(short, long, synthPoints(short, long, temps, constant, 1e-3, rng), 0)
		if err != nil {
			t.Fatal(err)
		}
		if res.SlopeP < 0.05 {
			low++
		}
	}
	t.Logf("p < 0.05 in %d of %d trials", low, trials)
	if rate := float64(low) / trials; math.Abs(rate-0.05) > 0.015 {
		t.Errorf("p < 0.05 in %.1f %% of constant-k trials, want about 5 %%", 100*rate)
	}
}

func TestStudentTwoSided(t *testing.T) {
	// Source: ../testdata/calibration/student_t.csv (2·scipy.stats.t.sf,
	// scipy 1.10), within 1e-12 relative; and the limits.
	tb := readRefTable(t, "calibration/student_t.csv")
	it, in, ip := tb.col(t, "t"), tb.col(t, "nu"), tb.col(t, "p")
	for _, row := range tb.rows {
		got := studentTwoSided(row[it], row[in])
		if math.Abs(got-row[ip]) > 1e-12*row[ip]+1e-15 {
			t.Errorf("t %g, ν %g: p %.15g, scipy %.15g", row[it], row[in], got, row[ip])
		}
	}
	for _, c := range []struct{ t, nu, want float64 }{
		{math.Inf(1), 3, 0},
		{math.Inf(-1), 3, 0},
		{math.NaN(), 3, math.NaN()},
		{1, 0, math.NaN()},
		{1, -2, math.NaN()},
	} {
		if got := studentTwoSided(c.t, c.nu); !same(got, c.want) {
			t.Errorf("studentTwoSided(%g, %g) = %g, want %g", c.t, c.nu, got, c.want)
		}
	}
}

func TestTuneEmissivityRatioErrors(t *testing.T) {
	short, long := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	ok := TunePoint{Reference: 1500, Short: 200, Long: 500}
	for _, c := range []struct {
		name        string
		short, long Model
		pts         []TunePoint
		uRef        float64
		want        string
	}{
		{"nil model", nil, long, []TunePoint{ok}, 1, "non-nil"},
		{"no points", short, long, nil, 1, "no points"},
		{"uRef negative", short, long, []TunePoint{ok}, -1, "reference uncertainty -1 K"},
		{"uRef NaN", short, long, []TunePoint{ok}, math.NaN(), "reference uncertainty NaN K"},
		{"reference zero", short, long, []TunePoint{ok, {0, 1, 1}}, 1, "point 2: reference temperature 0 K"},
		{"reference NaN", short, long, []TunePoint{{math.NaN(), 1, 1}}, 1, "point 1: reference temperature NaN K"},
		{"short zero", short, long, []TunePoint{ok, ok, {1500, 0, 1}}, 1, "point 3: signals 0 (short) and 1 (long)"},
		{"long infinite", short, long, []TunePoint{{1500, 1, math.Inf(1)}}, 1, "point 1: signals 1 (short) and +Inf (long)"},
		{"no blackbody signal", short, long, []TunePoint{{1e-3, 1, 1}}, 1, "point 1: blackbody signals at 0.001 K"},
	} {
		_, err := TuneEmissivityRatio(c.short, c.long, c.pts, c.uRef)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", c.name, err, c.want)
		}
	}
}

func ExampleTuneEmissivityRatio() {
	// A thermocouple dip reads 1532 °C while the head's channels see a
	// target whose short-wavelength emissivity is 3 % above the long one's.
	short, _ := NewBand(0.875e-6, 0.925e-6, C2ITS90)
	long, _ := NewBand(1.025e-6, 1.075e-6, C2ITS90)
	tRef := 1532 + 273.15
	p := TunePoint{Reference: tRef, Short: 0.6 * 1.03 * short.Signal(tRef), Long: 0.6 * long.Signal(tRef)}
	res, err := TuneEmissivityRatio(short, long, []TunePoint{p}, 2)
	if err != nil {
		panic(err)
	}
	fmt.Printf("k = %.4f ± %.4f\n", res.K, res.U)
	// Output:
	// k = 1.0300 ± 0.0014
}
