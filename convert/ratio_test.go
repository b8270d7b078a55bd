package convert

import (
	"math"
	"strings"
	"testing"
)

// testRatio is the two-band converter over the measuring range 700–3000 K
// with the default solver bracket [350, 4500] K.
func testRatio(t testing.TB, k float64) *Ratio {
	t.Helper()
	r, err := NewRatio(mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi), k, 700, 3000, 0.02)
	if err != nil {
		t.Fatalf("NewRatio: %v", err)
	}
	return r
}

func TestRatioMatchesScipy(t *testing.T) {
	// Source: ../testdata/band_radiance.csv (scipy.integrate.quad band
	// radiances of a blackbody at t_K). Fed back through Convert with k = 1
	// they must give t_K back, and each channel's brightness temperature
	// must be t_K, within 0.01 K.
	tb := readRefTable(t, "band_radiance.csv")
	r := testRatio(t, 1)
	lo, hi := r.Bracket()
	it, i1, i2 := tb.col(t, "t_K"), tb.col(t, "s_short"), tb.col(t, "s_long")
	worst := 0.0
	for _, row := range tb.rows {
		want := row[it]
		res := r.Convert(row[i1], row[i2])
		if want > hi {
			// Beyond the solver bracket: no temperature, AboveRange.
			if !math.IsNaN(res.Temperature) || res.Flags != AboveRange {
				t.Errorf("%g K (above bracket %g K): got %g K flags %v, want NaN above_range", want, hi, res.Temperature, res.Flags)
			}
			continue
		}
		if d := math.Abs(res.Temperature - want); d > 0.01 || math.IsNaN(d) {
			t.Errorf("%g K: ratio temperature %.6f K (off %.3g K > 0.01 K)", want, res.Temperature, d)
		}
		worst = math.Max(worst, math.Abs(res.Temperature-want))
		for i, c := range res.Channels[:res.N] {
			if d := math.Abs(c.Brightness - want); d > 0.01 || math.IsNaN(d) {
				t.Errorf("%g K: channel %d brightness %.6f K (off %.3g K > 0.01 K)", want, i, c.Brightness, d)
			}
			if math.Abs(c.Fraction-1) > 1e-8 {
				t.Errorf("%g K: channel %d fraction %.12f, want 1 (blackbody)", want, i, c.Fraction)
			}
		}
		wantFlags := Flags(0)
		if want < r.Min {
			wantFlags = BelowRange
		} else if want > r.Max {
			wantFlags = AboveRange
		}
		if want >= lo && res.Flags != wantFlags {
			t.Errorf("%g K: flags %v, want %v", want, res.Flags, wantFlags)
		}
		if res.N != 2 || math.Abs(res.Ratio/(row[i1]/row[i2])-1) > 1e-15 {
			t.Errorf("%g K: N %d ratio %g", want, res.N, res.Ratio)
		}
	}
	t.Logf("largest deviation from scipy table: %.3g K", worst)
}

func TestEmissivityRatioMatchesScipy(t *testing.T) {
	// Source: ../testdata/emissivity_ratio.csv (scipy.integrate.quad and
	// scipy.optimize.brentq): the temperature t_read that an instrument set
	// to k_set reads on a target at t_true with ε_short/ε_long = eps_ratio.
	tb := readRefTable(t, "emissivity_ratio.csv")
	short, long := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	itt, ie, ik, ir := tb.col(t, "t_true_K"), tb.col(t, "eps_ratio"), tb.col(t, "k_set"), tb.col(t, "t_read_K")
	for _, row := range tb.rows {
		tTrue, eps, k, tRead := row[itt], row[ie], row[ik], row[ir]
		r, err := NewRatio(short, long, k, 700, 3000, 0.02)
		if err != nil {
			t.Fatal(err)
		}
		// A grey-ish target: ε_long = 0.8, ε_short = 0.8·eps_ratio.
		s1, s2 := 0.8*eps*short.Signal(tTrue), 0.8*long.Signal(tTrue)
		res := r.Convert(s1, s2)
		if d := math.Abs(res.Temperature - tRead); d > 0.01 || math.IsNaN(d) {
			t.Errorf("t_true %g K, ε ratio %g, k %g: reads %.6f K, scipy %.6f K (off %.3g K)", tTrue, eps, k, res.Temperature, tRead, d)
		}
		// Setting k from the reference temperature undoes the error
		// (PHYSICS.md: k = [S1,bb/S2,bb](T_R) / [S1,bb/S2,bb](T_ref), with
		// the measured ratio in place of the first factor).
		if got := r.EmissivityRatio(s1, s2, tTrue); math.Abs(got/eps-1) > 1e-12 {
			t.Errorf("t_true %g K: EmissivityRatio = %.15g, want %g", tTrue, got, eps)
		}
	}
	// The headline case: k = 1.01 missed on a 0.9/1.05 µm pair at 1273.15 K
	// moves the reading by about 7.1 K. Cross-check with the Wien
	// sensitivity of a ratio pyrometer dT/T = −(ΛT/c2)·dk/k, Λ = λ1λ2/(λ2−λ1)
	// (PHYSICS.md), within 0.1 K; dk/k = (k_set − ε1/ε2)/k_set = −0.01.
	row := tb.rows[0]
	if row[itt] != 1273.15 || row[ie] != 1.01 || row[ik] != 1 {
		t.Fatalf("first row of emissivity_ratio.csv is %v, want 1273.15,1.01,1", row)
	}
	l1, l2 := 0.9e-6, 1.05e-6
	lambda := l1 * l2 / (l2 - l1)
	tt := row[itt]
	wienShift := -tt * (lambda * tt / C2ITS90) * (1 - 1.01)
	r, _ := NewRatio(short, long, 1, 700, 3000, 0.02)
	res := r.Convert(0.8*1.01*short.Signal(tt), 0.8*long.Signal(tt))
	shift := res.Temperature - tt
	if math.Abs(shift-wienShift) > 0.1 {
		t.Errorf("k error 1 %%: shift %.4f K, Wien sensitivity %.4f K (differ by more than 0.1 K)", shift, wienShift)
	}
	if math.Abs(shift-7.1) > 0.1 {
		t.Errorf("k error 1 %%: shift %.4f K, want about 7.1 K", shift)
	}
}

func TestWienRatioTemperature(t *testing.T) {
	// The Wien closed form against exact Planck signals of point channels
	// at 0.9/1.05 µm: off by about 1 K at 2000 K and about 20 K at 3000 K
	// (PHYSICS.md design note, no published source); exact for Wien's own
	// signals (identity).
	for _, c := range []struct{ temp, lo, hi float64 }{
		{1000, -0.01, 0.01},
		{2000, -1.5, -0.8},
		{3000, -25, -15},
	} {
		rr := Planck(0.9e-6, c.temp, C2ITS90) / Planck(1.05e-6, c.temp, C2ITS90)
		d := WienRatioTemperature(0.9e-6, 1.05e-6, 1, rr, C2ITS90) - c.temp
		if d < c.lo || d > c.hi {
			t.Errorf("Wien closed form at %g K off by %.4f K, want within [%g, %g]", c.temp, d, c.lo, c.hi)
		}
		rw := 1.02 * Wien(0.9e-6, c.temp, C2ITS90) / Wien(1.05e-6, c.temp, C2ITS90)
		if got := WienRatioTemperature(0.9e-6, 1.05e-6, 1.02, rw, C2ITS90); math.Abs(got/c.temp-1) > 1e-13 {
			t.Errorf("Wien closed form on Wien signals at %g K: %.12g", c.temp, got)
		}
	}
	for _, args := range [][5]float64{
		{0, 1e-6, 1, 1, C2ITS90}, {1e-6, 0.9e-6, 1, 1, C2ITS90}, {0.9e-6, 1e-6, 0, 1, C2ITS90},
		{0.9e-6, 1e-6, 1, math.NaN(), C2ITS90}, {0.9e-6, 1e-6, 1, math.Inf(1), C2ITS90},
		{0.9e-6, 1e-6, 1, 1e10, C2ITS90}, // denominator ≤ 0
	} {
		if got := WienRatioTemperature(args[0], args[1], args[2], args[3], args[4]); !math.IsNaN(got) {
			t.Errorf("WienRatioTemperature%v = %g, want NaN", args, got)
		}
	}
}

func TestRatioEdges(t *testing.T) {
	r := testRatio(t, 1)
	nan, inf := math.NaN(), math.Inf(1)
	sb := r.Short.Signal(1273.15)
	lb := r.Long.Signal(1273.15)
	for _, c := range []struct {
		name   string
		s1, s2 float64
		flags  Flags
		temp   bool // a temperature is expected
		b1, b2 bool // a brightness temperature is expected
	}{
		{"nan short", nan, lb, NoSignal, false, false, true},
		{"nan long", sb, nan, NoSignal, false, true, false},
		{"+inf short", inf, lb, NoSignal, false, false, true},
		{"-inf long", sb, -inf, NoSignal, false, true, false},
		{"zero short", 0, lb, NoSignal, false, false, true},
		{"zero both", 0, 0, NoSignal, false, false, false},
		{"negative long", sb, -lb, NoSignal, false, true, false},
		{"ratio far below", 1e-300, lb, BelowRange, false, false, true},
		{"ratio far above", sb, 1e-300, AboveRange, false, true, false},
		// R = 1 is a ratio temperature near 2986 K whatever the level;
		// the levels themselves are beyond any brightness in the bracket.
		{"huge both", 1e300, 1e300, 0, true, false, false},
		{"tiny both", 1e-300, 1e-300, LowSignal, true, false, false},
		{"blackbody", sb, lb, 0, true, true, true},
		{"low signal", 0.01 * sb, 0.01 * lb, LowSignal, true, true, true},
		{"just above limit", 0.021 * sb, 0.021 * lb, 0, true, true, true},
	} {
		res := r.Convert(c.s1, c.s2)
		if res.Flags != c.flags {
			t.Errorf("%s: flags %v, want %v", c.name, res.Flags, c.flags)
		}
		if c.temp == math.IsNaN(res.Temperature) {
			t.Errorf("%s: temperature %g, want one: %v", c.name, res.Temperature, c.temp)
		}
		if c.temp == math.IsNaN(res.Channels[0].Fraction) || c.temp == math.IsNaN(res.Channels[1].Fraction) {
			t.Errorf("%s: fractions %g, %g with temperature %g", c.name, res.Channels[0].Fraction, res.Channels[1].Fraction, res.Temperature)
		}
		if c.b1 == math.IsNaN(res.Channels[0].Brightness) || c.b2 == math.IsNaN(res.Channels[1].Brightness) {
			t.Errorf("%s: brightness %g, %g, want %v, %v", c.name, res.Channels[0].Brightness, res.Channels[1].Brightness, c.b1, c.b2)
		}
		if res.N != 2 || !same(res.Channels[0].Signal, c.s1) || !same(res.Channels[1].Signal, c.s2) {
			t.Errorf("%s: N %d, signals %g, %g", c.name, res.N, res.Channels[0].Signal, res.Channels[1].Signal)
		}
		if (res.Flags&NoSignal != 0) != math.IsNaN(res.Ratio) {
			t.Errorf("%s: ratio %g with flags %v", c.name, res.Ratio, res.Flags)
		}
		if res.Channels[2] != (ChannelResult{}) {
			t.Errorf("%s: unused channel slot set: %+v", c.name, res.Channels[2])
		}
	}
	// Low-signal fraction reported as given: 1 % of blackbody.
	res := r.Convert(0.01*sb, 0.01*lb)
	if math.Abs(res.Temperature-1273.15) > 1e-6 || math.Abs(res.Channels[0].Fraction-0.01) > 1e-12 || math.Abs(res.Channels[1].Fraction-0.01) > 1e-12 {
		t.Errorf("grey 1 %%: T %.9f, fractions %.15f %.15f", res.Temperature, res.Channels[0].Fraction, res.Channels[1].Fraction)
	}
	// K changed to an invalid value after NewRatio: no reading, no panic.
	r.K = 0
	if res := r.Convert(sb, lb); !math.IsNaN(res.Temperature) {
		t.Errorf("K = 0: T %g, want NaN", res.Temperature)
	}
	r.K = 1
	// LowSignal = 0 turns the check off.
	r.LowSignal = 0
	if res := r.Convert(1e-6*sb, 1e-6*lb); res.Flags != 0 {
		t.Errorf("LowSignal 0: flags %v, want none", res.Flags)
	}
}

func same(a, b float64) bool { return a == b || (math.IsNaN(a) && math.IsNaN(b)) }

func TestRatioRangeLimits(t *testing.T) {
	r := testRatio(t, 1)
	lo, hi := r.Bracket()
	if lo != 350 || hi != 4500 {
		t.Fatalf("default bracket [%g, %g] K, want [350, 4500]", lo, hi)
	}
	at := func(temp float64) Result {
		return r.Convert(r.Short.Signal(temp), r.Long.Signal(temp))
	}
	for _, c := range []struct {
		temp  float64
		flags Flags
		nan   bool
	}{
		{700, 0, false},             // Min, inclusive
		{3000, 0, false},            // Max, inclusive
		{699.99, BelowRange, false}, // just below the measuring range
		{3000.01, AboveRange, false},
		{350, BelowRange, false}, // bracket ends: still a reading
		{4500, AboveRange, false},
		{349.9, BelowRange, true}, // beyond the bracket: none
		{4500.5, AboveRange, true},
	} {
		res := at(c.temp)
		if res.Flags != c.flags || c.nan != math.IsNaN(res.Temperature) {
			t.Errorf("%g K: T %.6f flags %v, want flags %v, NaN %v", c.temp, res.Temperature, res.Flags, c.flags, c.nan)
		}
		if !c.nan && math.Abs(res.Temperature-c.temp) > 1e-6 {
			t.Errorf("%g K: T %.9f", c.temp, res.Temperature)
		}
		for i, ch := range res.Channels[:2] {
			if c.nan != math.IsNaN(ch.Brightness) {
				t.Errorf("%g K: channel %d brightness %g (bracket [%g, %g])", c.temp, i, ch.Brightness, lo, hi)
			}
		}
	}
	// Narrowing the bracket to the measuring range.
	if err := r.SetBracket(700, 3000); err != nil {
		t.Fatal(err)
	}
	if res := at(3000.01); !math.IsNaN(res.Temperature) || res.Flags != AboveRange {
		t.Errorf("bracket [700, 3000]: 3000.01 K gives %g %v", res.Temperature, res.Flags)
	}
	for _, b := range [][2]float64{{0, 3000}, {701, 3000}, {700, 2999}, {math.NaN(), 3000}, {700, math.Inf(1)}, {2, 3000}} {
		if err := r.SetBracket(b[0], b[1]); err == nil || !strings.Contains(err.Error(), "bracket") {
			t.Errorf("SetBracket(%g, %g): error %v", b[0], b[1], err)
		}
	}
	if lo, hi := r.Bracket(); lo != 700 || hi != 3000 {
		t.Errorf("failed SetBracket changed the bracket to [%g, %g]", lo, hi)
	}
}

func TestRatioMonotonic(t *testing.T) {
	// Ratio temperature strictly increases with the signal ratio (identity:
	// S1,bb/S2,bb increases with T for λ1 < λ2).
	r := testRatio(t, 1)
	prev := 0.0
	n := 0
	for lr := -6.0; lr <= 1; lr += 0.001 {
		res := r.Convert(math.Exp(lr), 1)
		if math.IsNaN(res.Temperature) {
			continue
		}
		if !(res.Temperature > prev) {
			t.Fatalf("ln R = %g: T %.9f not above previous %.9f", lr, res.Temperature, prev)
		}
		prev = res.Temperature
		n++
	}
	if n < 1000 {
		t.Errorf("only %d ratios in the bracket", n)
	}
}

func TestRatioAllocations(t *testing.T) {
	r := testRatio(t, 1)
	s1, s2 := 0.3*r.Short.Signal(1500), 0.3*r.Long.Signal(1500)
	if n := testing.AllocsPerRun(100, func() { _ = r.Convert(s1, s2) }); n != 0 {
		t.Errorf("Convert allocates %g times per call, want 0", n)
	}
}

// fakeModel wraps a model with a chosen wavelength.
type fakeModel struct {
	Model
	lambda float64
}

func (f fakeModel) Wavelength() float64 { return f.lambda }

func TestNewRatioErrors(t *testing.T) {
	s, l := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	nan, inf := math.NaN(), math.Inf(1)
	for _, c := range []struct {
		name        string
		short, long Model
		k, min, max float64
		low         float64
		want        string
	}{
		{"nil short", nil, l, 1, 700, 3000, 0.02, "non-nil"},
		{"nil long", s, nil, 1, 700, 3000, 0.02, "non-nil"},
		{"swapped", l, s, 1, 700, 3000, 0.02, "wavelengths"},
		{"k zero", s, l, 0, 700, 3000, 0.02, "emissivity ratio"},
		{"k NaN", s, l, nan, 700, 3000, 0.02, "emissivity ratio"},
		{"k Inf", s, l, inf, 700, 3000, 0.02, "emissivity ratio"},
		{"min zero", s, l, 1, 0, 3000, 0.02, "measuring range"},
		{"max below min", s, l, 1, 700, 600, 0.02, "measuring range"},
		{"max Inf", s, l, 1, 700, inf, 0.02, "measuring range"},
		{"low negative", s, l, 1, 700, 3000, -0.1, "low-signal"},
		{"low one", s, l, 1, 700, 3000, 1, "low-signal"},
		{"low NaN", s, l, 1, 700, 3000, nan, "low-signal"},
		{"underflow", s, l, 1, 20, 3000, 0.02, "need finite and > 0"},
		{"ratio decreasing", fakeModel{l, 0.5e-6}, fakeModel{s, 0.6e-6}, 1, 700, 3000, 0.02, "not strictly increasing"},
	} {
		_, err := NewRatio(c.short, c.long, c.k, c.min, c.max, c.low)
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", c.name, err, c.want)
		}
	}
}

func TestRatioZeroValuePanics(t *testing.T) {
	// Using a Ratio not built by NewRatio is a caller bug.
	defer func() {
		if p := recover(); p == nil || !strings.Contains(p.(string), "NewRatio") {
			t.Errorf("panic %v, want one naming NewRatio", p)
		}
	}()
	var r Ratio
	if err := r.SetBracket(100, 200); err == nil {
		t.Error("SetBracket on a zero Ratio: no error")
	}
	r.Convert(1, 1)
}

func TestBrightnessTemperature(t *testing.T) {
	b := mustBand(t, shortLo, shortHi)
	for _, temp := range []float64{300, 700, 973.15, 1873.15, 3000, 4999} {
		got, ok := BrightnessTemperature(b, b.Signal(temp), 250, 5000)
		if !ok || math.Abs(got/temp-1) > 1e-11 {
			t.Errorf("band at %g K: brightness %.12g ok %v", temp, got, ok)
		}
	}
	if got, ok := BrightnessTemperature(b, b.Signal(250), 250, 5000); !ok || got != 250 {
		t.Errorf("at bracket low end: %g %v", got, ok)
	}
	for _, c := range []struct{ s, lo, hi float64 }{
		{math.NaN(), 250, 5000}, {math.Inf(1), 250, 5000}, {0, 250, 5000}, {-1, 250, 5000},
		{b.Signal(200), 250, 5000}, {b.Signal(6000), 250, 5000},
		{1, 0, 5000}, {1, 5000, 250}, {1, 250, math.Inf(1)}, {1, math.NaN(), 5000},
	} {
		if got, ok := BrightnessTemperature(b, c.s, c.lo, c.hi); ok || !math.IsNaN(got) {
			t.Errorf("BrightnessTemperature(%g, %g, %g) = %g, %v; want NaN, false", c.s, c.lo, c.hi, got, ok)
		}
	}
	if _, ok := BrightnessTemperature(nil, 1, 250, 5000); ok {
		t.Error("nil model: ok")
	}
}

func TestFlagsNames(t *testing.T) {
	for _, c := range []struct {
		f    Flags
		want string
	}{
		{0, ""},
		{LowSignal, "low_signal"},
		{BelowRange, "below_range"},
		{AboveRange, "above_range"},
		{NoSignal, "no_signal"},
		{LowSignal | AboveRange, "low_signal,above_range"},
		{NoSignal | BelowRange | LowSignal, "low_signal,below_range,no_signal"},
		{1 << 20, ""},
	} {
		if got := strings.Join(c.f.Names(), ","); got != c.want {
			t.Errorf("Flags(%#x).Names() = %q, want %q", uint32(c.f), got, c.want)
		}
	}
	if Flags(0).Names() != nil {
		t.Error("no flags: Names() not nil")
	}
	if got := (LowSignal | NoSignal).String(); got != "low_signal|no_signal" {
		t.Errorf("String() = %q", got)
	}
	if got := Flags(0).String(); got != "ok" {
		t.Errorf("String() = %q", got)
	}
	buf := make([]string, 0, 4)
	all := LowSignal | BelowRange | AboveRange | NoSignal
	if n := testing.AllocsPerRun(100, func() { buf = all.AppendNames(buf[:0]) }); n != 0 {
		t.Errorf("AppendNames allocates %g times", n)
	}
}
