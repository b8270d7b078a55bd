package modbustest

import (
	"bufio"
	"bytes"
	"glowgate/internal/realtest"
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

// RequireReal skips the test, or fails it when GLOWGATE_REQUIRE_REAL=1
// (realtest.Missing).
func RequireReal(t testing.TB, format string, args ...any) {
	t.Helper()
	realtest.Missing(t, format, args...)
}

// StartPymodbus starts testdata/pymodbus_server.py, Debian python3-pymodbus's
// TCP server and so a Modbus implementation independent of glowgate's, on a
// free loopback port with the given register arguments (see the script's
// usage), waits for its "ready" line and returns its address. The server
// stops at cleanup. Without /usr/bin/python3 and pymodbus the test is
// skipped, or fails when GLOWGATE_REQUIRE_REAL=1.
func StartPymodbus(t testing.TB, args ...string) string {
	t.Helper()
	where, _ := startPeer(t, append([]string{"--port", "0"}, args...))
	if strings.HasPrefix(where, "serial ") {
		t.Fatalf("pymodbus server listening on %q, want host:port", where)
	}
	return where
}

// StartPymodbusRTU starts testdata/pymodbus_server.py as a Modbus RTU
// server (Debian python3-pymodbus's StartAsyncSerialServer with its
// ModbusRtuFramer) on the serial device path, typically one end of a
// PtyPair, with the given further arguments: the register flags, and
// --baud, --parity (N on a pseudo-terminal), --stopbits (see the script's
// usage). It returns once the server has opened the device. stop stops the
// server and waits for it; it is also called at cleanup, and may be called
// more than once. Without /usr/bin/python3 and pymodbus the test is
// skipped, or fails when GLOWGATE_REQUIRE_REAL=1.
func StartPymodbusRTU(t testing.TB, path string, args ...string) (stop func()) {
	t.Helper()
	where, stop := startPeer(t, append([]string{"--serial", path}, args...))
	if where != "serial "+path {
		t.Fatalf("pymodbus server listening on %q, want serial %s", where, path)
	}
	return stop
}

// startPeer runs the script with args and --stop-on-eof, waits for its
// "ready" line and returns what its "listening" line names, and a function
// that stops it (closing its standard input) and waits for it to exit.
func startPeer(t testing.TB, args []string) (where string, stop func()) {
	t.Helper()
	if _, err := os.Stat(python); err != nil {
		RequireReal(t, "%s not installed: %v", python, err)
	}
	if out, err := exec.Command(python, "-c", "import pymodbus").CombinedOutput(); err != nil {
		RequireReal(t, "python3-pymodbus not importable by %s: %v: %s", python, err, out)
	}
	script := peerScript()
	cmd := exec.Command(python, append([]string{script, "--stop-on-eof"}, args...)...)
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
	var once sync.Once
	stop = func() {
		once.Do(func() {
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
	}
	t.Cleanup(stop)
	timer := time.NewTimer(30 * time.Second)
	defer timer.Stop()
	for {
		select {
		case line := <-lines:
			if w, found := strings.CutPrefix(line, "listening "); found {
				where = w
			}
			if line == "ready" {
				if where == "" {
					t.Fatalf("pymodbus server ready without a listening line")
				}
				return where, stop
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
