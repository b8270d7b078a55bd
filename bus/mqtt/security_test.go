package mqtt_test

import (
	"bytes"
	"context"
	"crypto/tls"
	"log/slog"
	"net"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
	"glowgate/internal/realtest"
)

// needMosquitto skips a test that only Mosquitto can serve (TLS,
// password files) when it is not installed, unless the environment sets
// GLOWGATE_REQUIRE_REAL=1: then the test fails.
func needMosquitto(t *testing.T) {
	t.Helper()
	if _, err := os.Stat(mqtttest.MosquittoPath); err != nil {
		realtest.Missing(t, "%s: %v", mqtttest.MosquittoPath, err)
	}
}

// logCapture keeps every log line as text, beside the test log, and
// signals each record of level error.
type logCapture struct {
	mu     sync.Mutex
	buf    bytes.Buffer
	errors chan string
}

func captureLogs(t *testing.T) (*slog.Logger, *logCapture) {
	lc := &logCapture{errors: make(chan string, 100)}
	h := slog.NewTextHandler(&lc.buf, nil)
	return slog.New(captureHandler{lc: lc, h: h, t: t}), lc
}

func (lc *logCapture) String() string {
	lc.mu.Lock()
	defer lc.mu.Unlock()
	return lc.buf.String()
}

// nextError returns the next error line, failing after wait.
func (lc *logCapture) nextError(t *testing.T) string {
	t.Helper()
	select {
	case s := <-lc.errors:
		return s
	case <-time.After(wait):
		t.Fatalf("no error logged within %v; log:\n%s", wait, lc.String())
		return ""
	}
}

type captureHandler struct {
	lc *logCapture
	h  slog.Handler
	t  *testing.T
}

func (c captureHandler) Enabled(context.Context, slog.Level) bool { return true }

func (c captureHandler) Handle(ctx context.Context, r slog.Record) error {
	c.lc.mu.Lock()
	start := c.lc.buf.Len()
	err := c.h.Handle(ctx, r)
	line := c.lc.buf.String()[start:]
	c.lc.mu.Unlock()
	c.t.Log(strings.TrimSpace(line))
	if r.Level >= slog.LevelError {
		select {
		case c.lc.errors <- line:
		default:
		}
	}
	return err
}

func (c captureHandler) WithAttrs(as []slog.Attr) slog.Handler {
	return captureHandler{lc: c.lc, h: c.h.WithAttrs(as), t: c.t}
}

func (c captureHandler) WithGroup(name string) slog.Handler {
	return captureHandler{lc: c.lc, h: c.h.WithGroup(name), t: c.t}
}

// A TLS broker that requires client certificates, with certificates made
// in the test: readings from the outbox arrive over TLS. A gateway that
// trusts another authority, or expects another server name, is refused
// with an error saying so, and never connects.
func TestPublisherTLS(t *testing.T) {
	needMosquitto(t)
	ca := mqtttest.NewCA(t, "glowgate test CA")
	srvCert, srvKey := ca.Issue(t, "broker", "127.0.0.1", "localhost")
	cliCert, cliKey := ca.Issue(t, "gateway")
	broker := mqtttest.StartMosquittoWith(t, mqtttest.MosquittoOptions{
		CAFile: ca.CertFile, CertFile: srvCert, KeyFile: srvKey, RequireClientCert: true,
	})
	if !strings.HasPrefix(broker.URL(), "ssl://") {
		t.Fatalf("URL %s", broker.URL())
	}
	good, err := mqtt.TLSConfig(ca.CertFile, cliCert, cliKey, "")
	if err != nil {
		t.Fatal(err)
	}

	t.Run("verified", func(t *testing.T) {
		sub := mqtttest.SubscribeWith(t, broker.URL(), "glowgate/gw1/#", mqtttest.SubscribeOptions{TLS: good})
		c := collectSeqs(t, sub)
		ob := openOutbox(t, t.TempDir())
		o := testOptions(t, broker.URL())
		o.TLS, o.Outbox = good, ob
		p := newPublisher(t, o)
		appendReadings(t, ob, tp.Reading("h1"), mqtt.Reading{Gateway: tp.Gateway, Head: "h1", Unit: "K", Quality: "good"}, 100)
		stop := run(t, p)
		c.waitAll(t, 100)
		if err := stop(); err != nil {
			t.Fatal(err)
		}
	})

	other := mqtttest.NewCA(t, "another CA")
	untrusting, err := mqtt.TLSConfig(other.CertFile, cliCert, cliKey, "")
	if err != nil {
		t.Fatal(err)
	}
	misnamed, err := mqtt.TLSConfig(ca.CertFile, cliCert, cliKey, "broker.plant.example")
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name string
		cfg  *tls.Config
		want string
	}{
		{"unknown authority", untrusting, "certificate signed by unknown authority"},
		{"wrong server name", misnamed, "broker.plant.example"},
	} {
		t.Run(c.name, func(t *testing.T) {
			sub := mqtttest.SubscribeWith(t, broker.URL(), "glowgate/gw1/#", mqtttest.SubscribeOptions{TLS: good})
			lg, logs := captureLogs(t)
			o := testOptions(t, broker.URL())
			o.TLS, o.Logger = c.cfg, lg
			p := newPublisher(t, o)
			stop := run(t, p)
			line := logs.nextError(t)
			for _, want := range []string{"certificate failed verification", "no fallback to plaintext", c.want, broker.URL()} {
				if !strings.Contains(line, want) {
					t.Errorf("error line lacks %q:\n%s", want, line)
				}
			}
			if err := stop(); err != nil {
				t.Fatal(err)
			}
			if st := p.Stats(); st.Connects != 0 {
				t.Errorf("connected: %+v", st)
			}
			// Only what earlier connections left retained.
			for {
				m, ok := sub.Next(50 * time.Millisecond)
				if !ok {
					break
				}
				if !m.Retained {
					t.Errorf("the broker carried %s %q", m.Topic, m.Payload)
				}
			}
		})
	}
}

// A gateway set up for TLS never speaks plaintext: every connection it
// opens to a listener that answers nothing starts with a TLS handshake
// record (content type 22, RFC 8446 section 5.1), attempt after attempt,
// and a plaintext broker URL beside TLS settings is refused outright.
func TestPublisherTLSNeverPlaintext(t *testing.T) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	firsts := make(chan byte, 16)
	done := make(chan struct{})
	go func() {
		defer close(done)
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			b := make([]byte, 1)
			_ = c.SetReadDeadline(time.Now().Add(wait))
			if _, err := c.Read(b); err == nil {
				select {
				case firsts <- b[0]:
				default:
				}
			}
			_ = c.Close()
		}
	}()
	t.Cleanup(func() {
		ln.Close()
		<-done
	})
	cfg, err := mqtt.TLSConfig("", "", "", "")
	if err != nil {
		t.Fatal(err)
	}
	o := testOptions(t, "ssl://"+ln.Addr().String())
	o.TLS = cfg
	p := newPublisher(t, o)
	stop := run(t, p)
	for i := range 3 {
		select {
		case b := <-firsts:
			if b != 22 {
				t.Fatalf("connection %d began with byte %d, not a TLS handshake (22)", i+1, b)
			}
		case <-time.After(wait):
			t.Fatalf("connection %d: none within %v", i+1, wait)
		}
	}
	if err := stop(); err != nil {
		t.Fatal(err)
	}

	o.Brokers = []string{"ssl://127.0.0.1:8883", "tcp://127.0.0.1:1883"}
	if _, err := mqtt.NewPublisher(o); err == nil || !strings.Contains(err.Error(), "broker 2") || !strings.Contains(err.Error(), "plaintext") {
		t.Errorf("TLS with a tcp:// broker: %v", err)
	}
}

// A broker with a password file refuses a wrong password, and the log
// says so with the user name and without the password, whether it came in
// Options or in the broker URL. The right password connects.
func TestPublisherCredentials(t *testing.T) {
	needMosquitto(t)
	const user, right, wrong, inURL = "gw1", "right-pass-7781", "wrong-pass-5524", "url-pass-9931"
	broker := mqtttest.StartMosquittoWith(t, mqtttest.MosquittoOptions{Users: map[string]string{user: right}})
	for _, c := range []struct {
		name, url, password string
	}{
		{"wrong password", broker.URL(), wrong},
		{"wrong password in the URL", "tcp://" + user + ":" + inURL + "@" + broker.Addr(), ""},
	} {
		t.Run(c.name, func(t *testing.T) {
			lg, logs := captureLogs(t)
			o := testOptions(t, c.url)
			o.Username, o.Password, o.Logger = user, c.password, lg
			p := newPublisher(t, o)
			stop := run(t, p)
			line := logs.nextError(t)
			if !strings.Contains(line, "refused the credentials") || !strings.Contains(line, "username="+user) {
				t.Errorf("error line: %s", line)
			}
			if err := stop(); err != nil {
				t.Fatal(err)
			}
			if st := p.Stats(); st.Connects != 0 {
				t.Errorf("connected: %+v", st)
			}
			all := logs.String()
			for _, secret := range []string{wrong, inURL, right} {
				if strings.Contains(all, secret) {
					t.Errorf("the log holds a password:\n%s", all)
				}
			}
		})
	}
	t.Run("right password", func(t *testing.T) {
		sub := mqtttest.SubscribeWith(t, broker.URL(), tp.State(), mqtttest.SubscribeOptions{Username: user, Password: right})
		o := testOptions(t, broker.URL())
		o.Username, o.Password = user, right
		p := newPublisher(t, o)
		stop := run(t, p)
		sub.WaitFor(tp.State(), func(m mqtttest.Message) bool { return string(m.Payload) == "online" }, wait)
		if err := stop(); err != nil {
			t.Fatal(err)
		}
	})
}

// TLSConfig names the file at fault.
func TestTLSConfigErrors(t *testing.T) {
	ca := mqtttest.NewCA(t, "glowgate test CA")
	cert, key := ca.Issue(t, "gateway")
	otherCert, _ := ca.Issue(t, "other")
	dir := t.TempDir()
	notPEM := filepath.Join(dir, "not-pem.txt")
	badBlock := filepath.Join(dir, "bad-block.pem")
	missing := filepath.Join(dir, "missing.pem")
	if err := os.WriteFile(notPEM, []byte("hello\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(badBlock, []byte("-----BEGIN CERTIFICATE-----\nAAAA\n-----END CERTIFICATE-----\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		name                string
		ca, cert, key, want string
	}{
		{"missing CA", missing, "", "", missing},
		{"CA not PEM", notPEM, "", "", notPEM + ": no PEM CERTIFICATE block"},
		{"CA bad block", badBlock, "", "", badBlock + ": PEM block 1"},
		{"certificate without key", "", cert, "", "certificate file " + cert + " given without a key file"},
		{"key without certificate", "", "", key, "key file " + key + " given without a certificate file"},
		{"missing key", "", cert, missing, missing},
		{"key not PEM", "", cert, notPEM, "key file " + notPEM},
		{"certificate is a key", "", key, key, "certificate file " + key},
		{"pair mismatch", "", otherCert, key, otherCert + " with key " + key},
	} {
		_, err := mqtt.TLSConfig(c.ca, c.cert, c.key, "")
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want an error with %q", c.name, err, c.want)
		}
	}
	cfg, err := mqtt.TLSConfig(ca.CertFile, cert, key, "broker.example")
	if err != nil || cfg.RootCAs == nil || len(cfg.Certificates) != 1 || cfg.ServerName != "broker.example" || cfg.MinVersion != tls.VersionTLS12 {
		t.Errorf("good files: %+v, %v", cfg, err)
	}
}
