package sim

import (
	"fmt"
	"math"
	"strings"
	"testing"
	"time"
)

const s = time.Second

// The expected values below follow from the piecewise-linear definition in
// Profile's doc comment (hand arithmetic, no external source needed).
func TestProfileAt(t *testing.T) {
	// 10 s hold at 1000, 10 s ramp to 1100, step to 900, 5 s hold: 25 s in all.
	casting := []Segment{
		{Kind: Hold, Duration: 10 * s},
		{Kind: Ramp, Value: 1100, Duration: 10 * s},
		{Kind: Step, Value: 900},
		{Kind: Hold, Duration: 5 * s},
	}
	once := Profile{Start: 1000, Segments: casting}
	again := Profile{Start: 1000, Repeat: true, Segments: casting}

	tests := []struct {
		name    string
		p       Profile
		elapsed time.Duration
		want    float64
	}{
		{"before start", once, -time.Hour, 1000},
		{"at start", once, 0, 1000},
		{"inside hold", once, 5 * s, 1000},
		{"hold end is ramp start", once, 10 * s, 1000},
		{"ramp quarter", once, 12*s + 500*time.Millisecond, 1025},
		{"ramp middle", once, 15 * s, 1050},
		{"ramp 1 ns before end", once, 20*s - 1, 1000 + 100*float64(10*s-1)/float64(10*s)},
		{"step at ramp end is right-continuous", once, 20 * s, 900},
		{"after step", once, 22 * s, 900},
		{"end of profile", once, 25 * s, 900},
		{"long after end holds", once, 1000 * time.Hour, 900},

		{"repeat first pass", again, 15 * s, 1050},
		{"repeat restarts from start at period", again, 25 * s, 1000},
		{"repeat second pass ramp", again, 40 * s, 1050},
		{"repeat second pass step", again, 45 * s, 900},
		{"repeat 1 ns before period", again, 25*s - 1, 900},
		{"repeat many periods later", again, 1000*25*s + 15*s, 1050},
		{"repeat before start", again, -s, 1000},

		{"empty profile", Profile{Start: 3}, 0, 3},
		{"empty profile later", Profile{Start: 3}, time.Hour, 3},
		{"empty repeating profile", Profile{Start: 3, Repeat: true}, time.Hour, 3},
		{"constant", Constant(0.5), 7 * s, 0.5},

		{"leading step applies at zero", Profile{Start: 1, Segments: []Segment{{Kind: Step, Value: 2}, {Kind: Hold, Duration: s}}}, 0, 2},
		{"zero-length ramp acts as step", Profile{Start: 1, Segments: []Segment{{Kind: Ramp, Value: 2}, {Kind: Hold, Duration: s}}}, 0, 2},
		{"zero-length hold is skipped", Profile{Start: 1, Segments: []Segment{{Kind: Hold}, {Kind: Ramp, Value: 3, Duration: 2 * s}}}, s, 2},
		{"repeating zero-length profile holds end value", Profile{Start: 1, Repeat: true, Segments: []Segment{{Kind: Step, Value: 2}, {Kind: Ramp, Value: 4}}}, time.Hour, 4},
		{"repeat wraps back to leading step", Profile{Start: 1, Repeat: true, Segments: []Segment{{Kind: Step, Value: 2}, {Kind: Ramp, Value: 4, Duration: 2 * s}}}, 2 * s, 2},
		{"ramp down", Profile{Start: 1, Segments: []Segment{{Kind: Ramp, Value: 0, Duration: 4 * s}}}, s, 0.75},
		{"ramp end value exact", Profile{Start: 1, Segments: []Segment{{Kind: Ramp, Value: 0.3, Duration: 3 * s}}}, 3 * s, 0.3},
		{"step duration is ignored", Profile{Start: 0, Segments: []Segment{{Kind: Step, Value: 5, Duration: 10 * s}, {Kind: Ramp, Value: 15, Duration: 10 * s}}}, 5 * s, 10},
		{"negative duration counts as zero", Profile{Start: 0, Segments: []Segment{{Kind: Hold, Duration: -s}, {Kind: Ramp, Value: 4, Duration: 4 * s}}}, s, 1},
		{"unknown kind holds", Profile{Start: 7, Segments: []Segment{{Kind: SegmentKind(9), Value: 1, Duration: s}}}, s / 2, 7},
		{"overflowing total still answers", Profile{Start: 1, Repeat: true, Segments: []Segment{{Kind: Hold, Duration: math.MaxInt64}, {Kind: Step, Value: 2}, {Kind: Hold, Duration: math.MaxInt64}}}, time.Hour, 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got := tc.p.At(tc.elapsed)
			if math.Abs(got-tc.want) > 1e-12*math.Max(1, math.Abs(tc.want)) {
				t.Errorf("At(%v) = %.15g, want %.15g", tc.elapsed, got, tc.want)
			}
		})
	}
}

// A repeating profile has the same value at e and e + n·period (exact integer
// arithmetic on nanoseconds).
func TestProfileAtPeriodic(t *testing.T) {
	p := Profile{Start: 1793.15, Repeat: true, Segments: []Segment{
		{Kind: Hold, Duration: 20 * s},
		{Kind: Ramp, Value: 1833.15, Duration: 15 * s},
		{Kind: Step, Value: 1763.15},
		{Kind: Hold, Duration: 7*s + 3},
	}}
	period := p.Duration()
	if want := 42*s + 3; period != want {
		t.Fatalf("Duration() = %v, want %v", period, want)
	}
	for e := time.Duration(0); e < period; e += 997 * time.Millisecond {
		for _, n := range []time.Duration{1, 2, 1000} {
			if a, b := p.At(e), p.At(e+n*period); a != b {
				t.Fatalf("At(%v) = %v but At(%v + %d periods) = %v", e, a, e, n, b)
			}
		}
	}
}

// Between segment boundaries the value never leaves [Bounds()].
func TestProfileBounds(t *testing.T) {
	p := Profile{Start: 0.5, Segments: []Segment{
		{Kind: Hold, Value: 99, Duration: s}, // a hold's Value plays no part
		{Kind: Ramp, Value: 0.15, Duration: 2 * s},
		{Kind: Step, Value: 0.9},
		{Kind: Ramp, Value: 1, Duration: s},
	}}
	lo, hi := p.Bounds()
	if lo != 0.15 || hi != 1 {
		t.Fatalf("Bounds() = %v, %v; want 0.15, 1", lo, hi)
	}
	for e := time.Duration(0); e <= p.Duration()+s; e += 10 * time.Millisecond {
		if v := p.At(e); v < lo || v > hi {
			t.Fatalf("At(%v) = %v outside [%v, %v]", e, v, lo, hi)
		}
	}
	if lo, hi := Constant(4).Bounds(); lo != 4 || hi != 4 {
		t.Errorf("Constant(4).Bounds() = %v, %v", lo, hi)
	}
}

func TestProfileValidate(t *testing.T) {
	tests := []struct {
		name string
		p    Profile
		want string // substring of the error; empty for a valid profile
	}{
		{"empty", Profile{Start: 1}, ""},
		{"full", Profile{Start: 1, Repeat: true, Segments: []Segment{{Kind: Hold, Duration: s}, {Kind: Ramp, Value: 2, Duration: s}, {Kind: Step, Value: 1}}}, ""},
		{"hold value ignored even if NaN", Profile{Start: 1, Segments: []Segment{{Kind: Hold, Value: math.NaN(), Duration: s}}}, ""},
		{"NaN start", Profile{Start: math.NaN()}, "start: value NaN is not finite"},
		{"infinite ramp", Profile{Start: 1, Segments: []Segment{{Kind: Ramp, Value: math.Inf(1), Duration: s}}}, "segments[0]: ramp value +Inf is not finite"},
		{"unknown kind", Profile{Start: 1, Segments: []Segment{{Kind: Hold, Duration: s}, {Kind: 7}}}, "segments[1]: unknown kind 7"},
		{"negative duration", Profile{Start: 1, Segments: []Segment{{Kind: Ramp, Value: 2, Duration: -s}}}, "segments[0]: ramp duration -1s is negative"},
		{"step with duration", Profile{Start: 1, Segments: []Segment{{Kind: Step, Value: 2, Duration: s}}}, "segments[0]: step takes no duration"},
		{"overflow", Profile{Start: 1, Segments: []Segment{{Kind: Hold, Duration: math.MaxInt64}, {Kind: Hold, Duration: 1}}}, "segments[1]: total duration overflows"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			err := tc.p.Validate()
			switch {
			case tc.want == "" && err != nil:
				t.Fatalf("Validate() = %v, want nil", err)
			case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
				t.Fatalf("Validate() = %v, want an error containing %q", err, tc.want)
			}
		})
	}
}

func TestSegmentKindString(t *testing.T) {
	for k, want := range map[SegmentKind]string{Hold: "hold", Ramp: "ramp", Step: "step", 5: "SegmentKind(5)"} {
		if got := k.String(); got != want {
			t.Errorf("%d.String() = %q, want %q", uint8(k), got, want)
		}
	}
}

func ExampleProfile_At() {
	// A strand temperature in kelvin: hold 20 s, ramp up 40 K over 15 s, drop
	// 70 K, hold 5 s, and start over.
	p := Profile{Start: 1793.15, Repeat: true, Segments: []Segment{
		{Kind: Hold, Duration: 20 * time.Second},
		{Kind: Ramp, Value: 1833.15, Duration: 15 * time.Second},
		{Kind: Step, Value: 1763.15},
		{Kind: Hold, Duration: 5 * time.Second},
	}}
	for _, e := range []time.Duration{0, 25 * time.Second, 35 * time.Second, 40 * time.Second, 65 * time.Second} {
		fmt.Printf("t=%v T=%.2f K\n", e, p.At(e))
	}
	// Output:
	// t=0s T=1793.15 K
	// t=25s T=1806.48 K
	// t=35s T=1763.15 K
	// t=40s T=1793.15 K
	// t=1m5s T=1806.48 K
}
