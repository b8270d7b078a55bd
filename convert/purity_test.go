package convert

import (
	"testing"

	"glowgate/internal/puritytest"
)

// TestPackageIsPure: convert is pure (no I/O, no clock, no concurrency, no
// logging), as glowgate's style guide requires of its numeric packages.
// gonum's packages (quadrature, dense linear algebra, distributions) are
// pure numerics too; "time" is there for its types only.
func TestPackageIsPure(t *testing.T) {
	puritytest.Check(t, ".",
		[]string{"errors", "fmt", "math", "math/bits", "slices", "sort", "strconv", "strings", "time"},
		"gonum.org/v1/gonum/")
}
