package convert

import (
	"math"
	"math/rand/v2"
	"testing"
)

// tableModels are channel sets of different kinds over which the tables
// are checked.
func tableModels(t *testing.T) map[string][]Model {
	t.Helper()
	sh := func(lo, hi float64) Model {
		m, err := mustBand(t, lo, hi).SakumaHattori(1623.15)
		if err != nil {
			t.Fatal(err)
		}
		return m
	}
	resp := func(l, r []float64) Model {
		m, err := NewResponsivity(l, r, C2ITS90)
		if err != nil {
			t.Fatal(err)
		}
		return m
	}
	return map[string][]Model{
		"50 nm bands":     threeBands(t),
		"wide bands":      {mustBand(t, 0.75e-6, 1.05e-6), mustBand(t, 1.3e-6, 1.65e-6)},
		"close bands":     {mustBand(t, 0.89e-6, 0.91e-6), mustBand(t, 0.93e-6, 0.95e-6)},
		"Sakuma–Hattori":  {sh(shortLo, shortHi), sh(longLo, longHi)},
		"responsivities":  {resp([]float64{0.85e-6, 0.92e-6, 0.95e-6}, []float64{0, 1, 0}), resp([]float64{1.0e-6, 1.05e-6, 1.1e-6}, []float64{0.2, 1, 0.5})},
		"infrared bands":  {mustBand(t, 3.9e-6, 4.1e-6), mustBand(t, 4.9e-6, 5.1e-6)},
		"eight channels":  eightBands(t),
		"visible to SWIR": {mustBand(t, 0.6e-6, 0.65e-6), mustBand(t, 1.55e-6, 1.6e-6)},
	}
}

func eightBands(t testing.TB) []Model {
	var m []Model
	for i := range 8 {
		c := 0.7e-6 + 0.1e-6*float64(i)
		m = append(m, mustBand(t, c-0.02e-6, c+0.02e-6))
	}
	return m
}

func TestTablesMatchModels(t *testing.T) {
	// The tables stand in for the models (see newTables): brightness
	// temperatures, pair temperatures and signals at a temperature must
	// agree with Newton's method on the exact models (BrightnessTemperature,
	// solveRatio) and with the models themselves, within 1e-9 relative
	// (0.0045 mK at 4500 K, well within 0.001 K), at random points across
	// the whole bracket and at its ends.
	rng := rand.New(rand.NewPCG(1, 2))
	for name, models := range tableModels(t) {
		g, tabs, pairs, err := newTables(models, 350, 4500, "test")
		if err != nil {
			t.Fatalf("%s: %v", name, err)
		}
		e := engine{grid: g, ch: tabs, pairs: pairs}
		worstB, worstP, worstS := 0.0, 0.0, 0.0
		for i, c := range tabs {
			if !c.certified {
				t.Errorf("%s: channel %d not certified (%d nodes, worst %.2g in ln S, %.2g in u)", name, i, len(c.ln), c.worstLn, c.worstU)
			}
		}
		for k, p := range pairs {
			if !p.certified {
				t.Errorf("%s: pair %d not certified (worst %.2g in u)", name, k, p.worstU)
			}
		}
		temps := []float64{350, 4500, math.Nextafter(350, 1e4), math.Nextafter(4500, 0)}
		for range 400 {
			temps = append(temps, 350*math.Exp(rng.Float64()*math.Log(4500.0/350)))
		}
		for _, temp := range temps {
			for i, c := range tabs {
				s := c.m.Signal(temp)
				b := g.brightness(c, math.Log(s))
				want, ok := BrightnessTemperature(c.m, s, 350, 4500)
				if !ok || !(math.Abs(b/want-1) <= 1e-9) {
					t.Errorf("%s: channel %d at %.6f K: table brightness %.12g, Newton %.12g", name, i, temp, b, want)
				}
				worstB = math.Max(worstB, math.Abs(b/want-1))
				k := 0
				for k < len(g.u)-2 && g.u[k+1] > 1/temp {
					k++
				}
				ls := g.lnSignalAt(c, k, 1/temp)
				if !(math.Abs(ls-math.Log(s)) <= 1e-9) {
					t.Errorf("%s: channel %d at %.6f K: table ln S %.15g, model %.15g", name, i, temp, ls, math.Log(s))
				}
				worstS = math.Max(worstS, math.Abs(ls-math.Log(s)))
			}
			for i := range tabs {
				for j := i + 1; j < len(tabs); j++ {
					y := math.Log(tabs[i].m.Signal(temp)) - math.Log(tabs[j].m.Signal(temp)) + 0.01*rng.NormFloat64()
					got, _, f := e.solvePair(i, j, y)
					if math.IsNaN(got) {
						if f == 0 {
							t.Errorf("%s: pair (%d, %d) at y %g: NaN without a range flag", name, i, j, y)
						}
						continue
					}
					want := solveRatio(tabs[i].m, tabs[j].m, y, 1/4500.0, 1/350.0, 1/got)
					if !(math.Abs(got/want-1) <= 1e-9) {
						t.Errorf("%s: pair (%d, %d) at %.6f K: table %.12g K, Newton %.12g K", name, i, j, temp, got, want)
					}
					worstP = math.Max(worstP, math.Abs(got/want-1))
				}
			}
		}
		t.Logf("%s: %d nodes; worst relative error: brightness %.2g, pair %.2g; ln S %.2g", name, len(g.u), worstB, worstP, worstS)
	}
}

// wiggly is a model with a ripple too fine for any table: the tables are
// not certified and the converters must fall back to Newton's method on
// the model.
type wiggly struct{ Model }

func (w wiggly) Signal(t float64) float64 { s, _ := w.SignalDeriv(t); return s }

func (w wiggly) SignalDeriv(t float64) (float64, float64) {
	s, ds := w.Model.SignalDeriv(t)
	f := 1 + 1e-6*math.Sin(3*t)
	return s * f, ds*f + s*3e-6*math.Cos(3*t)
}

func TestTablesUncertifiedFallBack(t *testing.T) {
	// Identity: with uncertified tables the results still solve the model
	// equations (to 1e-11 relative).
	models := []Model{wiggly{mustBand(t, shortLo, shortHi)}, mustBand(t, longLo, longHi)}
	r, err := NewRatio(models[0], models[1], 1, 700, 3000, 0.02)
	if err != nil {
		t.Fatal(err)
	}
	if r.eng.ch[0].certified || r.eng.pairs[0].certified || len(r.eng.grid.u) != gridMaxNodes {
		t.Fatalf("ripple model certified: %+v, pair %+v, %d nodes", r.eng.ch[0].certified, r.eng.pairs[0], len(r.eng.grid.u))
	}
	if !r.eng.ch[1].certified {
		t.Errorf("smooth channel not certified")
	}
	for _, temp := range []float64{700, 1111.1, 2345.6, 3000} {
		s1, s2 := 0.5*models[0].Signal(temp), 0.5*models[1].Signal(temp)
		res := r.Convert(s1, s2)
		if math.Abs(res.Temperature/temp-1) > 1e-11 {
			t.Errorf("%g K: reads %.12g K", temp, res.Temperature)
		}
		b, _ := BrightnessTemperature(models[0], s1, 350, 4500)
		if math.Abs(res.Channels[0].Brightness/b-1) > 1e-11 {
			t.Errorf("%g K: brightness %.12g K, Newton %.12g K", temp, res.Channels[0].Brightness, b)
		}
		if math.Abs(res.Channels[0].Fraction-0.5) > 1e-9 {
			t.Errorf("%g K: fraction %.12g", temp, res.Channels[0].Fraction)
		}
	}
}

func TestHermite(t *testing.T) {
	// A cubic Hermite interpolant reproduces cubics exactly (identity),
	// with its derivative.
	f := func(x float64) (float64, float64) { return 2 - x + 0.5*x*x - 0.25*x*x*x, -1 + x - 0.75*x*x }
	x0, x1 := 0.3, 1.7
	f0, d0 := f(x0)
	f1, d1 := f(x1)
	for x := 0.3; x <= 1.7; x += 0.1 {
		want, dwant := f(x)
		p, dp := hermite(x, x0, x1, f0, f1, d0, d1)
		if math.Abs(p-want) > 1e-14 || math.Abs(dp-dwant) > 1e-13 || hermiteValue(x, x0, x1, f0, f1, d0, d1) != p && math.Abs(hermiteValue(x, x0, x1, f0, f1, d0, d1)-p) > 1e-15 {
			t.Errorf("x %g: %g %g, want %g %g", x, p, dp, want, dwant)
		}
	}
}
