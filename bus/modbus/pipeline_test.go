package modbus_test

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"net"
	"slices"
	"testing"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/modbus/modbustest"
)

// batchResult is what ReadBatch handed out for one request.
type batchResult struct {
	regs  []uint16
	err   error
	calls int
}

// readBatch runs one ReadBatch and collects what it handed out, checking
// that every request had exactly one call.
func readBatch(t *testing.T, c modbus.BatchReader, timeout time.Duration, reqs ...modbus.Request) []batchResult {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), timeout)
	defer cancel()
	out := make([]batchResult, len(reqs))
	c.ReadBatch(ctx, reqs, func(i int, regs []uint16, err error) {
		out[i].regs = slices.Clone(regs)
		out[i].err = err
		out[i].calls++
	})
	for i, r := range out {
		if r.calls != 1 {
			t.Fatalf("request %d (%v) had %d calls, want 1", i, reqs[i], r.calls)
		}
	}
	return out
}

func inputs(unit uint8, addr, qty uint16) modbus.Request {
	return modbus.Request{Unit: unit, Table: modbus.InputRegisters, Address: addr, Quantity: qty}
}

// Several units in flight at once over one connection, the faults of one
// unit failing only that unit's request.
func TestReadBatchPairsAnswersAndIsolatesFaults(t *testing.T) {
	srv := modbustest.NewServer(t)
	for u := uint8(1); u <= 5; u++ {
		srv.Set(u, modbus.InputRegisters, 10, uint16(u), uint16(u)*100)
	}
	srv.SetFault(2, modbustest.Fault{Kind: modbustest.Exception, Code: 0x04})
	srv.SetFault(4, modbustest.Fault{Kind: modbustest.Short})
	c := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
	defer c.Close()

	reqs := []modbus.Request{inputs(1, 10, 2), inputs(2, 10, 2), inputs(3, 10, 2), inputs(4, 10, 2), inputs(5, 10, 2),
		inputs(6, 0, 200)} // invalid: never sent
	res := readBatch(t, c, 5*time.Second, reqs...)
	for _, u := range []int{1, 3, 5} {
		if r := res[u-1]; r.err != nil || fmt.Sprint(r.regs) != fmt.Sprint([]uint16{uint16(u), uint16(u) * 100}) {
			t.Errorf("unit %d: %v, %v", u, r.regs, r.err)
		}
	}
	var exc *modbus.ExceptionError
	if err := res[1].err; !errors.As(err, &exc) || exc.Code != 0x04 {
		t.Errorf("unit 2: err = %v, want exception 04", err)
	}
	if err := res[3].err; !errors.Is(err, modbus.ErrShortResponse) {
		t.Errorf("unit 4: err = %v, want ErrShortResponse", err)
	}
	if err := res[5].err; !errors.Is(err, modbus.ErrInvalidRequest) {
		t.Errorf("invalid request: err = %v, want ErrInvalidRequest", err)
	}
	if n := srv.Requests(); n != 5 {
		t.Errorf("server saw %d requests, want 5", n)
	}
	// The answers framed well, so the connection carries on.
	res = readBatch(t, c, 5*time.Second, inputs(1, 10, 2), inputs(3, 11, 1))
	if res[0].err != nil || res[1].err != nil || res[1].regs[0] != 300 {
		t.Errorf("second batch: %+v", res)
	}
	if n := srv.Connections(); n != 1 {
		t.Errorf("connections = %d, want 1", n)
	}
}

// A silent unit fails with a timeout while the others of its batch are
// answered; the connection is then replaced, so that the late answer can
// never meet a later batch.
func TestReadBatchTimeoutFailsOnlyTheUnanswered(t *testing.T) {
	srv := modbustest.NewServer(t)
	for u := uint8(1); u <= 3; u++ {
		srv.Set(u, modbus.HoldingRegisters, 0, uint16(u))
	}
	srv.SetFault(2, modbustest.Fault{Kind: modbustest.Silent, Times: 1})
	c := modbus.NewTCPClient(srv.Addr(), 300*time.Millisecond)
	defer c.Close()
	hold := func(u uint8) modbus.Request {
		return modbus.Request{Unit: u, Table: modbus.HoldingRegisters, Quantity: 1}
	}
	res := readBatch(t, c, 5*time.Second, hold(1), hold(2), hold(3))
	if res[0].err != nil || res[2].err != nil || res[0].regs[0] != 1 || res[2].regs[0] != 3 {
		t.Errorf("answered units: %+v", res)
	}
	if modbus.Kind(res[1].err) != modbus.KindTimeout {
		t.Errorf("silent unit: err = %v, want a timeout", res[1].err)
	}
	res = readBatch(t, c, 5*time.Second, hold(2), hold(1))
	if res[0].err != nil || res[1].err != nil || res[0].regs[0] != 2 {
		t.Errorf("after the timeout: %+v", res)
	}
	if n := srv.Connections(); n != 2 {
		t.Errorf("connections = %d, want 2 (closed after the timeout)", n)
	}
}

// A server that answers in turn, each answer 150 ms after the one
// before, gets the whole 250 ms timeout for each request: the timeout
// starts again at every answer, as one at a time. The batch takes longer
// than one timeout, and nothing fails.
func TestReadBatchTimeoutRunsFromEachAnswer(t *testing.T) {
	srv := modbustest.NewServer(t)
	reqs := make([]modbus.Request, 4)
	for u := range uint8(4) {
		srv.Set(u+1, modbus.InputRegisters, 0, uint16(u+1))
		srv.SetFault(u+1, modbustest.Fault{Kind: modbustest.Late, Delay: 150 * time.Millisecond})
		reqs[u] = inputs(u+1, 0, 1)
	}
	c := modbus.NewTCPClient(srv.Addr(), 250*time.Millisecond)
	defer c.Close()
	start := time.Now()
	for i, r := range readBatch(t, c, 5*time.Second, reqs...) {
		if r.err != nil || r.regs[0] != uint16(i+1) {
			t.Errorf("unit %d: %v, %v", i+1, r.regs, r.err)
		}
	}
	if d := time.Since(start); d < 600*time.Millisecond {
		t.Errorf("the batch took %v, want the four answers one after another (600 ms)", d)
	}
	// And the context's deadline still bounds the batch.
	res := readBatch(t, c, 200*time.Millisecond, reqs...)
	if res[0].err != nil || modbus.Kind(res[1].err) != modbus.KindTimeout || modbus.Kind(res[3].err) != modbus.KindTimeout {
		t.Errorf("with a 200 ms context: %+v", res)
	}
}

// An answer whose transaction id pairs with no request in flight fails
// every request still waiting, and the connection is replaced.
func TestReadBatchUnpairedAnswerFailsTheRest(t *testing.T) {
	srv := modbustest.NewServer(t)
	srv.Set(1, modbus.InputRegisters, 0, 1)
	srv.Set(2, modbus.InputRegisters, 0, 2)
	srv.SetFault(2, modbustest.Fault{Kind: modbustest.WrongTxID, Times: 1})
	c := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
	defer c.Close()
	res := readBatch(t, c, 5*time.Second, inputs(1, 0, 1), inputs(2, 0, 1))
	if res[0].err != nil || res[0].regs[0] != 1 {
		t.Errorf("unit 1: %+v", res[0])
	}
	if !errors.Is(res[1].err, modbus.ErrMalformed) {
		t.Errorf("unit 2: err = %v, want ErrMalformed", res[1].err)
	}
	res = readBatch(t, c, 5*time.Second, inputs(2, 0, 1))
	if res[0].err != nil || res[0].regs[0] != 2 || srv.Connections() != 2 {
		t.Errorf("after: %+v, connections %d", res[0], srv.Connections())
	}
}

// Answers in another order than the requests (a server may answer as its
// devices reply) still pair by transaction id. The server here is written
// in the test from the MBAP layout (Modbus Messaging on TCP/IP
// Implementation Guide V1.0b, 3.1.3): it reads all requests, then answers
// them last first, each unit's answer holding its unit id and the
// request's address, all in one write.
func TestReadBatchAnswersOutOfOrder(t *testing.T) {
	const n = 8
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	go func() {
		conn, err := ln.Accept()
		if err != nil {
			return
		}
		defer conn.Close()
		var reqs [n][12]byte
		for i := range reqs {
			if _, err := io.ReadFull(conn, reqs[i][:]); err != nil {
				return
			}
		}
		var out []byte
		for i := n - 1; i >= 0; i-- {
			q := reqs[i]
			out = append(out, q[0], q[1], 0, 0, 0, 5, q[6], q[7], 2)
			out = append(out, q[6], q[9]) // the register: unit id, low byte of the address
		}
		conn.Write(out)
		io.Copy(io.Discard, conn)
	}()
	c := modbus.NewTCPClient(ln.Addr().String(), 5*time.Second)
	defer c.Close()
	reqs := make([]modbus.Request, n)
	for i := range reqs {
		reqs[i] = inputs(uint8(i+1), uint16(10*i), 1)
	}
	for i, r := range readBatch(t, c, 5*time.Second, reqs...) {
		want := uint16(i+1)<<8 | uint16(10*i)
		if r.err != nil || r.regs[0] != want {
			t.Errorf("request %d: %04X, %v; want %04X", i, r.regs, r.err, want)
		}
	}
}

// A batch against an independent Modbus implementation (Debian's
// python3-pymodbus): several reads of one unit in flight together, each
// answer where it belongs, an exception for an absent address among them.
func TestReadBatchAgainstPymodbus(t *testing.T) {
	addr := modbustest.StartPymodbus(t, pymodbusUnit7...)
	c := modbus.NewTCPClient(addr, 5*time.Second)
	defer c.Close()
	hold := func(a, q uint16) modbus.Request {
		return modbus.Request{Unit: 7, Table: modbus.HoldingRegisters, Address: a, Quantity: q}
	}
	reqs := []modbus.Request{inputs(7, 100, 5), hold(0, 2), inputs(7, 104, 2), hold(2, 4), inputs(7, 102, 1), hold(4, 2)}
	want := []string{"[42F6 E979 FF85 0001 0002]", "[E979 42F6]", "", "[F642 79E9 79E9 F642]", "[FF85]", "[79E9 F642]"}
	for round := range 3 { // and again, on the same connection
		res := readBatch(t, c, 5*time.Second, reqs...)
		for i, r := range res {
			if want[i] == "" {
				var exc *modbus.ExceptionError
				if !errors.As(r.err, &exc) || exc.Code != 0x02 {
					t.Errorf("round %d, %v: err = %v, want exception 02", round, reqs[i], r.err)
				}
				continue
			}
			if got := fmt.Sprintf("%04X", r.regs); r.err != nil || got != want[i] {
				t.Errorf("round %d, %v = %s, %v; want %s", round, reqs[i], got, r.err, want[i])
			}
		}
	}
}

// The MBAP header of every request of a batch is well formed and
// numbered apart: checked on the bytes as they arrive at a listener.
func TestReadBatchRequestFrames(t *testing.T) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	got := make(chan []byte, 1)
	go func() {
		conn, err := ln.Accept()
		if err != nil {
			return
		}
		defer conn.Close()
		b := make([]byte, 3*12)
		io.ReadFull(conn, b)
		got <- b
	}()
	c := modbus.NewTCPClient(ln.Addr().String(), 200*time.Millisecond)
	defer c.Close()
	readBatch(t, c, 5*time.Second, inputs(1, 0, 2), inputs(2, 0x1234, 125), modbus.Request{Unit: 3, Table: modbus.HoldingRegisters, Address: 7, Quantity: 1})
	b := <-got
	ids := map[uint16]bool{}
	for i, want := range [][]byte{{0, 0, 0, 6, 1, 4, 0, 0, 0, 2}, {0, 0, 0, 6, 2, 4, 0x12, 0x34, 0, 125}, {0, 0, 0, 6, 3, 3, 0, 7, 0, 1}} {
		adu := b[12*i : 12*i+12]
		if fmt.Sprint(adu[2:]) != fmt.Sprint(want) {
			t.Errorf("request %d = % x, want transaction id then % x", i, adu, want)
		}
		ids[binary.BigEndian.Uint16(adu)] = true
	}
	if len(ids) != 3 {
		t.Errorf("transaction ids not distinct: % x", b)
	}
}

// fuzzConn is a connection whose peer answered with fixed bytes: writes
// are taken whole, reads return the bytes (a few at a time, to split
// answers anywhere) and then EOF.
type fuzzConn struct {
	net.Conn // nil: only the methods below are used
	in       []byte
	step     int
}

func (c *fuzzConn) Write(b []byte) (int, error) { return len(b), nil }
func (c *fuzzConn) Read(b []byte) (int, error) {
	if len(c.in) == 0 {
		return 0, io.EOF
	}
	n := copy(b[:min(len(b), c.step)], c.in)
	c.in = c.in[n:]
	return n, nil
}
func (c *fuzzConn) Close() error                     { return nil }
func (c *fuzzConn) SetDeadline(time.Time) error      { return nil }
func (c *fuzzConn) SetReadDeadline(time.Time) error  { return nil }
func (c *fuzzConn) SetWriteDeadline(time.Time) error { return nil }

// Whatever bytes come back, ReadBatch hands out one result per request,
// registers only in the quantity asked for, and never panics. The seeds
// are well-formed answers to the batch (transaction ids 1 to 3, as a new
// client numbers them), one of them an exception.
func FuzzReadBatch(f *testing.F) {
	answer := func(tid uint16, unit byte, pdu ...byte) []byte {
		return append([]byte{byte(tid >> 8), byte(tid), 0, 0, 0, byte(1 + len(pdu)), unit}, pdu...)
	}
	good := slices.Concat(answer(1, 1, 4, 4, 0, 1, 0, 2), answer(3, 3, 3, 2, 0, 9), answer(2, 2, 0x84, 2))
	f.Add(good, uint8(1))
	f.Add(good, uint8(200))
	f.Add(good[:20], uint8(7))
	f.Add(append(good, 0xde, 0xad), uint8(64))
	reqs := []modbus.Request{inputs(1, 0, 2), inputs(2, 5, 1), {Unit: 3, Table: modbus.HoldingRegisters, Address: 9, Quantity: 1}}
	f.Fuzz(func(t *testing.T, in []byte, step uint8) {
		conn := &fuzzConn{in: in, step: max(1, int(step))}
		c := modbus.NewClient(func(context.Context) (net.Conn, error) { return conn, nil }, "fuzz", time.Second)
		calls := make([]int, len(reqs))
		c.ReadBatch(context.Background(), reqs, func(i int, regs []uint16, err error) {
			calls[i]++
			if err == nil && len(regs) != int(reqs[i].Quantity) {
				t.Fatalf("request %d: %d registers for %d asked", i, len(regs), reqs[i].Quantity)
			}
			if err != nil && regs != nil {
				t.Fatalf("request %d: registers beside error %v", i, err)
			}
		})
		for i, n := range calls {
			if n != 1 {
				t.Fatalf("request %d had %d results", i, n)
			}
		}
	})
}

// BenchmarkClientReadBatch reads 10 input registers from each of 64 units
// per batch, all in flight at once, from modbustest over loopback TCP
// (which answers one request at a time, in order); compare
// BenchmarkClientRead.
func BenchmarkClientReadBatch(b *testing.B) {
	srv := modbustest.NewServer(b)
	reqs := make([]modbus.Request, 64)
	for i := range reqs {
		srv.Set(uint8(i+1), modbus.InputRegisters, 0, make([]uint16, 10)...)
		reqs[i] = inputs(uint8(i+1), 0, 10)
	}
	c := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
	defer c.Close()
	ctx := context.Background()
	var failed error
	b.ReportAllocs()
	for b.Loop() {
		c.ReadBatch(ctx, reqs, func(_ int, _ []uint16, err error) {
			if err != nil {
				failed = err
			}
		})
		if failed != nil {
			b.Fatal(failed)
		}
	}
	b.ReportMetric(float64(b.N*len(reqs))/b.Elapsed().Seconds(), "reads/s")
}

// A server that takes one request at a time and drops whatever came with
// it (it reads what has arrived, answers the first request in it and
// discards the rest) answers the first request of each batch; the others
// time out, the connection is replaced, and no answer ever lands on
// another request.
func TestReadBatchServerThatDropsTheRest(t *testing.T) {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	go func() {
		for {
			conn, err := ln.Accept()
			if err != nil {
				return
			}
			go func() {
				defer conn.Close()
				buf := make([]byte, 4096)
				for {
					n, err := conn.Read(buf)
					if err != nil || n < 12 {
						return
					}
					q := buf[:12] // the first request; the rest of buf is dropped
					conn.Write([]byte{q[0], q[1], 0, 0, 0, 5, q[6], q[7], 2, q[6], q[9]})
				}
			}()
		}
	}()
	c := modbus.NewTCPClient(ln.Addr().String(), 100*time.Millisecond)
	defer c.Close()
	reqs := []modbus.Request{inputs(1, 1, 1), inputs(2, 2, 1), inputs(3, 3, 1)}
	for round := range 3 {
		res := readBatch(t, c, 5*time.Second, reqs...)
		if res[0].err != nil || res[0].regs[0] != 0x0101 {
			t.Errorf("round %d, first request: %v, %v", round, res[0].regs, res[0].err)
		}
		for _, r := range res[1:] {
			if modbus.Kind(r.err) != modbus.KindTimeout || r.regs != nil {
				t.Errorf("round %d: %v, %v; want a timeout", round, r.regs, r.err)
			}
		}
	}
}
