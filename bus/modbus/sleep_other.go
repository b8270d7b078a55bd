//go:build !linux

package modbus

import "time"

// sleepExact sleeps for d; elsewhere than Linux with the runtime's timer.
func sleepExact(d time.Duration) { time.Sleep(d) }
