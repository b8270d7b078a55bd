package modbustest

import (
	"bufio"
	"bytes"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strings"
	"sync"
	"testing"
	"time"
)

// peerScript is the path of testdata/pymodbus_server.py at the module's
// top level, found from this source file's location.
func peerScript() string {
	_, file, _, _ := runtime.Caller(0)
	return filepath.Join(filepath.Dir(file), "..", "..", "..", "testdata", "pymodbus_server.py")
}

// python is Debian's interpreter, the one python3-pymodbus is installed for.
const python = "/usr/bin/python3"

// RequireReal skips the test, or fails it when GLOWGATE_REQUIRE_REAL=1.
func RequireReal(t testing.TB, format string, args ...any) {
	t.Helper()
	msg := fmt.Sprintf(format, args...)
	if os.Getenv("GLOWGATE_REQUIRE_REAL") == "1" {
		t.Fatalf("%s (GLOWGATE_REQUIRE_REAL=1)", msg)
	}
	t.Skip(msg)
}

// StartPymodbus starts testdata/pymodbus_server.py, Debian python3-pymodbus's
// TCP server and so a Modbus implementation independent of glowgate's, on a
// free loopback port with the given register arguments (see the script's
// usage), waits for its "ready" line and returns its address. The server
// stops at cleanup. Without /usr/bin/python3 and pymodbus the test is
// skipped, or fails when GLOWGATE_REQUIRE_REAL=1.
func StartPymodbus(t testing.TB, args ...string) string {
	t.Helper()
	if _, err := os.Stat(python); err != nil {
		RequireReal(t, "%s not installed: %v", python, err)
	}
	if out, err := exec.Command(python, "-c", "import pymodbus").CombinedOutput(); err != nil {
		RequireReal(t, "python3-pymodbus not importable by %s: %v: %s", python, err, out)
	}
	script := peerScript()
	cmd := exec.Command(python, append([]string{script, "--port", "0", "--stop-on-eof"}, args...)...)
	stdin, err := cmd.StdinPipe()
	if err != nil {
		t.Fatal(err)
	}
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	var stderr lockedBuffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatalf("start %s: %v", script, err)
	}
	// One reader goroutine: it keeps the first lines (the server prints two)
	// and closes eof when the server's standard output ends.
	lines := make(chan string, 16)
	eof := make(chan struct{})
	go func() {
		defer close(eof)
		sc := bufio.NewScanner(stdout)
		for sc.Scan() {
			select {
			case lines <- sc.Text():
			default:
			}
		}
	}()
	t.Cleanup(func() {
		stdin.Close() // --stop-on-eof: the server exits
		timer := time.NewTimer(20 * time.Second)
		defer timer.Stop()
		select {
		case <-eof:
		case <-timer.C:
			t.Errorf("pymodbus server still running 20 s after stdin closed; killing it")
			cmd.Process.Kill()
			<-eof
		}
		if err := cmd.Wait(); err != nil && !t.Failed() {
			t.Errorf("pymodbus server: %v; stderr:\n%s", err, stderr.String())
		}
	})
	timer := time.NewTimer(30 * time.Second)
	defer timer.Stop()
	addr := ""
	for {
		select {
		case line := <-lines:
			if a, found := strings.CutPrefix(line, "listening "); found {
				addr = a
			}
			if line == "ready" {
				if addr == "" {
					t.Fatalf("pymodbus server ready without a listening line")
				}
				return addr
			}
		case <-eof:
			if len(lines) > 0 {
				continue
			}
			t.Fatalf("pymodbus server exited before ready; stderr:\n%s", stderr.String())
		case <-timer.C:
			t.Fatalf("pymodbus server not ready after 30 s; stderr:\n%s", stderr.String())
		}
	}
}

type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}
