package main

import (
	"context"
	"fmt"
	"runtime/debug"
)

// version is set at build time with -ldflags "-X main.version=...";
// otherwise it comes from the module's build information.
var version = ""

func versionString() string {
	if version != "" {
		return version
	}
	bi, ok := debug.ReadBuildInfo()
	if !ok {
		return "unknown"
	}
	rev, dirty := "", ""
	for _, s := range bi.Settings {
		switch s.Key {
		case "vcs.revision":
			rev = s.Value
		case "vcs.modified":
			if s.Value == "true" {
				dirty = "+dirty"
			}
		}
	}
	if rev != "" {
		if len(rev) > 12 {
			rev = rev[:12]
		}
		return rev + dirty
	}
	return bi.Main.Version
}

func versionCmd(_ context.Context, e *env, args []string) error {
	fs := newFlags("version", "", "Prints the version of this build.", e.stderr)
	if err := parseNoArgs(fs, args); err != nil {
		return err
	}
	fmt.Fprintf(e.stdout, "glowgate %s\n", versionString())
	return nil
}
