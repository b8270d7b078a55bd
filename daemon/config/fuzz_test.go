package config

import (
	"math"
	"os"
	"path/filepath"
	"testing"
)

// FuzzParse feeds arbitrary bytes to Parse: it must never panic, and it
// returns either a Config that keeps the schema's promises or Errors.
func FuzzParse(f *testing.F) {
	seeds, err := filepath.Glob("testdata/invalid/*.yaml")
	if err != nil {
		f.Fatal(err)
	}
	seeds = append(seeds, "../../configs/demo.yaml", "testdata/valid/every-field.yaml")
	for _, s := range seeds {
		data, err := os.ReadFile(s)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		cfg, err := Parse("fuzz.yaml", data)
		if err != nil {
			if cfg != nil {
				t.Fatal("a Config with errors")
			}
			errs, ok := err.(Errors)
			if !ok || len(errs) == 0 {
				t.Fatalf("error %T %v", err, err)
			}
			for _, e := range errs {
				if e.Msg == "" || e.Line < 0 {
					t.Fatalf("malformed problem %#v", e)
				}
			}
			return
		}
		if cfg.Gateway == "" || len(cfg.Heads) == 0 {
			t.Fatalf("accepted a config without gateway or heads: %+v", cfg)
		}
		for _, h := range cfg.Heads {
			if _, ok := cfg.Endpoint(h.Endpoint); !ok {
				t.Fatalf("head %s on unknown endpoint %q", h.Name, h.Endpoint)
			}
			if len(h.Channels) != 2 || !(h.Channels[0].Wavelength() < h.Channels[1].Wavelength()) {
				t.Fatalf("head %s channels %+v", h.Name, h.Channels)
			}
			if !(h.RangeMin > 0 && h.RangeMin < h.RangeMax) || !(h.EmissivityRatio > 0) || h.Period <= 0 {
				t.Fatalf("head %s %+v", h.Name, h)
			}
			if len(h.Sim.Emissivity) != len(h.Channels) {
				t.Fatalf("head %s sim emissivity %v", h.Name, h.Sim.Emissivity)
			}
			for _, ch := range h.Channels {
				if (ch.Band == nil) == (ch.SakumaHattori == nil) || ch.Signal.Registers() == 0 || ch.Signal.Scale == 0 {
					t.Fatalf("head %s channel %+v", h.Name, ch)
				}
			}
			for _, p := range []Profile{h.Sim.Temperature, h.Sim.Transmission} {
				if p.Repeat && p.Duration() <= 0 {
					t.Fatalf("head %s repeating profile without time", h.Name)
				}
				if v := p.At(p.Duration() / 2); math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatalf("head %s profile value %v", h.Name, v)
				}
			}
		}
	})
}
