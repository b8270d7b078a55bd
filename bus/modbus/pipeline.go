package modbus

import (
	"context"
	"encoding/binary"
	"fmt"
	"io"

	gmodbus "github.com/goburrow/modbus"
)

// BatchReader is a Reader that can have several requests in flight on one
// connection at once. *Client is one: Modbus TCP pairs each answer with
// its request by the transaction identifier of the MBAP header (Modbus
// Messaging on TCP/IP Implementation Guide V1.0b, 3.1.3), so a client may
// send requests without waiting for the answers to earlier ones. A serial
// line cannot.
type BatchReader interface {
	Reader
	// ReadBatch reads every request of reqs, all in flight together, and
	// calls got once for each, on the calling goroutine, with the index of
	// the request in reqs and either its registers (valid only during the
	// call) or its error. It returns when every request has had its call.
	ReadBatch(ctx context.Context, reqs []Request, got func(i int, regs []uint16, err error))
}

// ReadBatch sends the request ADUs of reqs in one write, each with its own
// transaction identifier, and matches the answers to them by that
// identifier in whatever order they come. The checks on each answer are
// Read's: goburrow's packager verifies the MBAP header (transaction,
// protocol and unit id) and the function code, and the byte count must
// carry exactly the registers asked for.
//
// An invalid request fails at once and nothing is sent for it. An answer
// paired with its request fails that request only when it is an exception
// or does not fit (unit id, function code, register count): the framing
// around it held, so the answers after it are still sound. The client's
// timeout runs from the write and starts again at each answer, so that a
// server that answers in turn (a gateway to a serial line) has the whole
// timeout for each request, as one at a time; ctx's deadline bounds it
// all. A request without an answer by then fails with ErrTimeout; a broken
// connection, an answer that pairs with no request in flight, a length
// field out of range or bytes after the last answer fail every request
// still unanswered. After any of those the connection is closed, as after
// every failed Read, so that an answer that comes late never meets a
// later batch.
//
// Servers differ in how many requests they accept at once; the caller
// bounds len(reqs) to what the server takes.
func (c *Client) ReadBatch(ctx context.Context, reqs []Request, got func(i int, regs []uint16, err error)) {
	b := &c.batch
	b.reset(len(reqs))
	for i, r := range reqs {
		if err := r.Validate(); err != nil {
			b.answered[i] = true
			got(i, nil, fmt.Errorf("%v: %w", r, err))
			continue
		}
		c.framer.SlaveId = r.Unit
		b.pdu = binary.BigEndian.AppendUint16(binary.BigEndian.AppendUint16(b.pdu[:0], r.Address), r.Quantity)
		adu, err := c.framer.Encode(&gmodbus.ProtocolDataUnit{FunctionCode: r.Table.function(), Data: b.pdu})
		if err != nil { // goburrow's Encode fails only on an oversized PDU
			b.answered[i] = true
			got(i, nil, fmt.Errorf("%v: %w: %v", r, ErrInvalidRequest, err))
			continue
		}
		b.adus[i] = adu
		b.out = append(b.out, adu...)
		b.pending++
	}
	if b.pending == 0 {
		return
	}
	c.tr.ctx, c.tr.deadline = ctx, transactionDeadline(ctx, c.timeout)
	err := c.exchange(reqs, got)
	c.tr.ctx = nil
	if err == nil {
		return
	}
	c.tr.close()
	for i, r := range reqs {
		if !b.answered[i] {
			got(i, nil, fmt.Errorf("%v: %w", r, err))
		}
	}
}

// batch is the state of the ReadBatch in progress, kept to reuse its storage.
type batch struct {
	adus     [][]byte // per request, its ADU (nil when it was not sent)
	answered []bool
	pending  int    // requests sent and not yet answered
	pdu      []byte // the data of the request being encoded (Encode copies it)
	out      []byte // the request ADUs, back to back
	in       []byte // answers read and not yet taken
	regs     []uint16
}

func (b *batch) reset(n int) {
	if cap(b.adus) < n {
		b.adus, b.answered = make([][]byte, n), make([]bool, n)
	}
	b.adus, b.answered = b.adus[:n], b.answered[:n]
	clear(b.adus)
	clear(b.answered)
	b.pending, b.out, b.in = 0, b.out[:0], b.in[:0]
}

// exchange writes the batch's requests and hands out answers until none is
// pending. An error it returns applies to every request still unanswered.
func (c *Client) exchange(reqs []Request, got func(i int, regs []uint16, err error)) error {
	b, t := &c.batch, &c.tr
	ctx := t.context()
	conn, err := t.connect(ctx)
	if err != nil {
		return err
	}
	stop, err := t.arm(ctx, conn)
	if err != nil {
		return err
	}
	defer stop()
	if _, err := conn.Write(b.out); err != nil {
		return t.ioErr(ctx, "send requests", err)
	}
	if cap(b.in) < len(t.buf) {
		b.in = make([]byte, 0, 4*len(t.buf))
	}
	for b.pending > 0 {
		// Take every whole answer the buffer holds, then read more.
		waiting := b.pending
		for len(b.in) >= mbapHeader {
			end, err := aduLength(b.in)
			if err != nil {
				return err
			}
			if len(b.in) < end {
				break
			}
			if err := c.answer(reqs, b.in[:end], got); err != nil {
				return err
			}
			b.in = b.in[:copy(b.in, b.in[end:])]
		}
		if b.pending == 0 {
			break
		}
		if b.pending < waiting {
			// A server that answers in turn starts on the next request
			// only now: the timeout starts again. (Cancelling ctx sets a
			// deadline in the past: look at ctx after setting this one.)
			if err := conn.SetDeadline(transactionDeadline(ctx, c.timeout)); err != nil {
				return fmt.Errorf("%w: set deadline: %v", ErrConnection, err)
			}
			if err := ctx.Err(); err != nil {
				return t.contextErr(ctx, err)
			}
		}
		if len(b.in) == cap(b.in) {
			b.in = append(b.in, 0)[:len(b.in)] // room for at least the rest of one answer
		}
		n, err := conn.Read(b.in[len(b.in):cap(b.in)])
		b.in = b.in[:len(b.in)+n]
		if err != nil && n == 0 {
			if err == io.EOF {
				err = io.ErrUnexpectedEOF
			}
			return t.ioErr(ctx, "read responses", err)
		}
	}
	if len(b.in) > 0 {
		return fmt.Errorf("%w: %d bytes after the last response", ErrMalformed, len(b.in))
	}
	return nil
}

// answer pairs one response ADU with its request by transaction id and
// hands out its registers or its error. A response that pairs with no
// request in flight is an error for the whole batch.
func (c *Client) answer(reqs []Request, adu []byte, got func(i int, regs []uint16, err error)) error {
	b := &c.batch
	tid := binary.BigEndian.Uint16(adu[0:2])
	i := -1
	for k, req := range b.adus {
		if req != nil && !b.answered[k] && binary.BigEndian.Uint16(req[0:2]) == tid {
			i = k
			break
		}
	}
	if i < 0 {
		return fmt.Errorf("%w: answer with transaction id %d, which no request in flight has", ErrMalformed, tid)
	}
	r := reqs[i]
	b.answered[i] = true
	b.pending--
	regs, err := c.registers(r, b.adus[i], adu)
	if err != nil {
		err = fmt.Errorf("%v: %w", r, err)
	}
	got(i, regs, err)
	return nil
}

// registers checks one response ADU against its request ADU as goburrow's
// client does (packager Verify and Decode, function code or exception,
// byte count) and, further, that it carries exactly the registers asked
// for; then decodes them into the batch's scratch.
func (c *Client) registers(r Request, req, resp []byte) ([]uint16, error) {
	fn := r.Table.function()
	if err := c.framer.Verify(req, resp); err != nil {
		return nil, classify(err, fn)
	}
	pdu, err := c.framer.Decode(resp)
	if err != nil {
		return nil, classify(err, fn)
	}
	if pdu.FunctionCode != fn {
		mbe := &gmodbus.ModbusError{FunctionCode: pdu.FunctionCode}
		if len(pdu.Data) > 0 {
			mbe.ExceptionCode = pdu.Data[0]
		}
		return nil, classify(mbe, fn)
	}
	if len(pdu.Data) == 0 || int(pdu.Data[0]) != len(pdu.Data)-1 {
		return nil, fmt.Errorf("%w: byte count does not match the answer's length", ErrMalformed)
	}
	regs, err := decodeRegisters(r, pdu.Data[1:], c.batch.regs)
	if err == nil {
		c.batch.regs = regs[:cap(regs)]
	}
	return regs, err
}
