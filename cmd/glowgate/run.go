package main

import (
	"context"
	"fmt"
	"os"
	"runtime/debug"
	"runtime/pprof"
	"strings"

	"glowgate/daemon"
	"glowgate/daemon/config"
)

func runCmd(ctx context.Context, e *env, args []string) error {
	fs := newFlags("run", "-config FILE [-broker URL] [-state-dir DIR]",
		"Polls every configured head and publishes its readings until SIGINT or SIGTERM.\n"+
			"SIGHUP reloads the configuration; an invalid one is logged and the running one stays.", e.stderr)
	path := fs.String("config", "", "configuration file (YAML)")
	broker := fs.String("broker", "", "broker URL(s), comma-separated, replacing mqtt.brokers (e.g. tcp://127.0.0.1:1883)")
	stateDir := fs.String("state-dir", "", "state directory (durable outbox), replacing state_dir")
	cpuProfile := fs.String("cpu-profile", "", "write a CPU profile of the whole run to `FILE` when it stops (read it with go tool pprof)")
	var lf logFlags
	lf.register(fs, "info")
	if err := parseNoArgs(fs, args); err != nil {
		return err
	}
	if _, set := os.LookupEnv("GOGC"); !set {
		// A gateway's heap is mostly the status page's history, long
		// lived: collecting at half the usual growth keeps the resident
		// set of 64 heads at 10 Hz near 36 MB instead of 43 MB, for no
		// CPU that shows (BENCHMARKS.md). GOGC in the environment wins.
		debug.SetGCPercent(gcPercent)
	}
	if *cpuProfile != "" {
		stop, err := startCPUProfile(*cpuProfile)
		if err != nil {
			return err
		}
		defer stop()
	}
	log, err := lf.logger(e.stderr)
	if err != nil {
		return err
	}
	cfg, err := loadConfig(*path)
	if err != nil {
		return err
	}
	var brokers []string
	if *broker != "" {
		brokers = strings.Split(*broker, ",")
		if err := config.CheckBrokerURLs(brokers); err != nil {
			return usageError{fmt.Errorf("-broker: %w", err)}
		}
	}
	d, err := daemon.New(daemon.Options{
		Config:   cfg,
		Load:     func() (*config.Config, error) { return config.Load(*path) },
		Reload:   e.hup,
		Brokers:  brokers,
		StateDir: *stateDir,
		Logger:   log,
		Version:  versionString(),
	})
	if err != nil {
		return err
	}
	log.Info("glowgate starting", "version", versionString(), "config", *path, "gateway", cfg.Gateway, "heads", len(cfg.Heads))
	err = d.Run(ctx)
	log.Info("glowgate stopped")
	return err
}

// gcPercent is the garbage collector's target of `glowgate run` (Go's
// default is 100).
const gcPercent = 50

// startCPUProfile profiles the process into path until stop is called.
func startCPUProfile(path string) (stop func(), err error) {
	f, err := os.Create(path)
	if err != nil {
		return nil, fmt.Errorf("-cpu-profile: %w", err)
	}
	if err := pprof.StartCPUProfile(f); err != nil {
		f.Close()
		return nil, fmt.Errorf("-cpu-profile %s: %w", path, err)
	}
	return func() {
		pprof.StopCPUProfile()
		f.Close()
	}, nil
}
