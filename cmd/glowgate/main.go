// Command glowgate polls multi-colour pyrometer heads over Modbus, converts
// their channel ratios to temperatures and publishes readings over MQTT. It
// also carries the commissioning tools. Run "glowgate help" for the list.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
)

// Exit statuses.
const (
	exitOK      = 0
	exitFailure = 1 // runtime failure
	exitUsage   = 2 // bad usage or bad configuration
)

// command is one subcommand: its name, a one-line summary and its body.
type command struct {
	name, summary string
	run           func(ctx context.Context, env *env, args []string) error
}

var commands = []command{
	{"run", "poll the configured heads and publish readings (the daemon)", runCmd},
	{"check", "validate a configuration and summarise it", checkCmd},
	{"demo", "run broker, simulated heads and daemon on the embedded demo configuration", demoCmd},
	{"sim", "serve simulated heads over Modbus TCP as a configuration describes", simCmd},
	{"convert", "convert channel signals given on the command line to one reading", convertCmd},
	{"calibrate", "fit Sakuma–Hattori curves to blackbody points and print the configuration lines", calibrateCmd},
	{"tune-ratio", "set a head's emissivity ratio from readings against a reference thermometer", tuneCmd},
	{"version", "print the version", versionCmd},
}

// env is what every subcommand shares with the outside world.
type env struct {
	stdout, stderr io.Writer
	hup            <-chan os.Signal
}

// usageError marks an error that exits with status 2.
type usageError struct{ err error }

func (e usageError) Error() string { return e.err.Error() }
func (e usageError) Unwrap() error { return e.err }

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	hup := make(chan os.Signal, 1)
	signal.Notify(hup, syscall.SIGHUP)
	code := run(ctx, &env{stdout: os.Stdout, stderr: os.Stderr, hup: hup}, os.Args[1:])
	stop()
	os.Exit(code)
}

// run dispatches to a subcommand and maps its error to an exit status.
func run(ctx context.Context, e *env, args []string) int {
	if len(args) == 0 {
		usage(e.stderr)
		return exitUsage
	}
	name, rest := args[0], args[1:]
	switch name {
	case "help", "-h", "-help", "--help":
		usage(e.stdout)
		return exitOK
	}
	for _, c := range commands {
		if c.name != name {
			continue
		}
		err := c.run(ctx, e, rest)
		var ue usageError
		switch {
		case err == nil, errors.Is(err, flag.ErrHelp):
			return exitOK
		case errors.As(err, &ue):
			fmt.Fprintf(e.stderr, "glowgate %s: %v\n", name, err)
			return exitUsage
		default:
			fmt.Fprintf(e.stderr, "glowgate %s: %v\n", name, err)
			return exitFailure
		}
	}
	fmt.Fprintf(e.stderr, "glowgate: unknown command %q\n\n", name)
	usage(e.stderr)
	return exitUsage
}

func usage(w io.Writer) {
	fmt.Fprintln(w, "usage: glowgate <command> [flags]")
	fmt.Fprintln(w)
	fmt.Fprintln(w, "commands:")
	for _, c := range commands {
		fmt.Fprintf(w, "  %-10s %s\n", c.name, c.summary)
	}
	fmt.Fprintln(w, "  help       print this list")
	fmt.Fprintln(w)
	fmt.Fprintln(w, `"glowgate <command> -h" lists the flags of a command.`)
	fmt.Fprintln(w, "exit status: 0 ok, 1 runtime failure, 2 bad usage or bad configuration")
}
