//go:build linux

package sim

import (
	"fmt"
	"os"
	"strconv"
	"syscall"
	"time"
	"unsafe"
)

// openPTY opens a new pseudo-terminal pair (pty(7), the Unix 98 /dev/ptmx
// interface) and puts it in raw mode: 8 data bits, no parity, no echo, no
// line editing and no character translation, so bytes pass unchanged both
// ways. Termios requests made on the master act on the terminal itself, the
// slave side. It returns the master, the slave (opened too, and held open by
// the caller so that the master does not read EIO while no client has the
// device open) and the slave's path, e.g. /dev/pts/7. Both files are
// non-blocking, so reads honour deadlines and end when the file is closed.
func openPTY() (master, slave *os.File, path string, err error) {
	fd, err := syscall.Open("/dev/ptmx", syscall.O_RDWR|syscall.O_NOCTTY|syscall.O_NONBLOCK|syscall.O_CLOEXEC, 0)
	if err != nil {
		return nil, nil, "", fmt.Errorf("open /dev/ptmx: %w", err)
	}
	fail := func(op string, err error) (*os.File, *os.File, string, error) {
		syscall.Close(fd)
		return nil, nil, "", fmt.Errorf("pseudo-terminal: %s: %w", op, err)
	}
	var unlock int32 // unlockpt(3)
	if err := ioctl(fd, syscall.TIOCSPTLCK, unsafe.Pointer(&unlock)); err != nil {
		return fail("unlock", err)
	}
	var n uint32 // ptsname(3)
	if err := ioctl(fd, syscall.TIOCGPTN, unsafe.Pointer(&n)); err != nil {
		return fail("slave number", err)
	}
	path = "/dev/pts/" + strconv.FormatUint(uint64(n), 10)
	if err := setRaw(fd); err != nil {
		return fail("raw mode", err)
	}
	sfd, err := syscall.Open(path, syscall.O_RDWR|syscall.O_NOCTTY|syscall.O_NONBLOCK|syscall.O_CLOEXEC, 0)
	if err != nil {
		return fail("open "+path, err)
	}
	return os.NewFile(uintptr(fd), "/dev/ptmx"), os.NewFile(uintptr(sfd), path), path, nil
}

// setRaw puts the terminal of fd (a master or slave side) in raw mode, with
// reads returning as soon as one byte is there (VMIN 1, VTIME 0).
func setRaw(fd int) error {
	var t syscall.Termios
	if err := ioctl(fd, syscall.TCGETS, unsafe.Pointer(&t)); err != nil {
		return fmt.Errorf("get terminal attributes: %w", err)
	}
	makeRaw(&t)
	if err := ioctl(fd, syscall.TCSETS, unsafe.Pointer(&t)); err != nil {
		return fmt.Errorf("set terminal attributes: %w", err)
	}
	return nil
}

// makeRaw sets t as cfmakeraw(3) does (termios(3), "Raw mode").
func makeRaw(t *syscall.Termios) {
	t.Iflag &^= syscall.IGNBRK | syscall.BRKINT | syscall.PARMRK | syscall.ISTRIP |
		syscall.INLCR | syscall.IGNCR | syscall.ICRNL | syscall.IXON
	t.Oflag &^= syscall.OPOST
	t.Lflag &^= syscall.ECHO | syscall.ECHONL | syscall.ICANON | syscall.ISIG | syscall.IEXTEN
	t.Cflag &^= syscall.CSIZE | syscall.PARENB
	t.Cflag |= syscall.CS8 | syscall.CREAD | syscall.CLOCAL
	t.Cc[syscall.VMIN] = 1
	t.Cc[syscall.VTIME] = 0
}

func ioctl(fd int, req uint, arg unsafe.Pointer) error {
	if _, _, errno := syscall.Syscall(syscall.SYS_IOCTL, uintptr(fd), uintptr(req), uintptr(arg)); errno != 0 {
		return errno
	}
	return nil
}

// sleepFine sleeps d with the kernel's high-resolution timer (nanosleep(2)),
// blocking the calling thread. The runtime's timers wake on millisecond
// ticks for waits this short, too coarse for pacing characters that last
// 95 µs at 115200 baud; nanosleep wakes within about 0.1 ms.
func sleepFine(d time.Duration) {
	ts := syscall.NsecToTimespec(int64(d))
	for syscall.Nanosleep(&ts, &ts) == syscall.EINTR {
	}
}

// drain reads and drops the input waiting on f, a non-blocking file, without
// waiting for more, and returns the number of bytes dropped.
func drain(f *os.File) int {
	rc, err := f.SyscallConn()
	if err != nil {
		return 0
	}
	var b [256]byte
	dropped := 0
	rc.Read(func(fd uintptr) bool {
		for {
			n, err := syscall.Read(int(fd), b[:])
			if n <= 0 || err != nil {
				return true // EAGAIN: nothing more waiting
			}
			dropped += n
		}
	})
	return dropped
}
