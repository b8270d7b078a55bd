// Package modbus is glowgate's field bus: register maps and word orders
// (Field) and their coalescing into read blocks (Coalesce), a Modbus TCP
// client (Client) and a Modbus RTU client for serial lines (RTUClient), each
// with the known traps of its underlying library handled, and the owner
// goroutine that polls every head on one endpoint (Line).
package modbus

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"net"
	"os"
	"time"

	gmodbus "github.com/goburrow/modbus"
)

// Request asks for Quantity consecutive registers starting at Address from
// one table of one unit.
type Request struct {
	Unit     uint8
	Table    Table
	Address  uint16
	Quantity uint16 // 1..125 (Modbus Application Protocol V1.1b3, 6.3/6.4)
}

// MaxQuantity is the most registers one read may ask for (Modbus Application
// Protocol V1.1b3, 6.3 and 6.4: 1 to 125, 0x7D).
const MaxQuantity = 125

// Validate reports a request no device could answer.
func (r Request) Validate() error {
	switch {
	case r.Table != InputRegisters && r.Table != HoldingRegisters:
		return fmt.Errorf("%w: unknown register table %v", ErrInvalidRequest, r.Table)
	case r.Quantity < 1 || r.Quantity > MaxQuantity:
		return fmt.Errorf("%w: quantity %d outside 1..%d", ErrInvalidRequest, r.Quantity, MaxQuantity)
	case int(r.Address)+int(r.Quantity) > 1<<16:
		return fmt.Errorf("%w: registers %d..%d reach beyond address 65535",
			ErrInvalidRequest, r.Address, int(r.Address)+int(r.Quantity)-1)
	}
	return nil
}

// String describes the request as an operation, for error messages and logs:
// "read input registers unit=3 addr=100 qty=4".
func (r Request) String() string {
	return fmt.Sprintf("read %v registers unit=%d addr=%d qty=%d", r.Table, r.Unit, r.Address, r.Quantity)
}

// DialFunc opens a connection to a Modbus TCP server; the context carries the
// connect deadline.
type DialFunc func(ctx context.Context) (net.Conn, error)

// Client is a Modbus TCP client. It uses goburrow/modbus's TCP handler to
// frame requests and check answers (MBAP header, transaction, protocol and unit
// id, function code, byte count) and its own transport to move the bytes, so
// that the library's traps are handled (LIBRARIES.md, goburrow/modbus):
//
//   - after ANY error the connection is closed, so a reply that arrives late
//     can never be taken as the answer to a later request (goburrow issues
//     #64 and #103: a late reply leaves the connection one frame behind);
//     a broken connection is likewise dropped and the next Read reconnects;
//   - the answer must carry exactly 2·Quantity bytes of registers, else
//     ErrShortResponse (the library never checks it);
//   - each Read's deadline is the earlier of the configured timeout and the
//     context's deadline, and cancelling the context interrupts the Read;
//   - no idle-close timer runs behind the owner's back.
//
// Read has one request in flight at a time; ReadBatch has several, paired
// with their answers by transaction id. A Client is owned by one
// goroutine: it is not safe for concurrent use.
type Client struct {
	timeout time.Duration
	framer  *gmodbus.TCPClientHandler // used as packager only: its transport never connects
	mb      gmodbus.Client
	tr      transport
	regs    []uint16
	batch   batch // ReadBatch's storage
}

// NewTCPClient returns a client for the Modbus TCP server at address
// ("host:port"). timeout bounds each Read, connecting included; zero or less
// leaves only the context's deadline. No connection is made until the first
// Read.
func NewTCPClient(address string, timeout time.Duration) *Client {
	var d net.Dialer
	return NewClient(func(ctx context.Context) (net.Conn, error) {
		return d.DialContext(ctx, "tcp", address)
	}, address, timeout)
}

// NewClient is NewTCPClient with the connection made by dial, for example
// one end of a net.Pipe served by modbustest. name names the peer in errors.
func NewClient(dial DialFunc, name string, timeout time.Duration) *Client {
	c := &Client{timeout: timeout, framer: gmodbus.NewTCPClientHandler(name)}
	c.framer.IdleTimeout = 0
	c.tr.dial = dial
	c.tr.name = name
	c.mb = gmodbus.NewClient2(c.framer, &c.tr)
	return c
}

// Read reads the registers r asks for. The returned slice is valid until the
// next Read or Close. Errors wrap ErrTimeout, ErrConnection, ErrShortResponse,
// ErrMalformed, ErrInvalidRequest or an *ExceptionError (see Kind); after any
// error but an invalid request the connection is closed and the next Read
// connects anew.
func (c *Client) Read(ctx context.Context, r Request) ([]uint16, error) {
	if err := r.Validate(); err != nil {
		return nil, fmt.Errorf("%v: %w", r, err)
	}
	c.framer.SlaveId = r.Unit
	c.tr.ctx, c.tr.deadline = ctx, transactionDeadline(ctx, c.timeout)
	regs, err := readRegisters(c.mb, r, c.regs)
	c.tr.ctx = nil
	if err != nil {
		c.tr.close()
		return nil, err
	}
	c.regs = regs[:cap(regs)]
	return regs, nil
}

// transactionDeadline is the one deadline of a transaction: the earlier of
// now + timeout (none when timeout ≤ 0) and ctx's deadline.
func transactionDeadline(ctx context.Context, timeout time.Duration) time.Time {
	deadline := time.Time{}
	if timeout > 0 {
		deadline = time.Now().Add(timeout)
	}
	if d, ok := ctx.Deadline(); ok && (deadline.IsZero() || d.Before(deadline)) {
		deadline = d
	}
	return deadline
}

// readRegisters runs r through a goburrow client (which frames, sends and
// checks transaction, unit and function) and checks what goburrow does
// not: that the answer holds exactly the registers asked for. It decodes
// them into buf's storage (grown to MaxQuantity when short). Errors are
// classified (see Kind) and name the request.
func readRegisters(mb gmodbus.Client, r Request, buf []uint16) ([]uint16, error) {
	var b []byte
	var err error
	if r.Table == HoldingRegisters {
		b, err = mb.ReadHoldingRegisters(r.Address, r.Quantity)
	} else {
		b, err = mb.ReadInputRegisters(r.Address, r.Quantity)
	}
	var regs []uint16
	if err == nil {
		regs, err = decodeRegisters(r, b, buf)
	}
	if err != nil {
		return nil, fmt.Errorf("%v: %w", r, classify(err, r.Table.function()))
	}
	return regs, nil
}

// decodeRegisters checks that data (an answer's register bytes) holds
// exactly the registers r asked for, ErrShortResponse if not, and decodes
// them into buf's storage (grown to MaxQuantity when short).
func decodeRegisters(r Request, data []byte, buf []uint16) ([]uint16, error) {
	if len(data) != 2*int(r.Quantity) {
		return nil, fmt.Errorf("%w: %d registers for %d asked", ErrShortResponse, len(data)/2, r.Quantity)
	}
	if cap(buf) < int(r.Quantity) {
		buf = make([]uint16, MaxQuantity)
	}
	regs := buf[:r.Quantity]
	for i := range regs {
		regs[i] = binary.BigEndian.Uint16(data[2*i:])
	}
	return regs, nil
}

// Close closes the connection, if any. A later Read connects again.
func (c *Client) Close() error {
	return c.tr.close()
}

// classify turns an error from the goburrow client into one wrapping the
// package's sentinels or an *ExceptionError.
func classify(err error, function byte) error {
	var mbe *gmodbus.ModbusError
	switch {
	case errors.Is(err, ErrTimeout), errors.Is(err, ErrConnection), errors.Is(err, ErrMalformed), errors.Is(err, ErrFrame),
		errors.Is(err, ErrShortResponse), errors.Is(err, context.Canceled), errors.Is(err, context.DeadlineExceeded):
		return err
	case errors.As(err, &mbe):
		if mbe.FunctionCode == function|0x80 && mbe.ExceptionCode != 0 {
			return &ExceptionError{Function: function, Code: mbe.ExceptionCode}
		}
		return fmt.Errorf("%w: function code 0x%02x in answer to 0x%02x", ErrMalformed, mbe.FunctionCode, function)
	}
	// Transaction/protocol/unit id mismatch, byte count mismatch, empty PDU.
	return fmt.Errorf("%w: %v", ErrMalformed, err)
}

// MBAP header and ADU limits (Modbus Messaging on TCP/IP Implementation Guide
// V1.0b, 3.1.3): 7-byte header whose length field counts the unit id and the
// PDU; the PDU is at most 253 bytes.
const (
	mbapHeader   = 7
	maxMBAPField = 1 + 253
)

// aLongTimeAgo is a deadline in the past, set to wake a blocked read or write.
var aLongTimeAgo = time.Unix(1, 0)

// transport implements goburrow's Transporter with one connection, the
// deadline and context of the Read in progress, and exact-length reads.
type transport struct {
	dial     DialFunc
	name     string
	conn     net.Conn
	ctx      context.Context
	deadline time.Time
	buf      [mbapHeader + 253]byte
}

// Send writes one request ADU and reads one response ADU of the length its
// header gives. The returned slice is valid until the next Send.
func (t *transport) Send(req []byte) ([]byte, error) {
	ctx := t.context()
	conn, err := t.connect(ctx)
	if err != nil {
		return nil, err
	}
	stop, err := t.arm(ctx, conn)
	if err != nil {
		return nil, err
	}
	defer stop()
	if _, err := conn.Write(req); err != nil {
		return nil, t.ioErr(ctx, "send request", err)
	}
	// One read takes the whole answer when it has arrived, as it nearly
	// always has: the header, then the rest if it came apart. Only one
	// request is outstanding, so bytes past the answer are an error.
	got, err := io.ReadAtLeast(conn, t.buf[:], mbapHeader)
	if err != nil {
		return nil, t.ioErr(ctx, "read response header", err)
	}
	end, err := aduLength(t.buf[:got])
	if err != nil {
		return nil, err
	}
	if got > end {
		return nil, fmt.Errorf("%w: %d bytes after a response of %d", ErrMalformed, got-end, end)
	}
	if _, err := io.ReadFull(conn, t.buf[got:end]); err != nil {
		return nil, t.ioErr(ctx, "read response body", err)
	}
	return t.buf[:end], nil
}

// aduLength is the length of the response ADU whose MBAP header begins b
// (at least mbapHeader bytes), from the header's length field.
func aduLength(b []byte) (int, error) {
	n := int(binary.BigEndian.Uint16(b[4:6]))
	if n < 2 || n > maxMBAPField {
		return 0, fmt.Errorf("%w: MBAP length field %d outside 2..%d", ErrMalformed, n, maxMBAPField)
	}
	return mbapHeader - 1 + n, nil
}

// context is the context of the transaction in progress, Background when
// none was set.
func (t *transport) context() context.Context {
	if t.ctx == nil {
		return context.Background()
	}
	return t.ctx
}

// connect returns the connection, dialling it first when there is none,
// within the transaction's deadline.
func (t *transport) connect(ctx context.Context) (net.Conn, error) {
	if err := ctx.Err(); err != nil {
		return nil, t.contextErr(ctx, err)
	}
	if t.conn != nil {
		return t.conn, nil
	}
	dctx := ctx
	if !t.deadline.IsZero() {
		var cancel context.CancelFunc
		dctx, cancel = context.WithDeadline(ctx, t.deadline)
		defer cancel()
	}
	conn, err := t.dial(dctx)
	if err != nil {
		if ctx.Err() != nil {
			return nil, t.contextErr(ctx, ctx.Err())
		}
		return nil, fmt.Errorf("%w: connect to %s: %v", ErrConnection, t.name, err)
	}
	t.conn = conn
	return conn, nil
}

// arm sets the transaction's deadline on conn and has cancelling ctx
// interrupt its reads and writes until stop is called.
func (t *transport) arm(ctx context.Context, conn net.Conn) (stop func() bool, err error) {
	if err := conn.SetDeadline(t.deadline); err != nil {
		return nil, fmt.Errorf("%w: set deadline: %v", ErrConnection, err)
	}
	if ctx.Done() == nil {
		return func() bool { return false }, nil
	}
	return context.AfterFunc(ctx, func() { conn.SetDeadline(aLongTimeAgo) }), nil
}

func (t *transport) contextErr(ctx context.Context, err error) error {
	if errors.Is(err, context.DeadlineExceeded) {
		return fmt.Errorf("%w: %v", ErrTimeout, context.Cause(ctx))
	}
	return err
}

func (t *transport) ioErr(ctx context.Context, op string, err error) error {
	if ctx.Err() != nil {
		return t.contextErr(ctx, ctx.Err())
	}
	var ne net.Error
	if errors.Is(err, os.ErrDeadlineExceeded) || (errors.As(err, &ne) && ne.Timeout()) {
		return fmt.Errorf("%w: %s: %s: no answer before the deadline", ErrTimeout, t.name, op)
	}
	if errors.Is(err, io.EOF) || errors.Is(err, io.ErrUnexpectedEOF) {
		return fmt.Errorf("%w: %s: %s: connection closed by peer", ErrConnection, t.name, op)
	}
	return fmt.Errorf("%w: %s: %s: %v", ErrConnection, t.name, op, err)
}

func (t *transport) close() error {
	if t.conn == nil {
		return nil
	}
	err := t.conn.Close()
	t.conn = nil
	return err
}
