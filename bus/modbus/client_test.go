package modbus_test

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"testing"
	"testing/synctest"
	"time"

	gmodbus "github.com/goburrow/modbus"

	"glowgate/bus/modbus"
	"glowgate/bus/modbus/modbustest"
)

func read(t *testing.T, c *modbus.Client, r modbus.Request, timeout time.Duration) ([]uint16, error) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), timeout)
	defer cancel()
	return c.Read(ctx, r)
}

// waitFor waits for a value on ch, failing the test after 20 s.
func waitFor(t *testing.T, ch <-chan struct{}, what string) {
	t.Helper()
	timer := time.NewTimer(20 * time.Second)
	defer timer.Stop()
	select {
	case <-ch:
	case <-timer.C:
		t.Fatalf("gave up waiting for %s", what)
	}
}

func TestClientReadsBothTables(t *testing.T) {
	srv := modbustest.NewServer(t)
	srv.Set(3, modbus.InputRegisters, 100, 0x42F6, 0xE979, 0xFF85)
	srv.Set(3, modbus.HoldingRegisters, 100, 1, 2)
	c := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
	defer c.Close()

	got, err := read(t, c, modbus.Request{Unit: 3, Table: modbus.InputRegisters, Address: 100, Quantity: 3}, 5*time.Second)
	if err != nil || fmt.Sprint(got) != fmt.Sprint([]uint16{0x42F6, 0xE979, 0xFF85}) {
		t.Fatalf("input registers = %04X, %v", got, err)
	}
	got, err = read(t, c, modbus.Request{Unit: 3, Table: modbus.HoldingRegisters, Address: 100, Quantity: 2}, 5*time.Second)
	if err != nil || fmt.Sprint(got) != "[1 2]" {
		t.Fatalf("holding registers = %v, %v", got, err)
	}
	if n := srv.Connections(); n != 1 {
		t.Errorf("connections = %d, want 1 (reused)", n)
	}
}

func TestClientExceptionIsTyped(t *testing.T) {
	srv := modbustest.NewServer(t)
	srv.Set(1, modbus.InputRegisters, 0, 5)
	c := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
	defer c.Close()

	// Register 1 was never set: the server answers exception 02.
	_, err := read(t, c, modbus.Request{Unit: 1, Table: modbus.InputRegisters, Address: 0, Quantity: 2}, 5*time.Second)
	var exc *modbus.ExceptionError
	if !errors.As(err, &exc) || exc.Function != 0x04 || exc.Code != 0x02 {
		t.Fatalf("err = %v, want *ExceptionError{04, 02}", err)
	}
	if got, want := exc.Error(), "modbus exception 0x02 (illegal data address) on function 0x04"; got != want {
		t.Errorf("Error() = %q, want %q", got, want)
	}
	if k := modbus.Kind(err); k != modbus.KindException {
		t.Errorf("Kind = %v, want exception", k)
	}
	if want := "read input registers unit=1 addr=0 qty=2: modbus exception 0x02"; !strings.HasPrefix(err.Error(), want) {
		t.Errorf("err = %q, want prefix %q", err, want)
	}

	srv.SetFault(1, modbustest.Fault{Kind: modbustest.Exception, Code: 0x06, Times: 1})
	_, err = read(t, c, modbus.Request{Unit: 1, Table: modbus.HoldingRegisters, Address: 0, Quantity: 1}, 5*time.Second)
	if !errors.As(err, &exc) || exc.Function != 0x03 || exc.Code != 0x06 {
		t.Fatalf("err = %v, want *ExceptionError{03, 06}", err)
	}
	// Unknown unit: the gateway-style answer 0B.
	_, err = read(t, c, modbus.Request{Unit: 9, Table: modbus.InputRegisters, Address: 0, Quantity: 1}, 5*time.Second)
	if !errors.As(err, &exc) || exc.Code != 0x0B {
		t.Fatalf("err = %v, want exception 0B", err)
	}
	got, err := read(t, c, modbus.Request{Unit: 1, Table: modbus.InputRegisters, Address: 0, Quantity: 1}, 5*time.Second)
	if err != nil || got[0] != 5 {
		t.Fatalf("read after exceptions = %v, %v", got, err)
	}
}

// The answer carries one register fewer than asked, with a consistent byte
// count, so only the length check against the quantity catches it
// (LIBRARIES.md: goburrow never checks the response length).
func TestClientRejectsShortResponse(t *testing.T) {
	srv := modbustest.NewServer(t)
	srv.Set(1, modbus.InputRegisters, 0, 1, 2, 3, 4)
	srv.SetFault(1, modbustest.Fault{Kind: modbustest.Short, Times: 1})
	c := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
	defer c.Close()
	r := modbus.Request{Unit: 1, Table: modbus.InputRegisters, Address: 0, Quantity: 4}

	got, err := read(t, c, r, 5*time.Second)
	if !errors.Is(err, modbus.ErrShortResponse) || got != nil {
		t.Fatalf("read = %v, %v; want ErrShortResponse", got, err)
	}
	if k := modbus.Kind(err); k != modbus.KindMalformed {
		t.Errorf("Kind = %v, want malformed", k)
	}
	got, err = read(t, c, r, 5*time.Second)
	if err != nil || fmt.Sprint(got) != "[1 2 3 4]" {
		t.Fatalf("next read = %v, %v", got, err)
	}
}

// An answer with the wrong transaction id, or with bytes after it while
// only one request is outstanding, says the stream is out of step: the
// read fails as malformed, the connection is dropped, and the next read,
// on a new connection, succeeds.
func TestClientRejectsOutOfStepAnswers(t *testing.T) {
	for _, c := range []struct {
		fault modbustest.FaultKind
		want  string
	}{
		{modbustest.WrongTxID, "transaction id"},
		{modbustest.Trailing, "2 bytes after a response of 11"},
	} {
		t.Run(c.want, func(t *testing.T) {
			srv := modbustest.NewServer(t)
			srv.Set(1, modbus.InputRegisters, 0, 7)
			srv.SetFault(1, modbustest.Fault{Kind: c.fault, Times: 1})
			cl := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
			defer cl.Close()
			r := modbus.Request{Unit: 1, Table: modbus.InputRegisters, Address: 0, Quantity: 1}

			_, err := read(t, cl, r, 5*time.Second)
			if !errors.Is(err, modbus.ErrMalformed) || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("err = %v, want ErrMalformed about %q", err, c.want)
			}
			got, err := read(t, cl, r, 5*time.Second)
			if err != nil || got[0] != 7 {
				t.Fatalf("next read = %v, %v", got, err)
			}
			if n := srv.Connections(); n != 2 {
				t.Errorf("connections = %d, want 2 (closed after the error)", n)
			}
		})
	}
}

// The trap this package exists to avoid (LIBRARIES.md, goburrow #64/#103): a
// reply that arrives after the client gave up must not be taken as the answer
// to the next request. The server holds the first answer (value 111) for
// 300 ms; the client gives up after 100 ms; the register then changes to 222,
// the server sends the late answer, and only then does the next read, with a
// generous deadline, go out: it must give 222 and no error.
func TestClientLateReplyNeverAnswersNextRequest(t *testing.T) {
	srv := modbustest.NewServer(t)
	srv.Set(1, modbus.InputRegisters, 0, 111)
	c := modbus.NewTCPClient(srv.Addr(), 10*time.Second)
	defer c.Close()
	r := modbus.Request{Unit: 1, Table: modbus.InputRegisters, Address: 0, Quantity: 1}
	// Connect first, so that the short deadline below covers only the wait
	// for the answer.
	if _, err := read(t, c, r, 10*time.Second); err != nil {
		t.Fatal(err)
	}
	sent := make(chan struct{}, 1)
	srv.SetFault(1, modbustest.Fault{Kind: modbustest.Late, Delay: 300 * time.Millisecond, Times: 1, Handled: sent})

	_, err := read(t, c, r, 100*time.Millisecond)
	if !errors.Is(err, modbus.ErrTimeout) || modbus.Kind(err) != modbus.KindTimeout {
		t.Fatalf("read of the late answer: err = %v, want a timeout", err)
	}
	srv.Set(1, modbus.InputRegisters, 0, 222)
	waitFor(t, sent, "the late answer (111) to be written")
	for i := range 3 {
		got, err := read(t, c, r, 10*time.Second)
		if err != nil || got[0] != 222 {
			t.Fatalf("read %d after the timeout = %v, %v; want [222] <nil>", i+1, got, err)
		}
	}
}

// A control for the test above: goburrow's own TCP client, which keeps its
// connection after a timeout, does take the late reply as the next answer.
// If this ever passes without an error, the test above no longer proves
// anything.
func TestGoburrowHandlerKeepsLateReply(t *testing.T) {
	srv := modbustest.NewServer(t)
	srv.Set(1, modbus.InputRegisters, 0, 111)
	h := gmodbus.NewTCPClientHandler(srv.Addr())
	h.SlaveId = 1
	h.IdleTimeout = 0
	h.Timeout = 10 * time.Second
	defer h.Close()
	c := gmodbus.NewClient(h)
	if _, err := c.ReadInputRegisters(0, 1); err != nil {
		t.Fatal(err)
	}
	sent := make(chan struct{}, 1)
	srv.SetFault(1, modbustest.Fault{Kind: modbustest.Late, Delay: 300 * time.Millisecond, Times: 1, Handled: sent})

	h.Timeout = 100 * time.Millisecond
	if _, err := c.ReadInputRegisters(0, 1); err == nil {
		t.Fatalf("read of the late answer succeeded; want a timeout")
	}
	srv.Set(1, modbus.InputRegisters, 0, 222)
	waitFor(t, sent, "the late answer (111) to be written")
	h.Timeout = 10 * time.Second
	got, err := c.ReadInputRegisters(0, 1)
	if err == nil {
		t.Fatalf("goburrow's second read = % X, <nil>; the late reply was expected to shift it", got)
	}
	if !strings.Contains(err.Error(), "transaction id") {
		t.Errorf("goburrow's second read error = %v, want a transaction id mismatch", err)
	}
}

func TestClientRecoversBrokenConnection(t *testing.T) {
	srv := modbustest.NewServer(t)
	srv.Set(1, modbus.HoldingRegisters, 10, 42)
	c := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
	defer c.Close()
	r := modbus.Request{Unit: 1, Table: modbus.HoldingRegisters, Address: 10, Quantity: 1}

	if _, err := read(t, c, r, 5*time.Second); err != nil {
		t.Fatal(err)
	}
	// The peer drops the connection while the client is idle.
	srv.CloseConnections()
	_, err := read(t, c, r, 5*time.Second)
	if !errors.Is(err, modbus.ErrConnection) || modbus.Kind(err) != modbus.KindConnection {
		t.Fatalf("read on the dropped connection: err = %v, want ErrConnection", err)
	}
	got, err := read(t, c, r, 5*time.Second)
	if err != nil || got[0] != 42 {
		t.Fatalf("read after reconnect = %v, %v", got, err)
	}
	// The peer drops the connection instead of answering.
	srv.SetFault(1, modbustest.Fault{Kind: modbustest.Drop, Times: 1})
	if _, err := read(t, c, r, 5*time.Second); modbus.Kind(err) != modbus.KindConnection {
		t.Fatalf("dropped request: err = %v, want a connection error", err)
	}
	if got, err := read(t, c, r, 5*time.Second); err != nil || got[0] != 42 {
		t.Fatalf("read after drop = %v, %v", got, err)
	}
	if n := srv.Connections(); n != 3 {
		t.Errorf("connections = %d, want 3", n)
	}
}

func TestClientConnectionRefused(t *testing.T) {
	srv := modbustest.NewServer(t)
	addr := srv.Addr()
	srv.Close()
	c := modbus.NewTCPClient(addr, 5*time.Second)
	_, err := read(t, c, modbus.Request{Unit: 1, Quantity: 1}, 5*time.Second)
	if !errors.Is(err, modbus.ErrConnection) || !strings.Contains(err.Error(), addr) {
		t.Fatalf("err = %v, want ErrConnection naming %s", err, addr)
	}
}

func TestClientRejectsInvalidRequests(t *testing.T) {
	srv := modbustest.NewServer(t)
	c := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
	defer c.Close()
	for _, r := range []modbus.Request{
		{Unit: 1, Quantity: 0},
		{Unit: 1, Quantity: 126},
		{Unit: 1, Address: 65530, Quantity: 7},
		{Unit: 1, Table: modbus.Table(2), Quantity: 1},
	} {
		_, err := read(t, c, r, 5*time.Second)
		if !errors.Is(err, modbus.ErrInvalidRequest) || modbus.Kind(err) != modbus.KindMalformed {
			t.Errorf("%v: err = %v, want ErrInvalidRequest", r, err)
		}
	}
	if n := srv.Requests(); n != 0 {
		t.Errorf("server saw %d requests, want 0", n)
	}
}

// Deadlines, over an in-memory pipe inside a synctest bubble so that the
// fake clock measures them exactly.
func TestClientDeadlineIsEarlierOfTimeoutAndContext(t *testing.T) {
	cases := []struct {
		name          string
		timeout, ctxd time.Duration
		want          time.Duration
	}{
		{"context earlier", time.Second, 100 * time.Millisecond, 100 * time.Millisecond},
		{"timeout earlier", 100 * time.Millisecond, time.Second, 100 * time.Millisecond},
		{"no client timeout", 0, 250 * time.Millisecond, 250 * time.Millisecond},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			synctest.Test(t, func(t *testing.T) {
				srv := modbustest.NewPipeServer(t)
				srv.Set(1, modbus.InputRegisters, 0, 1)
				srv.SetFault(1, modbustest.Fault{Kind: modbustest.Silent})
				c := modbus.NewClient(srv.Dial, "pipe", tc.timeout)
				defer c.Close()
				ctx, cancel := context.WithTimeout(t.Context(), tc.ctxd)
				defer cancel()
				start := time.Now()
				_, err := c.Read(ctx, modbus.Request{Unit: 1, Quantity: 1})
				if got := time.Since(start); got != tc.want {
					t.Errorf("read gave up after %v, want %v", got, tc.want)
				}
				if modbus.Kind(err) != modbus.KindTimeout {
					t.Errorf("err = %v, want a timeout", err)
				}
			})
		})
	}
}

func TestClientCancelInterruptsRead(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		srv := modbustest.NewPipeServer(t)
		srv.Set(1, modbus.InputRegisters, 0, 1)
		srv.SetFault(1, modbustest.Fault{Kind: modbustest.Silent, Times: 1})
		c := modbus.NewClient(srv.Dial, "pipe", time.Hour)
		defer c.Close()
		ctx, cancel := context.WithCancel(t.Context())
		errc := make(chan error, 1)
		go func() {
			_, err := c.Read(ctx, modbus.Request{Unit: 1, Quantity: 1})
			errc <- err
		}()
		synctest.Wait() // the read is blocked waiting for an answer
		if srv.Requests() != 1 {
			t.Fatalf("server saw %d requests, want 1", srv.Requests())
		}
		start := time.Now()
		cancel()
		err := <-errc
		if !errors.Is(err, context.Canceled) || time.Since(start) != 0 {
			t.Fatalf("err = %v after %v, want context.Canceled at once", err, time.Since(start))
		}
		got, err := c.Read(t.Context(), modbus.Request{Unit: 1, Quantity: 1})
		if err != nil || got[0] != 1 {
			t.Fatalf("read after cancel = %v, %v", got, err)
		}
	})
}

// The late-reply trap again, on the fake clock: the server sends the late
// answer (into the connection the client dropped) before the next request,
// and the next reads get the new value.
func TestClientLateReplyOverPipe(t *testing.T) {
	synctest.Test(t, func(t *testing.T) {
		srv := modbustest.NewPipeServer(t)
		srv.Set(1, modbus.InputRegisters, 0, 111)
		sent := make(chan struct{}, 1)
		srv.SetFault(1, modbustest.Fault{Kind: modbustest.Late, Delay: time.Second, Times: 1, Handled: sent})
		c := modbus.NewClient(srv.Dial, "pipe", 100*time.Millisecond)
		defer c.Close()
		r := modbus.Request{Unit: 1, Quantity: 1}
		start := time.Now()
		if _, err := c.Read(t.Context(), r); modbus.Kind(err) != modbus.KindTimeout {
			t.Fatalf("first read err = %v, want a timeout", err)
		}
		srv.Set(1, modbus.InputRegisters, 0, 222)
		<-sent
		if d := time.Since(start); d != time.Second {
			t.Errorf("late answer sent after %v, want 1s", d)
		}
		for range 2 {
			got, err := c.Read(t.Context(), r)
			if err != nil || got[0] != 222 {
				t.Fatalf("read after the late reply = %v, %v; want [222]", got, err)
			}
		}
	})
}

func TestKind(t *testing.T) {
	cases := []struct {
		err  error
		want modbus.ErrorKind
	}{
		{nil, modbus.KindNone},
		{fmt.Errorf("x: %w", modbus.ErrTimeout), modbus.KindTimeout},
		{context.DeadlineExceeded, modbus.KindTimeout},
		{fmt.Errorf("x: %w", &modbus.ExceptionError{Function: 4, Code: 2}), modbus.KindException},
		{fmt.Errorf("x: %w", modbus.ErrShortResponse), modbus.KindMalformed},
		{modbus.ErrMalformed, modbus.KindMalformed},
		{modbus.ErrConnection, modbus.KindConnection},
		{errors.New("something else"), modbus.KindConnection},
	}
	for _, c := range cases {
		if got := modbus.Kind(c.err); got != c.want {
			t.Errorf("Kind(%v) = %v, want %v", c.err, got, c.want)
		}
	}
	for k, want := range map[modbus.ErrorKind]string{
		modbus.KindNone: "none", modbus.KindTimeout: "timeout", modbus.KindException: "exception",
		modbus.KindConnection: "connection", modbus.KindMalformed: "malformed", 9: "ErrorKind(9)",
	} {
		if got := k.String(); got != want {
			t.Errorf("ErrorKind(%d).String() = %q, want %q", k, got, want)
		}
	}
	if got := (&modbus.ExceptionError{Function: 3, Code: 0x0C}).Error(); got != "modbus exception 0x0c (unknown) on function 0x03" {
		t.Errorf("unknown code: %q", got)
	}
}

// BenchmarkClientRead reads 10 input registers per request from modbustest
// over loopback TCP.
func BenchmarkClientRead(b *testing.B) {
	srv := modbustest.NewServer(b)
	srv.Set(1, modbus.InputRegisters, 0, make([]uint16, 10)...)
	c := modbus.NewTCPClient(srv.Addr(), 5*time.Second)
	defer c.Close()
	ctx := context.Background()
	r := modbus.Request{Unit: 1, Table: modbus.InputRegisters, Address: 0, Quantity: 10}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := c.Read(ctx, r); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "reads/s")
}
