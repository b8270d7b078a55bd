package status

import (
	"math"
	"testing"

	"glowgate/convert"
)

// The table's swatch of any temperature is convert.GlowColor's of that
// temperature to within one 8-bit step a channel, checked every 0.25 K
// across the table and past both of its ends.
func TestGlowTable(t *testing.T) {
	var g glowTable
	if _, ok := g.color(visibleGlowK - 0.6); ok {
		t.Errorf("a swatch below the Draper point")
	}
	if _, ok := g.color(math.NaN()); ok {
		t.Errorf("a swatch for NaN")
	}
	worst := 0
	for tK := float64(visibleGlowK); tK <= glowTableMaxK+50; tK += 0.25 {
		got, ok := g.color(tK)
		_, _, want := convert.GlowColor(tK)
		if !ok {
			t.Fatalf("no swatch at %g K", tK)
		}
		for c := range 3 {
			d := int(got[c]) - int(want[c])
			worst = max(worst, d, -d)
		}
		if worst > 1 {
			t.Fatalf("swatch at %g K = %v, GlowColor gives %v", tK, got, want)
		}
	}
	t.Logf("largest difference from GlowColor: %d step", worst)
}

func BenchmarkGlowTable(b *testing.B) {
	var g glowTable
	tK := 1423.15
	for b.Loop() {
		g.color(tK)
	}
}
