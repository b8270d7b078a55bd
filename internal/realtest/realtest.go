// Package realtest holds the one rule for tests that need a real part (a
// Mosquitto, Debian's pymodbus, Chromium) the machine may lack: skip
// where it is missing, fail instead when the environment sets
// GLOWGATE_REQUIRE_REAL=1, as CI does, so nothing is silently left out.
package realtest

import (
	"fmt"
	"os"
	"testing"
)

// Required reports whether real parts are required
// (GLOWGATE_REQUIRE_REAL=1).
func Required() bool { return os.Getenv("GLOWGATE_REQUIRE_REAL") == "1" }

// Missing skips the test for the reason given, or fails it when real parts
// are required.
func Missing(t testing.TB, format string, args ...any) {
	t.Helper()
	msg := fmt.Sprintf(format, args...)
	if Required() {
		t.Fatalf("%s (GLOWGATE_REQUIRE_REAL=1)", msg)
	}
	t.Skip(msg)
}
