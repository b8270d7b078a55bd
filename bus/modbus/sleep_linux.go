package modbus

import (
	"syscall"
	"time"
)

// sleepExact sleeps for d with the kernel's fine-grained nanosleep. The
// runtime's timers wake up to a millisecond late on a busy machine, which
// at 115200 baud (t3.5 = 1.75 ms) costs a tenth of the line's capacity;
// the owner goroutine may hold its thread for the few milliseconds this is
// used for.
func sleepExact(d time.Duration) {
	ts := syscall.NsecToTimespec(int64(d))
	for syscall.Nanosleep(&ts, &ts) == syscall.EINTR {
	}
}
