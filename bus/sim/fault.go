package sim

import (
	"fmt"
	"time"
)

// FaultKind is how a simulated head misbehaves while one of its Faults is
// active. The zero value is no kind at all, so a Fault left unset is refused
// rather than taken as a silent head.
type FaultKind uint8

const (
	// Silent: the head does not answer (a dead or disconnected head).
	Silent FaultKind = iota + 1
	// Late: the head answers correctly, Fault.Delay later than it would.
	Late
	// CRCError: the head answers with a corrupted CRC. Modbus RTU only: a TCP
	// frame carries no CRC, so NewServer refuses this kind.
	CRCError
	// Exception: the head answers with Modbus exception Fault.Code.
	Exception
	// Truncated: the answer breaks off half way: on RTU only the first half of
	// the frame is sent; on TCP the first half is sent and the connection is
	// closed.
	Truncated
)

var faultKindNames = [...]string{Silent: "silent", Late: "late", CRCError: "crc", Exception: "exception", Truncated: "truncated"}

// String returns "silent", "late", "crc", "exception" or "truncated".
func (k FaultKind) String() string {
	if int(k) < len(faultKindNames) && faultKindNames[k] != "" {
		return faultKindNames[k]
	}
	return fmt.Sprintf("FaultKind(%d)", uint8(k))
}

// ParseFaultKind parses the names String returns.
func ParseFaultKind(s string) (FaultKind, error) {
	for i, n := range faultKindNames {
		if n != "" && n == s {
			return FaultKind(i), nil
		}
	}
	return 0, fmt.Errorf("unknown fault kind %q (want silent, late, crc, exception or truncated)", s)
}

// ExceptionCodes are the exception codes a Fault of kind Exception may answer
// with (Modbus Application Protocol V1.1b3, section 7): illegal function,
// illegal data address, illegal data value, server device failure, server
// device busy, gateway path unavailable, gateway target device failed to
// respond.
var ExceptionCodes = []byte{0x01, 0x02, 0x03, 0x04, 0x06, 0x0A, 0x0B}

// Fault is a scripted misbehaviour of a head. It is active in a window of
// scenario time (elapsed since the server started):
//
//	At ≤ elapsed < At + For                  (Period 0: once)
//	At ≤ elapsed, (elapsed − At) mod Period < For   (Period > 0: repeating)
//
// with For 0 meaning "to the end of the scenario" (only without a Period).
// Within its windows the fault hits every Every-th request addressed to the
// head (the Every-th, 2·Every-th, … counted over all windows of this fault);
// Every 0 or 1 hits all of them. When several faults of a head hit the same
// request, the first in the head's list applies.
type Fault struct {
	Kind   FaultKind
	Code   byte          // exception code of an Exception fault; one of ExceptionCodes
	Delay  time.Duration // extra answer delay of a Late fault, > 0
	At     time.Duration // window start from the scenario start, ≥ 0
	For    time.Duration // window length; 0 = to the end (only when Period is 0)
	Period time.Duration // the window repeats every Period; 0 = once
	Every  int           // hit only every n-th request within the window; 0 or 1 = all
}

// Validate reports the first thing wrong with the fault, naming the field.
// It checks what holds on every transport; NewServer also refuses CRCError,
// which Modbus TCP cannot carry.
func (f Fault) Validate() error {
	switch f.Kind {
	case Silent, Late, CRCError, Exception, Truncated:
	default:
		return fmt.Errorf("kind: unknown fault kind %d", uint8(f.Kind))
	}
	if f.Kind == Exception {
		ok := false
		for _, c := range ExceptionCodes {
			ok = ok || c == f.Code
		}
		if !ok {
			return fmt.Errorf("code: exception code 0x%02X is not one of 01, 02, 03, 04, 06, 0A, 0B", f.Code)
		}
	} else if f.Code != 0 {
		return fmt.Errorf("code: 0x%02X given for a %s fault (only exception faults have a code)", f.Code, f.Kind)
	}
	if f.Kind == Late {
		if f.Delay <= 0 {
			return fmt.Errorf("delay: %v, want a late fault's delay above 0", f.Delay)
		}
	} else if f.Delay != 0 {
		return fmt.Errorf("delay: %v given for a %s fault (only late faults have a delay)", f.Delay, f.Kind)
	}
	if f.Every < 0 {
		return fmt.Errorf("every: %d, want 0 or more", f.Every)
	}
	return validateWindow(f.At, f.For, f.Period)
}

// validateWindow checks a window of scenario time as Fault and BitEpisode
// describe it.
func validateWindow(at, length, period time.Duration) error {
	switch {
	case at < 0:
		return fmt.Errorf("at: %v is negative", at)
	case length < 0:
		return fmt.Errorf("for: %v is negative", length)
	case period < 0:
		return fmt.Errorf("period: %v is negative", period)
	case period > 0 && length == 0:
		return fmt.Errorf("period: %v repeats a window that never ends (for is 0); give for a length up to the period", period)
	case period > 0 && length > period:
		return fmt.Errorf("for: %v is longer than the period %v", length, period)
	}
	return nil
}

// inWindow reports whether elapsed lies in the window that starts at at, lasts
// length (0: for ever) and repeats every period (0: never).
func inWindow(at, length, period, elapsed time.Duration) bool {
	if elapsed < at {
		return false
	}
	u := elapsed - at
	if period > 0 {
		u %= period
	}
	return length == 0 || u < length
}

// faultState is the serving state of one Fault: how many requests fell in its
// windows, and whether the last request did (to log window changes).
type faultState struct {
	seen   uint64
	active bool
}

// hit is the fault, if any, that applies to one request.
type hit struct {
	kind  FaultKind // 0: no fault, answer normally
	code  byte
	delay time.Duration
}
