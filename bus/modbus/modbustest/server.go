// Package modbustest provides a Modbus TCP responder for tests, in the manner
// of net/http/httptest: NewServer listens on a loopback port, NewPipeServer
// serves in-memory connections (for testing/synctest bubbles, where real
// sockets do not belong). Both answer read holding registers (03) and read
// input registers (04) from registers set with Set, and misbehave on request
// with SetFault.
//
// The MBAP framing is written here by hand from the Modbus Messaging on
// TCP/IP Implementation Guide V1.0b and the Modbus Application Protocol
// V1.1b3, so that it shares no code with the client under test.
//
// For serial lines, PtyPair (socat's pseudo-terminal pairs) stands in for an
// RS-485 line, and StartPymodbusRTU puts Debian's python3-pymodbus on one
// end as an independent RTU device; StartPymodbus is the same peer over
// TCP.
package modbustest

import (
	"context"
	"encoding/binary"
	"errors"
	"io"
	"net"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"glowgate/bus/modbus"
)

// FaultKind names a way the server misbehaves for one unit.
type FaultKind uint8

const (
	None      FaultKind = iota // answer normally
	Silent                     // read the request and never answer it
	Late                       // answer correctly after Fault.Delay
	Exception                  // answer with exception Fault.Code
	Short                      // answer one register fewer than asked, with a consistent byte count
	WrongTxID                  // answer correctly but with the transaction id plus one
	Drop                       // close the connection instead of answering
	Trailing                   // answer correctly, with two stray bytes after the answer in the same write
)

// Fault makes the server misbehave for requests to one unit.
type Fault struct {
	Kind  FaultKind
	Delay time.Duration // Late: how long to hold the answer
	Code  byte          // Exception: the exception code, e.g. 0x02
	// Times is how many requests the fault applies to before the unit
	// answers normally again; zero means until SetFault changes it.
	Times int
	// Handled, if not nil, receives a value each time the server has
	// finished with a request the fault applied to: after a Late answer
	// was written (or failed to be), after a Silent request was swallowed,
	// after a Drop closed the connection. The send blocks until received
	// or the server closes; give it a buffer to keep the server going.
	Handled chan<- struct{}
}

// Exception codes the server itself answers with (Modbus Application
// Protocol V1.1b3, 7).
const (
	codeIllegalFunction    = 0x01
	codeIllegalDataAddress = 0x02
	codeIllegalDataValue   = 0x03
	codeTargetNoResponse   = 0x0B
)

// Server is a Modbus TCP responder. Requests to a unit no Set or SetFault
// named answer exception 0B (gateway target device failed to respond); reads
// that touch a register never Set answer exception 02; a quantity outside
// 1..125 answers 03; a function other than 03 and 04 answers 01. Each
// connection is served in order, one request at a time, like a device.
type Server struct {
	t  testing.TB
	ln net.Listener

	mu     sync.Mutex
	units  map[uint8]*unit
	conns  map[net.Conn]struct{}
	closed bool

	requests atomic.Int64
	accepted atomic.Int64
	done     chan struct{}
	wg       sync.WaitGroup
}

type unit struct {
	regs  [2]map[uint16]uint16 // by modbus.Table
	fault Fault
}

// NewServer starts a server listening on 127.0.0.1:0. It is closed by
// t.Cleanup.
func NewServer(t testing.TB) *Server {
	t.Helper()
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatalf("modbustest: listen: %v", err)
	}
	s := newServer(t)
	s.ln = ln
	s.wg.Add(1)
	go s.accept()
	return s
}

// NewPipeServer returns a server without a listener: connect to it with Dial.
// Inside a testing/synctest bubble, call it from the bubble so that its
// goroutines and timers belong there. It is closed by t.Cleanup.
func NewPipeServer(t testing.TB) *Server {
	t.Helper()
	return newServer(t)
}

func newServer(t testing.TB) *Server {
	s := &Server{
		t:     t,
		units: make(map[uint8]*unit),
		conns: make(map[net.Conn]struct{}),
		done:  make(chan struct{}),
	}
	t.Cleanup(s.Close)
	return s
}

// Addr is the listening address ("127.0.0.1:port"), or "" for a pipe server.
func (s *Server) Addr() string {
	if s.ln == nil {
		return ""
	}
	return s.ln.Addr().String()
}

// Dial returns the client end of an in-memory connection (net.Pipe) that the
// server serves; it has the signature of modbus.DialFunc.
func (s *Server) Dial(ctx context.Context) (net.Conn, error) {
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	client, server := net.Pipe()
	if !s.serve(server) {
		client.Close()
		return nil, errors.New("modbustest: server closed")
	}
	return client, nil
}

// Set stores values in consecutive registers of table from addr on, for unit.
func (s *Server) Set(unitID uint8, table modbus.Table, addr uint16, values ...uint16) {
	if table != modbus.InputRegisters && table != modbus.HoldingRegisters {
		s.t.Errorf("modbustest: Set: unknown table %v", table)
		return
	}
	if int(addr)+len(values) > 1<<16 {
		s.t.Errorf("modbustest: Set: %d values from address %d reach past 65535", len(values), addr)
		return
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	u := s.unit(unitID)
	for i, v := range values {
		u.regs[table][addr+uint16(i)] = v
	}
}

// SetFault makes the server misbehave for unit as f says; Fault{} restores
// normal answers.
func (s *Server) SetFault(unitID uint8, f Fault) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.unit(unitID).fault = f
}

// Requests is the number of well-formed request frames received so far.
func (s *Server) Requests() int { return int(s.requests.Load()) }

// Connections is the number of connections accepted (or dialled) so far.
func (s *Server) Connections() int { return int(s.accepted.Load()) }

// CloseConnections closes every open connection, as a network break would,
// and keeps serving new ones.
func (s *Server) CloseConnections() {
	s.mu.Lock()
	defer s.mu.Unlock()
	for c := range s.conns {
		c.Close()
	}
}

// Close stops listening, closes every connection and waits for the server's
// goroutines. It may be called more than once.
func (s *Server) Close() {
	s.mu.Lock()
	if s.closed {
		s.mu.Unlock()
		return
	}
	s.closed = true
	close(s.done)
	if s.ln != nil {
		s.ln.Close()
	}
	for c := range s.conns {
		c.Close()
	}
	s.mu.Unlock()
	s.wg.Wait()
}

// unit returns the unit's state, creating it; s.mu must be held.
func (s *Server) unit(id uint8) *unit {
	u := s.units[id]
	if u == nil {
		u = &unit{regs: [2]map[uint16]uint16{{}, {}}}
		s.units[id] = u
	}
	return u
}

func (s *Server) accept() {
	defer s.wg.Done()
	for {
		c, err := s.ln.Accept()
		if err != nil {
			return
		}
		if !s.serve(c) {
			c.Close()
			return
		}
	}
}

// serve starts serving c, or reports false when the server is closed.
func (s *Server) serve(c net.Conn) bool {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.closed {
		return false
	}
	s.conns[c] = struct{}{}
	s.accepted.Add(1)
	s.wg.Add(1)
	go func() {
		defer s.wg.Done()
		defer func() {
			s.mu.Lock()
			delete(s.conns, c)
			s.mu.Unlock()
			c.Close()
		}()
		s.handle(c)
	}()
	return true
}

// MBAP header: transaction id (2), protocol id (2, zero), length (2, counts
// unit id and PDU), unit id (1). PDU at most 253 bytes.
const (
	mbapHeader = 7
	maxPDU     = 253
)

func (s *Server) handle(c net.Conn) {
	var req [mbapHeader + maxPDU]byte
	for {
		if _, err := io.ReadFull(c, req[:mbapHeader]); err != nil {
			return
		}
		n := int(binary.BigEndian.Uint16(req[4:6]))
		if binary.BigEndian.Uint16(req[2:4]) != 0 || n < 2 || n > 1+maxPDU {
			return // not Modbus: a device drops such a connection
		}
		if _, err := io.ReadFull(c, req[mbapHeader:mbapHeader-1+n]); err != nil {
			return
		}
		s.requests.Add(1)
		txID := binary.BigEndian.Uint16(req[0:2])
		unitID := req[6]
		pdu := req[mbapHeader : mbapHeader-1+n]

		f, known := s.takeFault(unitID)
		var resp []byte
		switch {
		case f.Kind == Silent:
			s.handled(f)
			continue
		case f.Kind == Drop:
			c.Close()
			s.handled(f)
			return
		case f.Kind == Exception:
			resp = exception(pdu[0], f.Code)
		case !known:
			resp = exception(pdu[0], codeTargetNoResponse)
		default:
			resp = s.answer(unitID, pdu, f.Kind == Short)
		}
		if f.Kind == WrongTxID {
			txID++
		}
		if f.Kind == Late {
			t := time.NewTimer(f.Delay)
			select {
			case <-s.done:
				t.Stop()
				return
			case <-t.C:
			}
		}
		out := make([]byte, mbapHeader+len(resp))
		binary.BigEndian.PutUint16(out[0:2], txID)
		binary.BigEndian.PutUint16(out[4:6], uint16(1+len(resp)))
		out[6] = unitID
		copy(out[mbapHeader:], resp)
		if f.Kind == Trailing {
			out = append(out, 0xde, 0xad)
		}
		_, err := c.Write(out)
		s.handled(f)
		if err != nil {
			return
		}
	}
}

// handled tells f.Handled, if any, that a faulted request is done with.
func (s *Server) handled(f Fault) {
	if f.Kind == None || f.Handled == nil {
		return
	}
	select {
	case f.Handled <- struct{}{}:
	case <-s.done:
	}
}

// takeFault returns the unit's fault for one request, counting down Times,
// and whether the unit is known.
func (s *Server) takeFault(id uint8) (Fault, bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	u, ok := s.units[id]
	if !ok {
		return Fault{}, false
	}
	f := u.fault
	if f.Times > 0 {
		u.fault.Times--
		if u.fault.Times == 0 {
			u.fault = Fault{}
		}
	}
	return f, true
}

func exception(function, code byte) []byte {
	return []byte{function | 0x80, code}
}

// answer builds the response PDU to a request PDU; short drops the last
// register (and counts the byte count accordingly).
func (s *Server) answer(unitID uint8, pdu []byte, short bool) []byte {
	fc := pdu[0]
	var table modbus.Table
	switch fc {
	case 0x03:
		table = modbus.HoldingRegisters
	case 0x04:
		table = modbus.InputRegisters
	default:
		return exception(fc, codeIllegalFunction)
	}
	if len(pdu) != 5 {
		return exception(fc, codeIllegalDataValue)
	}
	addr := binary.BigEndian.Uint16(pdu[1:3])
	qty := int(binary.BigEndian.Uint16(pdu[3:5]))
	if qty < 1 || qty > modbus.MaxQuantity {
		return exception(fc, codeIllegalDataValue)
	}
	if int(addr)+qty > 1<<16 {
		return exception(fc, codeIllegalDataAddress)
	}
	if short {
		qty--
	}
	resp := make([]byte, 2+2*qty)
	resp[0] = fc
	resp[1] = byte(2 * qty)
	s.mu.Lock()
	defer s.mu.Unlock()
	regs := s.units[unitID].regs[table]
	for i := range qty {
		v, ok := regs[addr+uint16(i)]
		if !ok {
			return exception(fc, codeIllegalDataAddress)
		}
		binary.BigEndian.PutUint16(resp[2+2*i:], v)
	}
	return resp
}
