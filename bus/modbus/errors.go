package modbus

import (
	"context"
	"errors"
	"fmt"
	"net"
	"os"
)

// Sentinel errors, wrapped with %w by Client.Read; test with errors.Is.
var (
	// ErrTimeout: no complete answer before the deadline.
	ErrTimeout = errors.New("modbus: timeout")
	// ErrShortResponse: a well-formed answer carrying a different number of
	// registers than asked for.
	ErrShortResponse = errors.New("modbus: response length does not match the quantity asked")
	// ErrConnection: the connection could not be made or broke.
	ErrConnection = errors.New("modbus: connection failed")
	// ErrMalformed: an answer that does not fit the request (transaction,
	// protocol or unit id, function code, byte count, frame length).
	ErrMalformed = errors.New("modbus: malformed response")
	// ErrInvalidRequest: a Request no device could answer (quantity outside
	// 1..125, unknown table, addresses past 65535, on a serial line a unit
	// outside 1..247); nothing was sent.
	ErrInvalidRequest = errors.New("modbus: invalid request")
	// ErrFrame: on a serial line, a reply frame that is damaged: its CRC does
	// not match, it stops short (silence before its last byte), or its
	// header cannot begin an answer to a read (an odd or impossible byte
	// count, a function code that is neither the request's nor its
	// exception). Line noise causes these; a Line retries the transaction
	// once at once.
	ErrFrame = errors.New("modbus: damaged frame")
)

// ExceptionError is a Modbus exception response: the device understood the
// request and refused it. Client.Read returns it as *ExceptionError (wrapped);
// find it with errors.As.
type ExceptionError struct {
	Function byte // function code of the request (without the 0x80 exception bit)
	Code     byte // exception code
}

// exceptionNames from Modbus Application Protocol V1.1b3, 7 "MODBUS Exception Responses".
var exceptionNames = map[byte]string{
	0x01: "illegal function",
	0x02: "illegal data address",
	0x03: "illegal data value",
	0x04: "server device failure",
	0x05: "acknowledge",
	0x06: "server device busy",
	0x08: "memory parity error",
	0x0A: "gateway path unavailable",
	0x0B: "gateway target device failed to respond",
}

func (e *ExceptionError) Error() string {
	name, ok := exceptionNames[e.Code]
	if !ok {
		name = "unknown"
	}
	return fmt.Sprintf("modbus exception 0x%02x (%s) on function 0x%02x", e.Code, name, e.Function)
}

// ErrorKind classifies a read error for counters, quality codes and logs.
type ErrorKind uint8

const (
	KindNone       ErrorKind = iota // no error
	KindTimeout                     // no answer in time
	KindException                   // the device answered with a Modbus exception
	KindConnection                  // connecting failed or the connection broke
	KindMalformed                   // an answer that does not fit the request, or an invalid request
	KindFrame                       // a damaged serial frame: CRC mismatch, truncated or garbled
)

// kindCount is the number of ErrorKind values.
const kindCount = int(KindFrame) + 1

var kindNames = [...]string{
	KindNone:       "none",
	KindTimeout:    "timeout",
	KindException:  "exception",
	KindConnection: "connection",
	KindMalformed:  "malformed",
	KindFrame:      "frame",
}

func (k ErrorKind) String() string { return nameOf(uint8(k), kindNames[:], "ErrorKind") }

// Kind classifies err. Errors wrapping the package's sentinels or an
// *ExceptionError map to their kinds; context.DeadlineExceeded and network
// timeouts are timeouts; any other non-nil error (a Reader's own failure of
// unknown cause, context.Canceled) counts as a connection failure.
func Kind(err error) ErrorKind {
	var exc *ExceptionError
	var ne net.Error
	switch {
	case err == nil:
		return KindNone
	case errors.As(err, &exc):
		return KindException
	case errors.Is(err, ErrFrame):
		return KindFrame
	case errors.Is(err, ErrTimeout), errors.Is(err, context.DeadlineExceeded), errors.Is(err, os.ErrDeadlineExceeded):
		return KindTimeout
	case errors.Is(err, ErrShortResponse), errors.Is(err, ErrMalformed), errors.Is(err, ErrInvalidRequest):
		return KindMalformed
	case errors.Is(err, ErrConnection):
		return KindConnection
	case errors.As(err, &ne) && ne.Timeout():
		return KindTimeout
	}
	return KindConnection
}
