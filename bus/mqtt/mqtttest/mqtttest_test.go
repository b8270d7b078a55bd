package mqtttest_test

import (
	"bytes"
	"crypto/tls"
	"crypto/x509"
	"io"
	"net"
	"os"
	"strings"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"

	"glowgate/bus/mqtt/mqtttest"
	"glowgate/internal/realtest"
)

const wait = 10 * time.Second

func publish(t *testing.T, url, topic, payload string, retain bool) {
	t.Helper()
	c := paho.NewClient(paho.NewClientOptions().AddBroker(url).SetClientID("mqtttest-pub-" + t.Name()))
	if tok := c.Connect(); !tok.WaitTimeout(wait) || tok.Error() != nil {
		t.Fatalf("connect: %v", tok.Error())
	}
	defer c.Disconnect(100)
	if tok := c.Publish(topic, 1, retain, payload); !tok.WaitTimeout(wait) || tok.Error() != nil {
		t.Fatalf("publish: %v", tok.Error())
	}
}

// Both broker kinds restart on the same port, and a subscriber comes back
// with them, subscribed again.
func TestBrokerRestart(t *testing.T) {
	for name, start := range map[string]func(testing.TB) *mqtttest.Broker{
		"default":  mqtttest.Start,
		"embedded": mqtttest.StartEmbedded,
	} {
		t.Run(name, func(t *testing.T) {
			b := start(t)
			url := b.URL()
			sub := mqtttest.Subscribe(t, url, "t/#")
			publish(t, url, "t/1", "before", false)
			if m := sub.WaitFor("t/1", nil, wait); string(m.Payload) != "before" || m.Retained {
				t.Fatalf("got %+v", m)
			}
			b.Stop()
			b.Stop() // a second Stop does nothing
			b.Start()
			if b.URL() != url {
				t.Fatalf("URL changed from %s to %s", url, b.URL())
			}
			sub.WaitSubscriptions(2, wait)
			publish(t, url, "t/2", "after", true)
			if m := sub.WaitFor("t/2", nil, wait); string(m.Payload) != "after" {
				t.Fatalf("got %+v", m)
			}
			late := mqtttest.Subscribe(t, url, "t/#")
			if m, ok := late.Next(wait); !ok || m.Topic != "t/2" || !m.Retained {
				t.Fatalf("retained message for a newcomer: %+v, %v", m, ok)
			}
			if _, ok := late.Next(50 * time.Millisecond); ok {
				t.Fatal("more than the one retained message")
			}
		})
	}
}

// echo serves a TCP echo on loopback.
func echo(t *testing.T) string {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan struct{})
	go func() {
		defer close(done)
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			go func() {
				defer c.Close()
				_, _ = io.Copy(c, c)
			}()
		}
	}()
	t.Cleanup(func() {
		ln.Close()
		<-done
	})
	return ln.Addr().String()
}

func TestProxy(t *testing.T) {
	p := mqtttest.NewProxy(t, echo(t))
	c, err := net.Dial("tcp", p.Addr())
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	roundTrip := func(s string) {
		t.Helper()
		if _, err := c.Write([]byte(s)); err != nil {
			t.Fatal(err)
		}
		buf := make([]byte, len(s))
		if err := c.SetReadDeadline(time.Now().Add(wait)); err != nil {
			t.Fatal(err)
		}
		if _, err := io.ReadFull(c, buf); err != nil || !bytes.Equal(buf, []byte(s)) {
			t.Fatalf("echo %q: got %q, %v", s, buf, err)
		}
	}
	roundTrip("hello")
	if n := p.Conns(); n != 1 {
		t.Fatalf("Conns = %d, want 1", n)
	}

	p.Stall()
	if _, err := c.Write([]byte("held")); err != nil {
		t.Fatal(err)
	}
	if err := c.SetReadDeadline(time.Now().Add(100 * time.Millisecond)); err != nil {
		t.Fatal(err)
	}
	if n, err := c.Read(make([]byte, 4)); n != 0 || !isTimeout(err) {
		t.Fatalf("read while stalled: %d bytes, %v; want a timeout", n, err)
	}
	p.Resume()
	buf := make([]byte, 4)
	if err := c.SetReadDeadline(time.Now().Add(wait)); err != nil {
		t.Fatal(err)
	}
	if _, err := io.ReadFull(c, buf); err != nil || string(buf) != "held" {
		t.Fatalf("after Resume: %q, %v", buf, err)
	}

	p.Cut()
	if err := c.SetReadDeadline(time.Now().Add(wait)); err != nil {
		t.Fatal(err)
	}
	if n, err := c.Read(buf); err == nil || isTimeout(err) {
		t.Fatalf("read after Cut: %d bytes, %v; want a closed connection", n, err)
	}
	if n := p.Conns(); n != 0 {
		t.Fatalf("Conns after Cut = %d", n)
	}
}

func isTimeout(err error) bool {
	ne, ok := err.(net.Error)
	return ok && ne.Timeout()
}

func TestRawQoS1Ceiling(t *testing.T) {
	b := mqtttest.Start(t)
	if rate := mqtttest.RawQoS1Ceiling(t, b.URL(), 500, 100); rate <= 0 {
		t.Fatalf("rate %v", rate)
	}
}

// A TLS broker with certificates from NewCA carries messages for clients
// that trust the authority.
func TestStartMosquittoTLS(t *testing.T) {
	if _, err := os.Stat(mqtttest.MosquittoPath); err != nil {
		realtest.Missing(t, "%s: %v", mqtttest.MosquittoPath, err)
	}
	ca := mqtttest.NewCA(t, "test CA")
	cert, key := ca.Issue(t, "broker", "127.0.0.1")
	b := mqtttest.StartMosquittoTLS(t, ca.CertFile, cert, key)
	if !strings.HasPrefix(b.URL(), "ssl://") {
		t.Fatalf("URL %s", b.URL())
	}
	pool := x509.NewCertPool()
	pool.AddCert(ca.Cert)
	cfg := &tls.Config{RootCAs: pool}
	sub := mqtttest.SubscribeWith(t, b.URL(), "t/#", mqtttest.SubscribeOptions{TLS: cfg})
	c := paho.NewClient(paho.NewClientOptions().AddBroker(b.URL()).SetClientID("mqtttest-tls-pub").SetTLSConfig(cfg))
	if tok := c.Connect(); !tok.WaitTimeout(wait) || tok.Error() != nil {
		t.Fatalf("connect: %v", tok.Error())
	}
	defer c.Disconnect(100)
	if tok := c.Publish("t/1", 1, false, "over tls"); !tok.WaitTimeout(wait) || tok.Error() != nil {
		t.Fatalf("publish: %v", tok.Error())
	}
	if m := sub.WaitFor("t/1", nil, wait); string(m.Payload) != "over tls" {
		t.Fatalf("got %q", m.Payload)
	}
}
