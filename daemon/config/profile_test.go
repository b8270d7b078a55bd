package config

import (
	"math"
	"testing"
	"time"
)

func TestProfileAt(t *testing.T) {
	// start 100, hold 10s, ramp to 200 over 10s, step to 50, hold 5s:
	// a pass takes 25s. Expected values by linear interpolation, by hand.
	p := Profile{Start: 100, Segments: []Segment{
		{"hold", 100, 10 * time.Second},
		{"ramp", 200, 10 * time.Second},
		{"step", 50, 0},
		{"hold", 50, 5 * time.Second},
	}}
	if p.Duration() != 25*time.Second {
		t.Fatalf("Duration = %v", p.Duration())
	}
	cases := []struct {
		at   time.Duration
		want float64
	}{
		{-time.Second, 100},
		{0, 100},
		{9999 * time.Millisecond, 100},
		{10 * time.Second, 100},
		{15 * time.Second, 150},
		{17500 * time.Millisecond, 175},
		{20 * time.Second, 50}, // the ramp ends and the step takes effect at once
		{24 * time.Second, 50},
		{25 * time.Second, 50},
		{time.Hour, 50}, // without repeat the last value holds
	}
	for _, c := range cases {
		if got := p.At(c.at); math.Abs(got-c.want) > 1e-9 {
			t.Errorf("At(%v) = %g, want %g", c.at, got, c.want)
		}
	}
	p.Repeat = true
	for _, c := range []struct {
		at   time.Duration
		want float64
	}{
		{25 * time.Second, 100},
		{40 * time.Second, 150},
		{25*time.Second*1000 + 17500*time.Millisecond, 175},
	} {
		if got := p.At(c.at); math.Abs(got-c.want) > 1e-9 {
			t.Errorf("repeating At(%v) = %g, want %g", c.at, got, c.want)
		}
	}
}

func TestProfileConstant(t *testing.T) {
	p := Profile{Start: 0.8, Repeat: true}
	for _, at := range []time.Duration{0, time.Second, time.Hour} {
		if got := p.At(at); got != 0.8 {
			t.Errorf("At(%v) = %g", at, got)
		}
	}
}

// TestProfileFromConfig decodes the transmission profile of the demo's
// reheat-exit head and checks the steam episodes it describes.
func TestProfileFromConfig(t *testing.T) {
	cfg, err := Load("../../configs/demo.yaml")
	if err != nil {
		t.Fatal(err)
	}
	h, ok := cfg.Head("reheat-exit")
	if !ok {
		t.Fatal("no reheat-exit head")
	}
	tr := h.Sim.Transmission
	lowest, dips := 1.0, 0
	prev := tr.At(0)
	for at := time.Duration(0); at < tr.Duration(); at += 100 * time.Millisecond {
		v := tr.At(at)
		lowest = min(lowest, v)
		if v < 0.5 && prev >= 0.5 {
			dips++
		}
		prev = v
	}
	if dips != 2 || math.Abs(lowest-0.10) > 1e-9 {
		t.Errorf("%d dips, lowest %g; want 2 dips down to 10%%", dips, lowest)
	}
	if d := tr.Duration(); d < 50*time.Second || d > 70*time.Second {
		t.Errorf("a pass takes %v; the episodes should come about every 30 s", d)
	}
}
