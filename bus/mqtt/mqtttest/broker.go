// Package mqtttest provides MQTT brokers, subscribers and a fault-injecting
// TCP proxy for tests, in the manner of net/http/httptest.
package mqtttest

import (
	"bytes"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/internal/realtest"
)

// MosquittoPath is where Debian's mosquitto package installs the broker.
const MosquittoPath = "/usr/sbin/mosquitto"

// startTimeout bounds the wait for a broker to accept connections.
const startTimeout = 10 * time.Second

// Broker is a broker on a loopback port, owned by one test: Mosquitto run
// as a child process, or the embedded broker. Stop and Start kill and
// restart it on the same port; the test's cleanup stops it for good.
type Broker struct {
	t      testing.TB
	addr   string
	kind   string
	scheme string // of URL: "tcp" or "ssl"

	mu       sync.Mutex
	conf     string        // Mosquitto configuration file
	cmd      *exec.Cmd     // running Mosquitto, nil when stopped
	exited   chan struct{} // closed when cmd has been waited for
	output   *syncBuffer   // the broker's output, all runs
	embedded *mqtt.EmbeddedBroker
}

// Start returns a running broker: Mosquitto when MosquittoPath exists,
// otherwise the embedded broker, with a log line saying so. When the
// environment sets GLOWGATE_REQUIRE_REAL=1, a missing Mosquitto fails the
// test instead.
func Start(t testing.TB) *Broker {
	t.Helper()
	if _, err := os.Stat(MosquittoPath); err == nil {
		return StartMosquitto(t)
	} else if realtest.Required() {
		t.Fatalf("mosquitto required (GLOWGATE_REQUIRE_REAL=1): %v", err)
	}
	t.Logf("%s not found: using the embedded broker", MosquittoPath)
	return StartEmbedded(t)
}

// StartMosquitto runs Mosquitto on a free loopback port with a generated
// configuration (anonymous access, no persistence) and waits until it
// accepts connections.
func StartMosquitto(t testing.TB) *Broker {
	t.Helper()
	return StartMosquittoWith(t, MosquittoOptions{})
}

// MosquittoOptions configure StartMosquittoWith. The zero value is the
// broker of StartMosquitto.
type MosquittoOptions struct {
	// CertFile and KeyFile, when set, make the listener TLS only, with
	// this certificate and key (PEM files); URL then starts with ssl://.
	// CAFile (PEM) verifies client certificates; with RequireClientCert
	// the broker refuses clients without a certificate it signed.
	CAFile, CertFile, KeyFile string
	RequireClientCert         bool
	// Users, when not empty, turns anonymous access off and admits these
	// user names with these passwords, written to a password file with
	// mosquitto_passwd (MosquittoPasswdPath).
	Users map[string]string
}

// MosquittoPasswdPath is where Debian's mosquitto package installs the
// password file tool.
const MosquittoPasswdPath = "/usr/bin/mosquitto_passwd"

// StartMosquittoTLS runs Mosquitto with a TLS-only listener serving
// certFile and keyFile, signed by the authority in caFile (PEM files, as
// NewCA and CA.Issue write them). Clients connect to URL(), ssl://.
func StartMosquittoTLS(t testing.TB, caFile, certFile, keyFile string) *Broker {
	t.Helper()
	return StartMosquittoWith(t, MosquittoOptions{CAFile: caFile, CertFile: certFile, KeyFile: keyFile})
}

// StartMosquittoWith runs Mosquitto configured by o on a free loopback
// port and waits until it accepts connections.
func StartMosquittoWith(t testing.TB, o MosquittoOptions) *Broker {
	t.Helper()
	b := &Broker{t: t, kind: "mosquitto", scheme: "tcp", output: new(syncBuffer)}
	dir := t.TempDir()
	var extra strings.Builder
	if os.Geteuid() == 0 {
		// Started as root, Mosquitto drops to the mosquitto user before it
		// reads certificates and password files, which it then cannot
		// read in the test's private temporary directory; "user root"
		// keeps it from dropping (Mosquitto warns about it).
		extra.WriteString("user root\n")
	}
	if o.CertFile != "" || o.KeyFile != "" {
		if o.CertFile == "" || o.KeyFile == "" {
			t.Fatalf("mosquitto: TLS needs both a certificate and a key file")
		}
		b.scheme = "ssl"
		fmt.Fprintf(&extra, "certfile %s\nkeyfile %s\n", o.CertFile, o.KeyFile)
		if o.CAFile != "" {
			fmt.Fprintf(&extra, "cafile %s\n", o.CAFile)
		}
		if o.RequireClientCert {
			extra.WriteString("require_certificate true\n")
		}
	}
	anonymous := "true"
	if len(o.Users) > 0 {
		anonymous = "false"
		pw := filepath.Join(dir, "passwd")
		for user, pass := range o.Users {
			args := []string{"-b", pw, user, pass}
			if _, err := os.Stat(pw); err != nil {
				args = append([]string{"-c"}, args...)
			}
			if out, err := exec.Command(MosquittoPasswdPath, args...).CombinedOutput(); err != nil {
				t.Fatalf("mosquitto_passwd for %q: %v\n%s", user, err, out)
			}
		}
		fmt.Fprintf(&extra, "password_file %s\n", pw)
	}
	t.Cleanup(func() {
		b.Stop()
		if t.Failed() {
			t.Logf("mosquitto output:\n%s", b.output.String())
		}
	})
	var err error
	for attempt := 0; attempt < 3; attempt++ {
		// The port is free when probed; another process may take it before
		// Mosquitto binds, hence the retries.
		var port int
		port, err = freePort()
		if err != nil {
			t.Fatalf("mosquitto: %v", err)
		}
		b.addr = net.JoinHostPort("127.0.0.1", strconv.Itoa(port))
		b.conf = filepath.Join(dir, "mosquitto.conf")
		conf := fmt.Sprintf("listener %d 127.0.0.1\nallow_anonymous %s\npersistence false\n"+
			// Subscribers in tests may fall behind a fast publisher: keep
			// their QoS 1 backlog instead of dropping it past 1000 messages.
			"max_queued_messages 0\n"+
			// Mosquitto leaves Nagle's algorithm on for its clients by
			// default, which holds small messages to a subscriber for up
			// to a delayed-ACK period (tens of milliseconds); latency
			// figures are taken with it off, as a plant broker should be.
			"set_tcp_nodelay true\n", port, anonymous) + extra.String()
		if err = os.WriteFile(b.conf, []byte(conf), 0o600); err != nil {
			t.Fatalf("mosquitto: %v", err)
		}
		if err = b.start(); err == nil {
			return b
		}
	}
	t.Fatalf("mosquitto: %v\n%s", err, b.output.String())
	return nil
}

// StartEmbedded runs the embedded broker on a free loopback port.
func StartEmbedded(t testing.TB) *Broker {
	t.Helper()
	b := &Broker{t: t, kind: "embedded", scheme: "tcp", output: new(syncBuffer)}
	eb, err := mqtt.StartEmbeddedBroker("127.0.0.1:0", b.logger())
	if err != nil {
		t.Fatalf("embedded broker: %v", err)
	}
	b.embedded, b.addr = eb, eb.Addr()
	t.Cleanup(func() {
		b.Stop()
		if t.Failed() {
			t.Logf("embedded broker log:\n%s", b.output.String())
		}
	})
	return b
}

// Kind is "mosquitto" or "embedded".
func (b *Broker) Kind() string { return b.kind }

// Addr is the broker's host:port.
func (b *Broker) Addr() string { return b.addr }

// URL is the broker's address for clients, "tcp://127.0.0.1:PORT", or
// "ssl://127.0.0.1:PORT" for a TLS listener.
func (b *Broker) URL() string { return b.scheme + "://" + b.addr }

// Stop kills the broker (SIGKILL for Mosquitto: a crash, not a clean
// shutdown) and waits until it is gone. Stopping a stopped broker does
// nothing.
func (b *Broker) Stop() {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.embedded != nil {
		_ = b.embedded.Close()
		b.embedded = nil
		return
	}
	if b.cmd == nil {
		return
	}
	_ = b.cmd.Process.Kill()
	<-b.exited
	b.cmd = nil
}

// Start restarts a stopped broker on the same port and waits until it
// accepts connections. A broker restarted this way has no retained
// messages or sessions. Starting a running broker does nothing.
func (b *Broker) Start() {
	b.t.Helper()
	if b.kind == "embedded" {
		b.mu.Lock()
		defer b.mu.Unlock()
		if b.embedded != nil {
			return
		}
		eb, err := mqtt.StartEmbeddedBroker(b.addr, b.logger())
		if err != nil {
			b.t.Fatalf("embedded broker restart: %v", err)
		}
		b.embedded = eb
		return
	}
	if err := b.start(); err != nil {
		b.t.Fatalf("mosquitto restart on %s: %v\n%s", b.addr, err, b.output.String())
	}
}

// start launches Mosquitto and waits until its port answers.
func (b *Broker) start() error {
	b.mu.Lock()
	defer b.mu.Unlock()
	if b.cmd != nil {
		return nil
	}
	cmd := exec.Command(MosquittoPath, "-c", b.conf)
	cmd.Stdout, cmd.Stderr = b.output, b.output
	if err := cmd.Start(); err != nil {
		return err
	}
	exited := make(chan struct{})
	go func() {
		_ = cmd.Wait()
		close(exited)
	}()
	if err := waitListening(b.addr, exited); err != nil {
		_ = cmd.Process.Kill()
		<-exited
		return err
	}
	b.cmd, b.exited = cmd, exited
	return nil
}

// waitListening dials addr until it answers, the process exits, or
// startTimeout passes.
func waitListening(addr string, exited <-chan struct{}) error {
	deadline := time.NewTimer(startTimeout)
	defer deadline.Stop()
	tick := time.NewTicker(10 * time.Millisecond)
	defer tick.Stop()
	for {
		c, err := net.DialTimeout("tcp", addr, time.Second)
		if err == nil {
			return c.Close()
		}
		select {
		case <-exited:
			return errors.New("broker exited before accepting connections")
		case <-deadline.C:
			return fmt.Errorf("broker not accepting on %s after %v: %w", addr, startTimeout, err)
		case <-tick.C:
		}
	}
}

// freePort returns a loopback TCP port that was free a moment ago.
func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, fmt.Errorf("probe free port: %w", err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}

// syncBuffer is a bytes.Buffer safe for concurrent writers.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// logger writes into the broker's output, shown when the test fails.
func (b *Broker) logger() *slog.Logger {
	return slog.New(slog.NewTextHandler(b.output, nil))
}
