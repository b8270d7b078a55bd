package mqtt

import (
	"bufio"
	"crypto/tls"
	"errors"
	"net"
	"net/url"
	"sync"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
	"golang.org/x/net/proxy"
)

const (
	// readBuffer is the size of a connection's read buffer: many PUBACKs
	// (4 bytes each) or a few incoming commands.
	readBuffer = 4096
	// maxUnsent bounds what a connection holds written but not yet sent;
	// a Write beyond it waits.
	maxUnsent = 256 << 10
	// gatherRate and gatherWindow: Writes gather for the sender while the
	// last window saw gatherRate messages a second or more.
	gatherRate   = 5000
	gatherWindow = 10 * time.Millisecond
	gatherMin    = int(gatherRate * gatherWindow / time.Second) // Writes in a window
	// closeFlush bounds how long Close waits to send what is held (the
	// DISCONNECT, typically), so that the broker sees a clean goodbye.
	closeFlush = time.Second
)

// bufferedConn is the connection to a broker, buffered both ways.
//
// paho reads a packet a few bytes at a time (the fixed header's first
// byte, each byte of the remaining length, then the rest), one system call
// each on a bare connection: a PUBACK cost three reads. Through the read
// buffer one read takes whatever has arrived, often the acknowledgements
// of many messages.
//
// paho writes each packet with a system call of its own, from one
// goroutine: at 20,000 messages a second the writes were a fifth of the
// publisher's time. While messages come fast (gatherRate a second or
// more, over the last gatherWindow), a Write here only appends to a
// buffer and a sender goroutine writes what has gathered: the packets
// handed out while a write is under way leave together. At slower rates,
// where little would gather, a Write writes at once, as on a bare
// connection, sparing each message a hand-over to the sender goroutine
// (the wakeup of another thread).
//
// Each write has its own deadline, writeTimeout from when it starts (none
// when writeTimeout is not above zero); paho's write deadlines, set around
// each of its Writes, are ignored. The first write error is returned
// by every later Write.
type bufferedConn struct {
	net.Conn
	r            *bufio.Reader
	writeTimeout time.Duration

	mu      sync.Mutex
	cond    *sync.Cond // signalled when the sender took the buffer or failed
	unsent  []byte
	spare   []byte
	sending bool // a write is under way (the sender's or a Write's own)
	window  time.Time
	count   int // Writes in the window starting at window
	last    int // Writes in the window before
	err     error
	closed  bool
	kick    chan struct{}
	done    chan struct{} // closed when the sender has returned
}

func newBufferedConn(conn net.Conn, writeTimeout time.Duration) *bufferedConn {
	c := &bufferedConn{
		Conn:         conn,
		r:            bufio.NewReaderSize(conn, readBuffer),
		writeTimeout: writeTimeout,
		kick:         make(chan struct{}, 1),
		done:         make(chan struct{}),
	}
	c.cond = sync.NewCond(&c.mu)
	go c.send()
	return c
}

func (c *bufferedConn) Read(p []byte) (int, error) { return c.r.Read(p) }

// Write writes p at once or, while messages come fast or a write is under
// way, queues it for the sender. It waits only while maxUnsent bytes are
// held already.
func (c *bufferedConn) Write(p []byte) (int, error) {
	c.mu.Lock()
	for c.err == nil && !c.closed && len(c.unsent) >= maxUnsent {
		c.cond.Wait()
	}
	switch {
	case c.err != nil:
		c.mu.Unlock()
		return 0, c.err
	case c.closed:
		c.mu.Unlock()
		return 0, net.ErrClosed
	}
	now := time.Now()
	if since := now.Sub(c.window); since >= gatherWindow {
		if since >= 2*gatherWindow {
			c.count = 0 // the window before was empty
		}
		c.window, c.last, c.count = now, c.count, 0
	}
	c.count++
	if c.sending || len(c.unsent) > 0 || c.last >= gatherMin {
		c.unsent = append(c.unsent, p...)
		c.mu.Unlock()
		signal(c.kick)
		return len(p), nil
	}
	c.sending = true
	c.mu.Unlock()
	n, err := c.write(p)
	c.mu.Lock()
	c.sending = false
	if err != nil && c.err == nil {
		c.err = err
	}
	c.cond.Broadcast()
	c.mu.Unlock()
	return n, err
}

// write writes p to the connection under its own deadline.
func (c *bufferedConn) write(p []byte) (int, error) {
	var deadline time.Time
	if c.writeTimeout > 0 {
		deadline = time.Now().Add(c.writeTimeout)
	}
	if err := c.Conn.SetWriteDeadline(deadline); err != nil {
		return 0, err
	}
	return c.Conn.Write(p)
}

// send writes what gathers until Close or the first error.
func (c *bufferedConn) send() {
	defer close(c.done)
	for range c.kick {
		c.mu.Lock()
		for c.sending && c.err == nil { // a Write's own write
			c.cond.Wait()
		}
		out := c.unsent
		c.unsent, c.spare = c.spare[:0], nil
		c.sending = len(out) > 0
		closed := c.closed
		c.cond.Broadcast()
		c.mu.Unlock()
		var err error
		if len(out) > 0 {
			_, err = c.write(out)
		}
		c.mu.Lock()
		c.spare = out[:0]
		c.sending = false
		if err != nil && c.err == nil {
			c.err = err
		}
		c.cond.Broadcast()
		stop := c.err != nil || (closed && len(c.unsent) == 0)
		c.mu.Unlock()
		if stop {
			return
		}
	}
}

// SetDeadline sets the read deadline only: writes have the sender's.
func (c *bufferedConn) SetDeadline(t time.Time) error { return c.Conn.SetReadDeadline(t) }

// SetWriteDeadline is ignored: each write of the sender has its own.
func (c *bufferedConn) SetWriteDeadline(time.Time) error { return nil }

// Close sends what is held, waiting at most closeFlush, and closes the
// connection.
func (c *bufferedConn) Close() error {
	c.mu.Lock()
	if c.closed {
		c.mu.Unlock()
		return c.Conn.Close()
	}
	c.closed = true
	c.cond.Broadcast()
	c.mu.Unlock()
	signal(c.kick)
	select {
	case <-c.done:
	case <-time.After(closeFlush):
	}
	return c.Conn.Close()
}

// openConnection dials broker as paho itself would for each scheme
// (CheckBrokers lists them; plain TCP honours the proxy environment
// variables, as paho does) and buffers the connection.
func openConnection(broker *url.URL, o paho.ClientOptions) (net.Conn, error) {
	var conn net.Conn
	var err error
	switch broker.Scheme {
	case "tcp", "mqtt":
		conn, err = proxy.FromEnvironmentUsing(o.Dialer).Dial("tcp", broker.Host)
	case "ssl", "tls", "mqtts", "tcps":
		conn, err = tls.DialWithDialer(o.Dialer, "tcp", broker.Host, o.TLSConfig)
	case "ws", "wss":
		u := *broker
		u.User = nil // paho's own rule: the websocket dialer refuses credentials in the URL
		var tc *tls.Config
		if broker.Scheme == "wss" {
			tc = o.TLSConfig
		}
		conn, err = paho.NewWebsocket(u.String(), tc, o.ConnectTimeout, o.HTTPHeaders, o.WebsocketOptions)
	default:
		return nil, errors.New("unknown scheme " + broker.Scheme)
	}
	if err != nil {
		return nil, err
	}
	return newBufferedConn(conn, o.WriteTimeout), nil
}
