package sim

import (
	"bufio"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"sync"
	"time"
)

// Defaults of the Server's tunables.
const (
	DefaultIdleTimeout = 2 * time.Minute
	DefaultMaxClients  = 16
)

// logEvery is the shortest interval between two log lines of one kind from one
// head (or, for unknown unit ids, from one server); lines in between are counted
// and the count is reported with the next line.
const logEvery = 10 * time.Second

// Server serves simulated heads over Modbus TCP at one address, each head under
// its own unit id. Heads are read-only: the server answers reads (function 03
// for holding, 04 for input registers) with the channel signals, the status
// word and the extra values at the moment of the request, encoded as each
// field says. Scenario time zero is the moment Start is called.
//
// Answers other than register data:
//   - a unit id no head uses: exception 0x0B (gateway target device failed to
//     respond), promptly, so a poller configured with a wrong unit id sees a
//     clear error instead of a timeout;
//   - a read of a table the head serves no field in, or reaching beyond the
//     head's last register in that table: exception 0x02 (illegal data
//     address); registers between fields read as zero;
//   - a read quantity of 0 or more than 125 registers, or a read request of
//     the wrong length: exception 0x03 (illegal data value);
//   - a value its field cannot encode (integer overflow, NaN): exception 0x04
//     (server device failure) and a rate-limited warning;
//   - any write, and coil or discrete-input functions: exception 0x01 (illegal
//     function);
//   - a frame whose MBAP header is not Modbus (protocol id other than 0, a
//     length field outside 2..254): the connection is closed.
//
// A head's Faults apply to requests addressed to it: Silent leaves the request
// unanswered (the connection stays open, as a gateway whose serial head is
// dead would), Late answers Delay later on the wall clock, Exception answers
// the fault's code, and Truncated sends the first half of the answer and
// closes the connection. CRCError has no meaning on TCP and NewServer refuses
// it.
//
// Each connection is served by its own goroutine, one request at a time in
// the order they came; requests a client sent without waiting (several in
// flight, paired by transaction id) are answered in one write, a Late one
// holding back only the answers after it. Each head's state is guarded by
// its own mutex, so concurrent reads of one head draw distinct noise
// samples.
type Server struct {
	// Now is the clock for scenario time; nil means time.Now. Set it before
	// Start and leave it unchanged while the server runs; it is called from
	// several goroutines.
	Now func() time.Time
	// IdleTimeout closes a client connection after this long without a
	// request; zero means DefaultIdleTimeout.
	IdleTimeout time.Duration
	// MaxClients caps simultaneous client connections; further connections are
	// closed at once. Zero means DefaultMaxClients.
	MaxClients uint

	address string
	logger  *slog.Logger
	heads   map[uint8]*servedHead
	units   []int // unit ids in configuration order, for logs

	unknownUnit rateLimit
	protocol    rateLimit
	refused     rateLimit

	mu      sync.Mutex // guards state, ln, conns
	state   serverState
	start   time.Time // scenario time zero; written once in Start, before serving
	ln      net.Listener
	conns   map[net.Conn]struct{}
	done    chan struct{} // closed when Close begins
	closed  chan struct{} // closed when Close has finished // closed by Close: ends late answers
	wg      sync.WaitGroup
	stopCtx func() bool
}

type serverState uint8

const (
	stateNew serverState = iota
	stateRunning
	stateClosed
)

// close moves a server to stateClosed; mu, which guards it, is held. It
// reports whether the server was running, and so has something to stop,
// with mu still held; otherwise it returns with mu unlocked, closed closed
// (at once for a server never started, after the Close at work for one
// closing).
func (st *serverState) close(mu *sync.Mutex, closed chan struct{}) (running bool) {
	switch *st {
	case stateNew:
		*st = stateClosed
		close(closed)
		mu.Unlock()
		return false
	case stateClosed:
		mu.Unlock()
		<-closed // another Close may still be at work
		return false
	}
	*st = stateClosed
	return true
}

// NewServer checks the heads and returns a server for them at address (host:port,
// as net.Listen takes it; port 0 picks a free port, see Address). Each head is
// validated with Head.Validate, unit ids must be distinct, and no fault may be
// of kind CRCError. The heads are copied; later changes to the slice or
// anything it holds do not reach the server. A nil logger discards log output.
func NewServer(address string, heads []Head, logger *slog.Logger) (*Server, error) {
	if _, _, err := net.SplitHostPort(address); err != nil {
		return nil, fmt.Errorf("sim: address %q: %w", address, err)
	}
	if len(heads) == 0 {
		return nil, fmt.Errorf("sim: address %s: no heads", address)
	}
	if logger == nil {
		logger = slog.New(slog.DiscardHandler)
	}
	served, units, err := servedHeads(heads, logger, func(h *Head) error {
		for i, f := range h.Faults {
			if f.Kind == CRCError {
				return fmt.Errorf("faults[%d].kind: %s: a Modbus TCP frame carries no CRC to corrupt (this fault is for RTU lines)", i, f.Kind)
			}
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("sim: address %s: %w", address, err)
	}
	return &Server{
		address: address,
		logger:  logger,
		heads:   served,
		units:   units,
		conns:   map[net.Conn]struct{}{},
		done:    make(chan struct{}),
		closed:  make(chan struct{}),
	}, nil
}

// Address returns the address the server listens at once started (with the
// port the system chose when the configured port was 0), and the configured
// address before Start.
func (s *Server) Address() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.ln != nil {
		return s.ln.Addr().String()
	}
	return s.address
}

// Start begins listening at the server's address and serving requests, and
// returns once the listener is bound. Scenario time zero is s.Now() at this call.
// The server serves until Close is called or ctx is cancelled, whichever comes
// first. Start fails if ctx is already done, if the address cannot be bound, or
// if the server was started or closed before.
func (s *Server) Start(ctx context.Context) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("sim: start %s: %w", s.address, err)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	switch s.state {
	case stateRunning:
		return fmt.Errorf("sim: start %s: already started", s.address)
	case stateClosed:
		return fmt.Errorf("sim: start %s: server closed", s.address)
	}
	var lc net.ListenConfig
	ln, err := lc.Listen(ctx, "tcp", s.address)
	if err != nil {
		return fmt.Errorf("sim: listen on %s: %w", s.address, err)
	}
	s.ln = ln
	s.start = s.now()
	s.state = stateRunning
	s.wg.Go(s.accept)
	s.stopCtx = context.AfterFunc(ctx, func() { _ = s.Close() })
	s.logger.Info("serving simulated heads", "address", ln.Addr().String(), "units", s.units)
	return nil
}

// Close stops listening, closes every client connection and waits for the
// connections' goroutines to end. It is safe to call more than once and before
// Start; a closed server cannot be started again.
func (s *Server) Close() error {
	s.mu.Lock()
	if !s.state.close(&s.mu, s.closed) {
		return nil
	}
	defer close(s.closed)
	s.stopCtx()
	close(s.done)
	err := s.ln.Close()
	for c := range s.conns {
		c.Close()
	}
	s.mu.Unlock()
	s.wg.Wait()
	if err != nil {
		return fmt.Errorf("sim: close %s: %w", s.address, err)
	}
	s.logger.Info("stopped serving simulated heads", "address", s.address)
	return nil
}

func (s *Server) now() time.Time {
	if s.Now != nil {
		return s.Now()
	}
	return time.Now()
}

// accept takes connections until the listener is closed.
func (s *Server) accept() {
	backoff := time.Duration(0)
	for {
		c, err := s.ln.Accept()
		if err != nil {
			if errors.Is(err, net.ErrClosed) {
				return
			}
			// Out of file descriptors or the like: wait a little and retry,
			// as net/http's Server.Serve does.
			backoff = min(max(2*backoff, 5*time.Millisecond), time.Second)
			s.logger.Warn("accept failed; retrying", "address", s.address, "err", err, "retry_in", backoff)
			select {
			case <-s.done:
				return
			case <-time.After(backoff):
			}
			continue
		}
		backoff = 0
		s.mu.Lock()
		switch {
		case s.state != stateRunning:
			c.Close()
		case uint(len(s.conns)) >= s.maxClients():
			c.Close()
			if ok, skipped := s.refused.allow(s.now()); ok {
				s.logger.Warn("too many clients; connection closed", "client", c.RemoteAddr().String(),
					"max_clients", s.maxClients(), "suppressed", skipped)
			}
		default:
			s.conns[c] = struct{}{}
			s.wg.Go(func() { s.serve(c) })
		}
		s.mu.Unlock()
	}
}

func (s *Server) maxClients() uint {
	if s.MaxClients == 0 {
		return DefaultMaxClients
	}
	return s.MaxClients
}

// MBAP header and PDU limits (Modbus Messaging on TCP/IP Implementation Guide
// V1.0b, 3.1.3): transaction id, protocol id 0, length (unit id + PDU, at most
// 1 + 253), unit id.
const (
	mbapHeader = 7
	maxPDU     = 253
)

// serve answers the requests of one connection until it closes, idles out, or
// breaks the protocol.
func (s *Server) serve(c net.Conn) {
	defer func() {
		s.mu.Lock()
		delete(s.conns, c)
		s.mu.Unlock()
		c.Close()
	}()
	idle := s.IdleTimeout
	if idle <= 0 {
		idle = DefaultIdleTimeout
	}
	client := c.RemoteAddr().String()
	// Requests a client sent together (several in flight) are read from
	// one buffer and their answers go out in one write, when no further
	// request is waiting.
	rd := bufio.NewReaderSize(c, 4096)
	var in [mbapHeader + maxPDU]byte
	out := make([]byte, 0, 4096)
	flush := func() bool {
		if len(out) == 0 {
			return true
		}
		_, err := c.Write(out)
		out = out[:0]
		return err == nil
	}
	for {
		if rd.Buffered() == 0 && !flush() {
			return
		}
		if err := c.SetDeadline(time.Now().Add(idle)); err != nil {
			return
		}
		if _, err := io.ReadFull(rd, in[:mbapHeader]); err != nil {
			return // closed by the client or by Close, or idle
		}
		proto := binary.BigEndian.Uint16(in[2:])
		n := int(binary.BigEndian.Uint16(in[4:]))
		if proto != 0 || n < 2 || n > 1+maxPDU {
			if ok, skipped := s.protocol.allow(s.now()); ok {
				s.logger.Warn("not a Modbus TCP frame; connection closed", "client", client,
					"protocol_id", proto, "length", n, "suppressed", skipped)
			}
			return
		}
		if _, err := io.ReadFull(rd, in[mbapHeader:mbapHeader+n-1]); err != nil {
			return
		}
		unit, req := in[6], in[mbapHeader:mbapHeader+n-1]
		at := len(out)
		out = append(out, in[:mbapHeader]...) // transaction, protocol, length (set below), unit
		h, ok := s.heads[unit]
		if !ok {
			if ok, skipped := s.unknownUnit.allow(s.now()); ok {
				s.logger.Warn("request for a unit id no simulated head uses; answering exception 0x0B",
					"unit", unit, "client", client, "units", s.units, "suppressed", skipped)
			}
			out = append(out, req[0]|0x80, excGatewayNoRespond)
		} else {
			now := s.now()
			elapsed := now.Sub(s.start)
			f := h.decide(elapsed)
			switch f.kind {
			case Silent:
				out = out[:at]
				continue
			case Late:
				// The answers before this one are not held back.
				if at > 0 {
					if _, err := c.Write(out[:at]); err != nil {
						return
					}
					out, at = out[:copy(out, out[at:])], 0
				}
				if !s.wait(f.delay) {
					return
				}
			case Exception:
				out = append(out, req[0]|0x80, f.code)
			}
			if f.kind != Exception {
				out = h.answer(out, req, now, elapsed)
			}
			if f.kind == Truncated {
				binary.BigEndian.PutUint16(out[at+4:], uint16(len(out)-at-6))
				c.Write(out[:at+(len(out)-at)/2])
				return
			}
		}
		binary.BigEndian.PutUint16(out[at+4:], uint16(len(out)-at-6))
	}
}

// wait waits d on the wall clock, and reports false if the server closed
// meanwhile.
func (s *Server) wait(d time.Duration) bool {
	t := time.NewTimer(d)
	defer t.Stop()
	select {
	case <-t.C:
		return true
	case <-s.done:
		return false
	}
}

// FreeAddr returns a loopback address with a port that was free a moment ago:
// it listens on 127.0.0.1:0, notes the port and closes the listener. Another
// process may take the port before the caller binds it; callers that must not
// fail retry with a fresh address. A server given port 0 picks its own port
// and reports it with Address; FreeAddr is for callers that must know the
// address before the server starts.
func FreeAddr() (string, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return "", fmt.Errorf("sim: find a free port: %w", err)
	}
	addr := l.Addr().String()
	if err := l.Close(); err != nil {
		return "", fmt.Errorf("sim: find a free port: %w", err)
	}
	return addr, nil
}
