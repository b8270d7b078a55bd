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
	fmt.Fprintf(w, "gateway %s, unit %s, %d endpoint(s), %d line(s), %d head(s)\n", cfg.Gateway, cfg.Unit, len(cfg.Endpoints), len(cfg.Lines), len(cfg.Heads))
	for _, b := range cfg.MQTT.Brokers {
		fmt.Fprintf(w, "broker  %s\n", b)
	}
	for _, ep := range cfg.Endpoints {
		fmt.Fprintf(w, "endpoint %s  modbus tcp %s  timeout %s", ep.Name, ep.Address, ep.Timeout)
		if ep.InFlight > 1 {
			fmt.Fprintf(w, ", %d requests in flight", ep.InFlight)
		}
		fmt.Fprintln(w)
		summariseHeads(w, cfg, func(h config.Head) bool { return h.Endpoint == ep.Name })
	}
	for _, l := range cfg.Lines {
		fmt.Fprintf(w, "line %s  modbus rtu %s  %d baud, parity %s, %d stop bit(s), timeout %s\n",
			l.Name, l.Device, l.Baud, l.Parity, l.StopBits, l.Timeout)
		summariseHeads(w, cfg, func(h config.Head) bool { return h.Line == l.Name })
	}
	fmt.Fprintln(w, "topics:")
	fmt.Fprintf(w, "  %s (retained state)\n", topics.State())
	for _, h := range cfg.Heads {
		fmt.Fprintf(w, "  %s\n  %s (retained)\n", topics.Reading(h.Name), topics.Info(h.Name))
	}
}

// summariseHeads prints the heads that on picks.
func summariseHeads(w io.Writer, cfg *config.Config, on func(config.Head) bool) {
	for _, h := range cfg.Heads {
		if !on(h) {
			continue
		}
		fmt.Fprintf(w, "  head %-16s unit %-3d %s registers, every %s, range %s..%s, publish %s\n",
			h.Name, h.UnitID, h.Registers, h.Period, temp(h.RangeMin, cfg.Unit), temp(h.RangeMax, cfg.Unit), publishWord(h))
		for _, ch := range h.Channels {
			fmt.Fprintf(w, "    channel %-8s %.4g um  %s at %d\n", ch.Name, ch.Wavelength()*1e6, ch.Signal.Type, ch.Signal.Address)
		}
		if h.Status != nil {
			fmt.Fprintf(w, "    status word at %d, %d bit(s)\n", h.Status.Address, len(h.Status.Bits))
		}
		for _, e := range h.Extras {
			fmt.Fprintf(w, "    extra %-16s %s, %s at %d\n", e.Name, e.Kind, e.Signal.Type, e.Signal.Address)
		}
	}
}

// publishWord says which temperature a head publishes.
func publishWord(h config.Head) string {
	switch h.Publish.Kind {
	case "pair":
		return fmt.Sprintf("%s/%s (k=%g)", h.Channels[h.Publish.I].Name, h.Channels[h.Publish.J].Name, h.EmissivityRatio)
	}
	return h.Publish.Kind
}

func temp(k float64, unit string) string {
	if unit == "degC" {
		return fmt.Sprintf("%gdegC", math.Round((k-273.15)*1e6)/1e6)
	}
	return fmt.Sprintf("%gK", math.Round(k*1e6)/1e6)
}
