package convert

import (
	"math"
	"math/rand/v2"
	"testing"
)

func TestFitScanIsGlobal(t *testing.T) {
	// The seeded, pruned scan finds the same node as an exhaustive search
	// of r² = ‖w − c_k‖² (identity), for targets across and beyond the
	// bracket with emissivities far from the fit's model.
	rng := rand.New(rand.NewPCG(3, 4))
	for _, c := range []struct {
		name   string
		models []Model
		terms  int
	}{
		{"three colours, two terms (q = 1)", threeBands(t), 2},
		{"three colours, one term (q = 2)", threeBands(t), 1},
		{"four colours, two terms (q = 2)", append(threeBands(t), mustBand(t, 1.175e-6, 1.225e-6)), 2},
		{"eight colours, two terms (q = 6)", eightBands(t), 2},
	} {
		p := mustPyrometer(t, c.models, Options{Min: 700, Max: 3000, FitTerms: c.terms, Publish: Selection{Kind: SelectFit}})
		fd := p.p.fit
		if fd.monotone == 0 {
			t.Errorf("%s: first component not monotone", c.name)
		}
		for range 300 {
			temp := 300 * math.Exp(rng.Float64()*math.Log(6000.0/300))
			var y, w [MaxChannels]float64
			for i, m := range c.models {
				y[i] = math.Log(m.Signal(temp)) + math.Log(0.5) + 0.3*rng.NormFloat64()
			}
			fd.project(&w, &y)
			best, want := math.Inf(1), -1
			for k := 0; (k+1)*fd.q <= len(fd.c); k++ {
				var r2 float64
				for a := range fd.q {
					d := w[a] - fd.c[k*fd.q+a]
					r2 += d * d
				}
				if r2 < best {
					best, want = r2, k
				}
			}
			if got := fd.scan(&w); got != want {
				t.Errorf("%s, %g K: scan node %d, exhaustive %d", c.name, temp, got, want)
			}
		}
	}
}

func TestFitEightColours(t *testing.T) {
	// Eight channels, log-linear emissivity: the two-term fit recovers the
	// temperature within 0.01 K and the slope (identity of the model, as
	// in TestPyrometerFitLogLinearEmissivity).
	models := eightBands(t)
	p := mustPyrometer(t, models, Options{Min: 700, Max: 3000, Publish: Selection{Kind: SelectFit}, NongreyLimit: 1})
	var res Result
	for _, temp := range []float64{700, 1100, 1900, 3000} {
		p.Convert(signalsOf(models, temp, func(um float64) float64 { return 0.3 * math.Exp(0.4*(um-1)) }), &res)
		if d := math.Abs(res.Temperature - temp); !(d <= 0.01) || math.Abs(res.Fit.Slope-0.4) > 1e-6 || !(res.Fit.Residual < 1e-9) {
			t.Errorf("%g K: T %.6f, fit %+v", temp, res.Temperature, res.Fit)
		}
		if res.NPairs != 8 || res.Pairs[7].I != 0 || res.Pairs[7].J != 7 || res.Flags != Nongrey {
			t.Errorf("%g K: %d pairs, outer %+v, flags %v", temp, res.NPairs, res.Pairs[7], res.Flags)
		}
	}
}
