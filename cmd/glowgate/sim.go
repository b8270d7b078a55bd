package main

import (
	"context"
	"fmt"

	"glowgate/daemon"
)

func simCmd(ctx context.Context, e *env, args []string) error {
	fs := newFlags("sim", "-config FILE",
		"Serves every head of the configuration over Modbus TCP at the endpoints it names,\n"+
			"with signals from the heads' channel models following each head's sim scenario.", e.stderr)
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
	for name, addr := range s.Addresses() {
		fmt.Fprintf(e.stdout, "serving endpoint %s on modbus tcp %s\n", name, addr)
	}
	<-ctx.Done()
	return nil
}
