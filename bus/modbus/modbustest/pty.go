package modbustest

import (
	"bufio"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// PtyPair is a pair of connected pseudo-terminals, a serial line for tests:
// what is written to one end is read from the other. socat makes it
// ("socat -d -d pty,raw,echo=0,link=A pty,raw,echo=0,link=B"), so the ends
// are reached through the symbolic links A and B, which stay the same when
// the pair is stopped and started again, as a USB serial adapter keeps its
// device name when it is unplugged and plugged back in.
//
// Pseudo-terminals ignore the baud rate (bytes pass at memory speed) and
// refuse even and odd parity (tcsetattr answers EINVAL): open them with
// parity none.
type PtyPair struct {
	A, B string

	t      testing.TB
	mu     sync.Mutex
	cmd    *exec.Cmd
	exited chan struct{} // closed when the running socat has exited
	stderr *lockedBuffer
}

// NewPtyPair starts socat with links A and B in a fresh temporary directory
// and waits until both ends exist. The pair stops at cleanup. Without socat
// the test is skipped, or fails when GLOWGATE_REQUIRE_REAL=1.
func NewPtyPair(t testing.TB) *PtyPair {
	t.Helper()
	if _, err := exec.LookPath("socat"); err != nil {
		RequireReal(t, "socat not installed: %v", err)
	}
	dir := t.TempDir()
	p := &PtyPair{A: filepath.Join(dir, "a"), B: filepath.Join(dir, "b"), t: t}
	p.Start()
	t.Cleanup(p.Stop)
	return p
}

// StartPtyPair is NewPtyPair for callers that need only the two paths and a
// way to make the line vanish and come back: restart stops socat (both ends
// disappear, and programs holding them open get I/O errors) and starts it
// again at the same paths.
func StartPtyPair(t testing.TB) (a, b string, restart func()) {
	t.Helper()
	p := NewPtyPair(t)
	return p.A, p.B, p.Restart
}

// Start starts socat, if it is not running, and waits until both ends
// exist.
func (p *PtyPair) Start() {
	p.t.Helper()
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.cmd != nil {
		return
	}
	cmd := exec.Command("socat", "-d", "-d",
		"pty,raw,echo=0,link="+p.A, "pty,raw,echo=0,link="+p.B)
	stderr, err := cmd.StderrPipe()
	if err != nil {
		p.t.Fatalf("socat: %v", err)
	}
	if err := cmd.Start(); err != nil {
		p.t.Fatalf("start socat: %v", err)
	}
	log := &lockedBuffer{}
	ready := make(chan struct{})
	exited := make(chan struct{})
	go func() {
		// socat -d -d announces "starting data transfer loop" once both
		// ends are open and linked; read its log to the end, then reap it.
		defer close(exited)
		sc := bufio.NewScanner(stderr)
		signalled := false
		for sc.Scan() {
			log.Write([]byte(sc.Text() + "\n"))
			if !signalled && strings.Contains(sc.Text(), "starting data transfer loop") {
				signalled = true
				close(ready)
			}
		}
		cmd.Wait()
	}()
	timer := time.NewTimer(10 * time.Second)
	defer timer.Stop()
	select {
	case <-ready:
	case <-exited:
		p.t.Fatalf("socat exited before both ends were open:\n%s", log.String())
	case <-timer.C:
		cmd.Process.Kill()
		<-exited
		p.t.Fatalf("socat not ready after 10 s:\n%s", log.String())
	}
	for _, end := range []string{p.A, p.B} {
		if _, err := os.Stat(end); err != nil {
			cmd.Process.Kill()
			<-exited
			p.t.Fatalf("socat ready but %v:\n%s", err, log.String())
		}
	}
	p.cmd, p.exited, p.stderr = cmd, exited, log
}

// Stop stops socat (SIGTERM, so that it removes both links) and waits for
// it to exit. It does nothing when socat is not running.
func (p *PtyPair) Stop() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.cmd == nil {
		return
	}
	p.cmd.Process.Signal(syscall.SIGTERM)
	timer := time.NewTimer(10 * time.Second)
	defer timer.Stop()
	select {
	case <-p.exited:
	case <-timer.C:
		p.t.Errorf("socat still running 10 s after SIGTERM; killing it:\n%s", p.stderr.String())
		p.cmd.Process.Kill()
		<-p.exited
	}
	// A socat that was killed leaves its links behind, pointing at
	// pseudo-terminals that no longer exist or that another program may
	// get next: remove them.
	os.Remove(p.A)
	os.Remove(p.B)
	p.cmd = nil
}

// Restart stops socat and starts it again at the same paths.
func (p *PtyPair) Restart() {
	p.t.Helper()
	p.Stop()
	p.Start()
}
