//go:build !linux

package sim

import (
	"fmt"
	"os"
	"runtime"
	"time"
)

// openPTY refuses: the RTU server uses Linux's /dev/ptmx interface.
func openPTY() (master, slave *os.File, path string, err error) {
	return nil, nil, "", fmt.Errorf("pseudo-terminal: the simulated RTU line needs Linux's /dev/ptmx, not available on %s", runtime.GOOS)
}

// sleepFine sleeps d.
func sleepFine(d time.Duration) { time.Sleep(d) }

// drain has nothing to drop: openPTY never opens a file here.
func drain(*os.File) int { return 0 }
