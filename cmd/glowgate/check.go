package main

import (
	"context"
	"fmt"
	"io"
	"math"

	"glowgate/bus/mqtt"
	"glowgate/daemon/config"
)

func checkCmd(_ context.Context, e *env, args []string) error {
	fs := newFlags("check", "-config FILE",
		"Validates a configuration. Prints a summary, or every error as FILE:LINE: field.path: message (exit 2).", e.stderr)
	path := fs.String("config", "", "configuration file (YAML)")
	if err := parseNoArgs(fs, args); err != nil {
		return err
	}
	cfg, err := loadConfig(*path)
	if err != nil {
		return err
	}
	summarise(e.stdout, cfg)
	return nil
}

// summarise prints what a configuration sets up: endpoints, heads, topics.
func summarise(w io.Writer, cfg *config.Config) {
	topics := mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}
	fmt.Fprintf(w, "%s: ok\n", cfg.File)
	fmt.Fprintf(w, "gateway %s, unit %s, %d endpoint(s), %d head(s)\n", cfg.Gateway, cfg.Unit, len(cfg.Endpoints), len(cfg.Heads))
	for _, b := range cfg.MQTT.Brokers {
		fmt.Fprintf(w, "broker  %s\n", b)
	}
	for _, ep := range cfg.Endpoints {
		fmt.Fprintf(w, "endpoint %s  modbus tcp %s  timeout %s\n", ep.Name, ep.Address, ep.Timeout)
		for _, h := range cfg.Heads {
			if h.Endpoint != ep.Name {
				continue
			}
			fmt.Fprintf(w, "  head %-16s unit %-3d %s registers, every %s, range %s..%s, k=%g\n",
				h.Name, h.UnitID, h.Registers, h.Period, temp(h.RangeMin, cfg.Unit), temp(h.RangeMax, cfg.Unit), h.EmissivityRatio)
			for _, ch := range h.Channels {
				fmt.Fprintf(w, "    channel %-8s %.4g um  %s at %d\n", ch.Name, ch.Wavelength()*1e6, ch.Signal.Type, ch.Signal.Address)
			}
		}
	}
	fmt.Fprintln(w, "topics:")
	fmt.Fprintf(w, "  %s (retained state)\n", topics.State())
	for _, h := range cfg.Heads {
		fmt.Fprintf(w, "  %s\n  %s (retained)\n", topics.Reading(h.Name), topics.Info(h.Name))
	}
}

func temp(k float64, unit string) string {
	if unit == "degC" {
		return fmt.Sprintf("%gdegC", math.Round((k-273.15)*1e6)/1e6)
	}
	return fmt.Sprintf("%gK", math.Round(k*1e6)/1e6)
}
