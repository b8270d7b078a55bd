package daemon

import (
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"glowgate/convert"
)

// kilnHeads is configs/kiln.yaml's two heads with the third-party parts
// stripped: a three-colour head and a two-colour head with peak hold and
// hold-last-valid.
const kilnHeads = `
gateway: fuzz-gw
unit: K
mqtt: {brokers: [tcp://127.0.0.1:1883]}
endpoints: [{name: ep, address: 127.0.0.1:15021}]
heads:
  - name: three
    endpoint: ep
    period: 100ms
    range: {min: 900degC, max: 1600degC}
    publish: outer
    channels:
      - {name: blue, band: {from: 0.750um, to: 0.800um}, saturation: 1e6, signal: {address: 0, type: float32}}
      - {name: mid, band: {from: 0.850um, to: 0.900um}, signal: {address: 2, type: float32}}
      - {name: red, band: {from: 1.000um, to: 1.050um}, signal: {address: 4, type: float32}}
    processing: {t90: 1s}
    uncertainty: {noise: [0.2%%, 0.2%%, 0.2%%], calibration: 2K}
  - name: two
    endpoint: ep
    unit_id: 2
    period: 100ms
    range: {min: 700degC, max: 1400degC}
    emissivity_ratio: %s
    channels:
      - {name: short, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
    processing: {hold: peak, decay: 5K/s, reset: 60s, hold_last_valid: 2s}
`

func kilnHead(t testing.TB, name string) *head {
	t.Helper()
	cfg := parseConfig(t, fmt.Sprintf(kilnHeads, "1.00"))
	hc, _ := cfg.Head(name)
	h, err := newHead(cfg, *hc, nil)
	if err != nil {
		t.Fatal(err)
	}
	return h
}

// bandSignals are the band radiances of a blackbody at tk, times factor
// per channel (emissivity × transmission).
func bandSignals(t testing.TB, tk float64, bands [][2]float64, factor ...float64) []float64 {
	t.Helper()
	s := make([]float64, len(bands))
	for i, b := range bands {
		m, err := convert.NewBand(b[0], b[1], convert.C2ITS90)
		if err != nil {
			t.Fatal(err)
		}
		s[i] = m.Signal(tk)
		if i < len(factor) {
			s[i] *= factor[i]
		}
	}
	return s
}

var (
	kilnBands = [][2]float64{{0.750e-6, 0.800e-6}, {0.850e-6, 0.900e-6}, {1.000e-6, 1.050e-6}}
	twoBands  = [][2]float64{{0.875e-6, 0.925e-6}, {1.025e-6, 1.075e-6}}
)

// TestThreeColourReading: a grey target behind a 90 % neutral loss reads
// its true temperature on every pair; the reading carries the pair
// temperatures, the non-grey index and the fit.
func TestThreeColourReading(t *testing.T) {
	h := kilnHead(t, "three")
	t0 := time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC)
	const tk = 1650.0
	r := h.reading(t0, bandSignals(t, tk, kilnBands, 0.1, 0.1, 0.1))
	if r.Quality != "good" || len(r.PairTemperatures) != 3 || r.Nongrey == nil || *r.Nongrey > 0.01 {
		b, _ := json.Marshal(r)
		t.Fatalf("reading: %s", b)
	}
	for _, p := range r.PairTemperatures {
		if math.Abs(*p.Temperature-tk) > 0.01 {
			t.Errorf("pair %s: %v K, want %v", p.Pair, *p.Temperature, tk)
		}
	}
	if got := []string{r.PairTemperatures[0].Pair, r.PairTemperatures[1].Pair, r.PairTemperatures[2].Pair}; got[0] != "blue/mid" || got[1] != "mid/red" || got[2] != "blue/red" {
		t.Errorf("pair names %v", got)
	}
	for _, c := range r.Channels {
		if math.Abs(*c.SignalFraction-0.1) > 1e-6 {
			t.Errorf("channel %s: signal fraction %v, want 0.1", c.Name, *c.SignalFraction)
		}
	}
	if r.Uncertainty == nil || *r.Uncertainty <= 4 { // at least 2 × the 2 K calibration
		t.Errorf("uncertainty %v", r.Uncertainty)
	}
	// A channel at its saturation level: no temperature rests on it.
	s := bandSignals(t, tk, kilnBands)
	s[0] = 1e6
	r = h.reading(t0.Add(time.Second), s)
	if r.Quality != "bad" || !slices.Contains(r.Flags, "saturated") {
		t.Errorf("saturated channel: quality %s flags %v", r.Quality, r.Flags)
	}
}

// TestHoldLastValid: while the signal is lost the two-colour head holds its
// last valid temperature, uncertain, for hold_last_valid; then it has none.
func TestHoldLastValid(t *testing.T) {
	h := kilnHead(t, "two")
	t0 := time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC)
	r := h.reading(t0, bandSignals(t, 1400, twoBands, 0.9, 0.9))
	if r.Quality != "good" || math.Abs(*r.Temperature-1400) > 0.01 {
		t.Fatalf("first reading: %s %v", r.Quality, *r.Temperature)
	}
	lost := bandSignals(t, 1400, twoBands, 0.001, 0.001) // below the 2 % low-signal limit
	r = h.reading(t0.Add(time.Second), lost)
	if r.Quality != "uncertain" || r.StatusCode != statusUncertainLastUsableValue || !slices.Contains(r.Flags, "held") || r.Temperature == nil {
		t.Errorf("within hold_last_valid: quality %s status %#x flags %v temperature %v", r.Quality, r.StatusCode, r.Flags, r.Temperature)
	}
	r = h.reading(t0.Add(3*time.Second), lost)
	if r.Quality == "good" || r.Temperature != nil {
		t.Errorf("after hold_last_valid: quality %s temperature %v", r.Quality, r.Temperature)
	}
}

// FuzzHeadReading feeds arbitrary signals and times to a three-colour head
// with processing: it never panics, and a good reading always has a finite
// temperature.
func FuzzHeadReading(f *testing.F) {
	f.Add(1e3, 2e3, 3e3, int64(100))
	f.Add(0.0, -1.0, math.NaN(), int64(-5))
	f.Add(math.Inf(1), 1.0, 1e300, int64(0))
	f.Add(1e-300, 5e-324, 1.0, int64(1<<40))
	h := kilnHead(f, "three")
	now := time.Date(2026, 12, 1, 8, 0, 0, 0, time.UTC)
	f.Fuzz(func(t *testing.T, s1, s2, s3 float64, stepMS int64) {
		now = now.Add(time.Duration(stepMS) * time.Millisecond)
		r := h.reading(now, []float64{s1, s2, s3})
		if r.Quality == "good" && (r.Temperature == nil || math.IsNaN(*r.Temperature) || math.IsInf(*r.Temperature, 0)) {
			t.Fatalf("good reading without a finite temperature: %+v", r)
		}
		if _, err := json.Marshal(r); err != nil {
			t.Fatal(err)
		}
	})
}

// BenchmarkBuildHeads builds the runtime heads of 64 alike (a start or a
// reload of the daemon), at 10 Hz with the default 10 s loss window.
func BenchmarkBuildHeads(b *testing.B) {
	var heads strings.Builder
	for i := 1; i <= 64; i++ {
		fmt.Fprintf(&heads, headTemplate, fmt.Sprintf("h%02d", i), i)
	}
	text := strings.ReplaceAll(fmt.Sprintf(threeHeads, "tcp://127.0.0.1:1883", "127.0.0.1:15020", heads.String()), "period: 20ms", "period: 100ms")
	cfg := parseConfig(b, text)
	for b.Loop() {
		if _, err := buildHeads(cfg); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.Elapsed().Milliseconds())/float64(b.N), "ms/build")
}
