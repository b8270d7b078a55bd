package convert

import (
	"fmt"
	"math"
	"strings"
	"testing"
)

func TestRatioReferenceTable(t *testing.T) {
	// Source: ../testdata/ratio_reference.csv, written by
	// ratio_reference.py with scipy (integrate.quad band radiances,
	// optimize.brentq readings): three band pairs (one wide), 800–2800 K,
	// emissivity ratio settings 0.95–1.05, neutral losses 1, 0.5 and 0.1 of
	// a grey target (ε = 0.85).
	tb := readRefTable(t, "ratio_reference.csv")
	if !strings.Contains(tb.comments[0], "scipy ") {
		t.Errorf("ratio_reference.csv header does not name the scipy version: %q", tb.comments[0])
	}
	if c2 := tb.commentValue(t, "c2"); c2 != C2ITS90 {
		t.Fatalf("table made with c2 = %g, want %g", c2, C2ITS90)
	}
	// The table's c1L is scipy's 2hc²; C1L is that to ten digits.
	scale := C1L / tb.commentValue(t, "c1L")
	col := func(name string) int { return tb.col(t, name) }
	ip, isl, ish, ill, ilh := col("pair"), col("short_lo"), col("short_hi"), col("long_lo"), col("long_hi")
	itt, ik, iloss := col("t_true_K"), col("k_set"), col("loss")
	ipl1, ipl2, ib1, ib2, is1, is2, ird := col("planck_short"), col("planck_long"), col("bb_short"), col("bb_long"), col("s_short"), col("s_long"), col("t_read_K")

	type conv struct {
		r    *Ratio
		p    *Pyrometer
		s, l *Band
	}
	cache := map[[2]float64]conv{}
	get := func(row []float64) conv {
		key := [2]float64{row[ip], row[ik]}
		if c, ok := cache[key]; ok {
			return c
		}
		s, l := mustBand(t, row[isl], row[ish]), mustBand(t, row[ill], row[ilh])
		r, err := NewRatio(s, l, row[ik], 700, 3000, 0.02)
		if err != nil {
			t.Fatal(err)
		}
		p, err := NewPyrometer([]Model{s, l}, Options{Min: 700, Max: 3000, LowSignal: 0.02, Emissivity: []float64{row[ik], 1}})
		if err != nil {
			t.Fatal(err)
		}
		cache[key] = conv{r, p, s, l}
		return cache[key]
	}
	worst := 0.0
	var res Result
	for _, row := range tb.rows {
		c := get(row)
		tt, k, loss := row[itt], row[ik], row[iloss]
		what := func() string { return fmt.Sprintf("pair %g at %g K, k %g, loss %g", row[ip], tt, k, loss) }
		// Planck at the band centres and the band integrals.
		for _, q := range []struct {
			name      string
			got, want float64
		}{
			{"Planck short", Planck(c.s.Wavelength(), tt, C2ITS90), row[ipl1]},
			{"Planck long", Planck(c.l.Wavelength(), tt, C2ITS90), row[ipl2]},
			{"band short", c.s.Signal(tt), row[ib1]},
			{"band long", c.l.Signal(tt), row[ib2]},
		} {
			if rel := math.Abs(q.got/q.want - 1); !(rel <= 1e-9) {
				t.Errorf("%s: %s %.16g, scipy %.16g (rel %.2g > 1e-9)", what(), q.name, q.got, q.want, rel)
			}
			if rel := math.Abs(q.got/(q.want*scale) - 1); !(rel <= 1e-12) {
				t.Errorf("%s: %s %.16g, scipy with C1L %.16g (rel %.2g > 1e-12)", what(), q.name, q.got, q.want*scale, rel)
			}
		}
		// The reading, by Ratio and by a two-channel Pyrometer (k = e1/e2).
		want := row[ird]
		got := c.r.Convert(row[is1], row[is2])
		c.p.Convert([]float64{row[is1], row[is2]}, &res)
		for name, v := range map[string]float64{"Ratio": got.Temperature, "Pyrometer": res.Temperature} {
			if d := math.Abs(v - want); !(d <= 0.005) {
				t.Errorf("%s: %s reads %.6f K, scipy brentq %.6f K (off %.3g K > 0.005 K)", what(), name, v, want, d)
			}
			worst = math.Max(worst, math.Abs(v-want))
		}
		if res.Flags != got.Flags || res.Temperature != got.Temperature {
			t.Errorf("%s: Pyrometer %.9f K %v, Ratio %.9f K %v", what(), res.Temperature, res.Flags, got.Temperature, got.Flags)
		}
		// With k set right the neutral loss cancels in the ratio and shows in
		// the fractions: f = 0.85·loss (grey target behind a grey loss,
		// PHYSICS.md f_i = ε_i·τ).
		if k == 1 {
			if d := math.Abs(got.Temperature - tt); d > 0.005 {
				t.Errorf("%s: reads %.6f K, true %g K", what(), got.Temperature, tt)
			}
			for i, ch := range got.Channels[:2] {
				if d := math.Abs(ch.Fraction - 0.85*loss); !(d <= 1e-6) {
					t.Errorf("%s: channel %d fraction %.9f, want %g", what(), i, ch.Fraction, 0.85*loss)
				}
			}
		}
	}
	t.Logf("%d rows, largest deviation from scipy: %.3g K", len(tb.rows), worst)
}

func TestNeutralLoss(t *testing.T) {
	// A grey target behind a 90 % neutral loss: the loss cancels in the
	// ratio (PHYSICS.md, "a grey loss cancels in the ratio but lowers f"),
	// so the ratio temperature is unchanged within 0.01 K and both signal
	// fractions are 0.10 within 1e-6. Signals: the scipy band radiances of
	// ../testdata/band_radiance.csv times 0.1.
	tb := readRefTable(t, "band_radiance.csv")
	short, long := mustBand(t, shortLo, shortHi), mustBand(t, longLo, longHi)
	p, err := NewPyrometer([]Model{short, long}, Options{Min: 700, Max: 3000, LowSignal: 0.02})
	if err != nil {
		t.Fatal(err)
	}
	it, i1, i2 := tb.col(t, "t_K"), tb.col(t, "s_short"), tb.col(t, "s_long")
	var full, lossy Result
	for _, row := range tb.rows {
		tt := row[it]
		if tt < 700 || tt > 3000 {
			continue
		}
		p.Convert([]float64{row[i1], row[i2]}, &full)
		p.Convert([]float64{0.1 * row[i1], 0.1 * row[i2]}, &lossy)
		if d := math.Abs(lossy.Temperature - full.Temperature); !(d <= 0.01) || math.Abs(lossy.Temperature-tt) > 0.01 {
			t.Errorf("%g K: %.6f K behind the loss, %.6f K without", tt, lossy.Temperature, full.Temperature)
		}
		for i, ch := range lossy.Channels[:2] {
			if d := math.Abs(ch.Fraction - 0.1); !(d <= 1e-6) {
				t.Errorf("%g K: channel %d fraction %.9f, want 0.1", tt, i, ch.Fraction)
			}
		}
		if lossy.Flags != 0 {
			t.Errorf("%g K: flags %v behind a 90 %% loss with a 2 %% low-signal limit", tt, lossy.Flags)
		}
	}
}
