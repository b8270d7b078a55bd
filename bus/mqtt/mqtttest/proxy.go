package mqtttest

import (
	"net"
	"sync"
	"testing"
)

// Proxy is a TCP relay on a loopback port in front of a broker, for
// breaking a client's connection in ways a clean client never would.
// Each accepted connection is relayed to a new connection to the target.
type Proxy struct {
	t      testing.TB
	ln     net.Listener
	target string

	mu      sync.Mutex
	cond    *sync.Cond // signalled when stalled turns false or a pair closes
	stalled bool
	pairs   map[*pair]struct{}
	wg      sync.WaitGroup
}

type pair struct {
	client, server net.Conn
	closed         bool
}

// NewProxy listens on a free loopback port and relays to target
// (host:port). It closes everything in t's cleanup.
func NewProxy(t testing.TB, target string) *Proxy {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatalf("proxy listen: %v", err)
	}
	p := &Proxy{t: t, ln: ln, target: target, pairs: make(map[*pair]struct{})}
	p.cond = sync.NewCond(&p.mu)
	p.wg.Add(1)
	go p.accept()
	t.Cleanup(func() {
		_ = ln.Close()
		p.Resume()
		p.Cut()
		p.wg.Wait()
	})
	return p
}

// Addr is the proxy's host:port.
func (p *Proxy) Addr() string { return p.ln.Addr().String() }

// URL is "tcp://" + Addr().
func (p *Proxy) URL() string { return "tcp://" + p.Addr() }

// Stall holds every byte in both directions, on open connections and on
// new ones, until Resume. Bytes read before Stall returns may still pass.
func (p *Proxy) Stall() {
	p.mu.Lock()
	p.stalled = true
	p.mu.Unlock()
}

// Resume lets bytes flow again.
func (p *Proxy) Resume() {
	p.mu.Lock()
	p.stalled = false
	p.mu.Unlock()
	p.cond.Broadcast()
}

// Cut resets every open connection on both sides, without a word at the
// MQTT level: to the broker it is a client that vanished (so it publishes
// the client's Will), to the client a broker that vanished. New
// connections are accepted as before (and held if stalled).
func (p *Proxy) Cut() {
	p.mu.Lock()
	for pr := range p.pairs {
		p.closeLocked(pr)
	}
	p.mu.Unlock()
	p.cond.Broadcast()
}

// Conns is the number of open relayed connections.
func (p *Proxy) Conns() int {
	p.mu.Lock()
	defer p.mu.Unlock()
	return len(p.pairs)
}

func (p *Proxy) accept() {
	defer p.wg.Done()
	for {
		c, err := p.ln.Accept()
		if err != nil {
			return
		}
		s, err := net.Dial("tcp", p.target)
		if err != nil {
			_ = c.Close()
			continue
		}
		pr := &pair{client: c, server: s}
		p.mu.Lock()
		p.pairs[pr] = struct{}{}
		p.mu.Unlock()
		p.wg.Add(2)
		go p.pump(pr, c, s)
		go p.pump(pr, s, c)
	}
}

// pump copies src to dst, waiting while the proxy is stalled, and closes
// the pair when either side fails.
func (p *Proxy) pump(pr *pair, src, dst net.Conn) {
	defer p.wg.Done()
	buf := make([]byte, 32<<10)
	for {
		n, err := src.Read(buf)
		if n > 0 {
			p.mu.Lock()
			for p.stalled && !pr.closed {
				p.cond.Wait()
			}
			closed := pr.closed
			p.mu.Unlock()
			if closed {
				return
			}
			if _, werr := dst.Write(buf[:n]); werr != nil {
				err = werr
			}
		}
		if err != nil {
			p.mu.Lock()
			p.closeLocked(pr)
			p.mu.Unlock()
			p.cond.Broadcast()
			return
		}
	}
}

// closeLocked resets both sides of pr. p.mu is held.
func (p *Proxy) closeLocked(pr *pair) {
	if pr.closed {
		return
	}
	pr.closed = true
	delete(p.pairs, pr)
	for _, c := range []net.Conn{pr.client, pr.server} {
		if tc, ok := c.(*net.TCPConn); ok {
			_ = tc.SetLinger(0) // RST, not FIN
		}
		_ = c.Close()
	}
}
