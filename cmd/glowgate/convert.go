package main

import (
	"context"
	"fmt"
	"strconv"
	"time"

	"glowgate/daemon"
)

func convertCmd(_ context.Context, e *env, args []string) error {
	fs := newFlags("convert", "-config FILE -head NAME S1 S2 [S3 ...]",
		"Converts the channel signals S1 (short wavelength) and S2 (long wavelength) of a head\n"+
			"to one reading, printed as JSON exactly as the daemon publishes it.", e.stderr)
	path := fs.String("config", "", "configuration file (YAML)")
	name := fs.String("head", "", "head whose channel models and settings to use")
	if err := parse(fs, args); err != nil {
		return err
	}
	if *name == "" {
		return usageError{fmt.Errorf("-head NAME is required")}
	}
	signals := make([]float64, fs.NArg())
	for i, a := range fs.Args() {
		v, err := strconv.ParseFloat(a, 64)
		if err != nil {
			return usageError{fmt.Errorf("signal %d %q: not a number", i+1, a)}
		}
		signals[i] = v
	}
	cfg, err := loadConfig(*path)
	if err != nil {
		return err
	}
	r, err := daemon.Convert(cfg, *name, signals, time.Now())
	if err != nil {
		return usageError{err}
	}
	out := r.AppendJSON(nil)
	_, err = e.stdout.Write(append(out, '\n'))
	return err
}
