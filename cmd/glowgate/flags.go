package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"strings"

	"glowgate/daemon/config"
)

// newFlags makes a subcommand's flag set, printing its usage to w.
func newFlags(name, args, about string, w io.Writer) *flag.FlagSet {
	fs := flag.NewFlagSet(name, flag.ContinueOnError)
	fs.SetOutput(w)
	fs.Usage = func() {
		fmt.Fprintf(w, "usage: glowgate %s %s\n\n%s\n\nflags:\n", name, args, about)
		fs.PrintDefaults()
	}
	return fs
}

// parse parses args, turning a flag error into a usage error.
func parse(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return usageError{err}
	}
	return nil
}

// parseNoArgs parses args like parse and refuses positional arguments.
func parseNoArgs(fs *flag.FlagSet, args []string) error {
	if err := parse(fs, args); err != nil {
		return err
	}
	if fs.NArg() > 0 {
		return usageError{fmt.Errorf("unexpected arguments %q", fs.Args())}
	}
	return nil
}

// logFlags are the logging flags every long-running command takes.
type logFlags struct {
	level, format string
}

func (l *logFlags) register(fs *flag.FlagSet, level string) {
	fs.StringVar(&l.level, "log-level", level, "log level: debug, info, warn or error")
	fs.StringVar(&l.format, "log-format", "text", "log format: text or json")
}

// logger builds the one logger of the process, writing to w.
func (l *logFlags) logger(w io.Writer) (*slog.Logger, error) {
	var level slog.Level
	if err := level.UnmarshalText([]byte(l.level)); err != nil {
		return nil, usageError{fmt.Errorf("-log-level %q: want debug, info, warn or error", l.level)}
	}
	opts := &slog.HandlerOptions{Level: level}
	switch strings.ToLower(l.format) {
	case "text":
		return slog.New(slog.NewTextHandler(w, opts)), nil
	case "json":
		return slog.New(slog.NewJSONHandler(w, opts)), nil
	}
	return nil, usageError{fmt.Errorf("-log-format %q: want text or json", l.format)}
}

// loadConfig reads the configuration named by -config; a missing flag or
// an invalid file is a usage error (exit 2).
func loadConfig(path string) (*config.Config, error) {
	if path == "" {
		return nil, usageError{errors.New("-config FILE is required")}
	}
	cfg, err := config.Load(path)
	if err != nil {
		return nil, usageError{fmt.Errorf("invalid configuration:\n%w", err)}
	}
	return cfg, nil
}
