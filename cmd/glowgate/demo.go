package main

import (
	"context"

	"glowgate/daemon"
)

func demoCmd(ctx context.Context, e *env, args []string) error {
	fs := newFlags("demo", "[-broker-listen ADDR] [-http ADDR]",
		"Runs an embedded MQTT broker, the simulated heads of the embedded demo configuration\n"+
			"and the daemon, and prints a live summary. Ctrl-C stops everything.", e.stderr)
	listen := fs.String("broker-listen", "", "address of the embedded broker (default 127.0.0.1:1883, or a free port when taken)")
	every := fs.Duration("summary", 0, "interval of the live summary (default 5s)")
	httpAddr := fs.String("http", "", "address of the status page (default 127.0.0.1:8080, or a free port when taken)")
	var lf logFlags
	lf.register(fs, "warn")
	if err := parseNoArgs(fs, args); err != nil {
		return err
	}
	log, err := lf.logger(e.stderr)
	if err != nil {
		return err
	}
	return daemon.Demo(ctx, daemon.DemoOptions{
		BrokerListen: *listen,
		HTTP:         *httpAddr,
		Out:          e.stdout,
		SummaryEvery: *every,
		Logger:       log,
		Version:      versionString(),
	})
}
