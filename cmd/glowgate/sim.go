package main

import (
	"context"
	"fmt"
	"maps"
	"slices"

	"glowgate/daemon"
)

func simCmd(ctx context.Context, e *env, args []string) error {
	fs := newFlags("sim", "-config FILE",
		"Serves every head of the configuration with signals from the heads' channel models\n"+
			"following each head's sim scenario: over Modbus TCP at each endpoint, and over Modbus\n"+
			"RTU on a pseudo-terminal for each line, linked at the line's device path and paced\n"+
			"like its baud rate. Faults, status bits and extra values follow the scenario too.", e.stderr)
	path := fs.String("config", "", "configuration file (YAML)")
	var lf logFlags
	lf.register(fs, "info")
	if err := parseNoArgs(fs, args); err != nil {
		return err
	}
	log, err := lf.logger(e.stderr)
	if err != nil {
		return err
	}
	cfg, err := loadConfig(*path)
	if err != nil {
		return err
	}
	s, err := daemon.NewSimulator(cfg, log)
	if err != nil {
		return err
	}
	if err := s.Start(ctx); err != nil {
		return err
	}
	defer s.Close()
	addrs := s.Addresses()
	names := slices.Sorted(maps.Keys(addrs))
	for _, name := range names {
		fmt.Fprintf(e.stdout, "serving %s on %s\n", name, addrs[name])
	}
	<-ctx.Done()
	return nil
}
