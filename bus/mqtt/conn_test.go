package mqtt

import (
	"bytes"
	"errors"
	"io"
	"net"
	"testing"
	"time"
)

// loopback returns a bufferedConn to a loopback listener and the
// listener's end of the connection.
func loopback(t *testing.T) (*bufferedConn, net.Conn) {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	accepted := make(chan net.Conn, 1)
	go func() {
		c, _ := ln.Accept()
		accepted <- c
	}()
	conn, err := net.Dial("tcp", ln.Addr().String())
	if err != nil {
		t.Fatal(err)
	}
	peer := <-accepted
	if peer == nil {
		t.Fatal("accept failed")
	}
	t.Cleanup(func() { peer.Close() })
	c := newBufferedConn(conn, 5*time.Second)
	t.Cleanup(func() { c.Close() })
	return c, peer
}

// Everything written arrives in order, what is held when Close is called
// included, and the peer then sees the end of the stream.
func TestBufferedConnSendsAllThenCloses(t *testing.T) {
	c, peer := loopback(t)
	var want bytes.Buffer
	for i := range 20000 {
		p := []byte{byte(i), byte(i >> 8), 0x30, 0x31, 0x32}
		want.Write(p)
		if n, err := c.Write(p); n != len(p) || err != nil {
			t.Fatalf("write %d: %d, %v", i, n, err)
		}
	}
	got := make(chan []byte, 1)
	go func() {
		b, _ := io.ReadAll(peer)
		got <- b
	}()
	if err := c.Close(); err != nil {
		t.Fatal(err)
	}
	select {
	case b := <-got:
		if !bytes.Equal(b, want.Bytes()) {
			t.Fatalf("peer read %d bytes, want the %d written, in order", len(b), want.Len())
		}
	case <-time.After(10 * time.Second):
		t.Fatal("peer never saw the end of the stream")
	}
	if _, err := c.Write([]byte{1}); !errors.Is(err, net.ErrClosed) {
		t.Errorf("write after Close: %v, want net.ErrClosed", err)
	}
}

// A peer that goes away makes a later Write fail, as on a bare
// connection, so that paho learns the connection is lost.
func TestBufferedConnReportsWriteError(t *testing.T) {
	c, peer := loopback(t)
	peer.(*net.TCPConn).SetLinger(0) // close with a reset
	peer.Close()
	deadline := time.Now().Add(10 * time.Second)
	for {
		if _, err := c.Write(make([]byte, 1024)); err != nil {
			return
		}
		if time.Now().After(deadline) {
			t.Fatal("writes to a closed peer never failed")
		}
	}
}
