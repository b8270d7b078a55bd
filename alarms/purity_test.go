package alarms

import (
	"testing"

	"glowgate/internal/puritytest"
)

// TestPackageIsPure: alarms is pure (no I/O, no clock, no concurrency, no
// logging), as glowgate's design requires; "time" is there for its types
// only.
func TestPackageIsPure(t *testing.T) {
	puritytest.Check(t, ".", []string{"errors", "fmt", "math", "slices", "strconv", "strings", "time"})
}
