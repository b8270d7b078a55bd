package modbus

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"time"

	gmodbus "github.com/goburrow/modbus"
	// go.bug.st/serial moves the bytes rather than github.com/goburrow/serial
	// because it has what a careful RTU transport needs and the other lacks:
	// ResetInputBuffer (TCFLSH, to drop stale bytes before each request),
	// a per-Read timeout of any length (select(2), so the inter-character
	// limit can be timed to the millisecond, where termios VTIME counts
	// tenths of seconds), a Close that wakes a blocked Read, and a
	// maintained code base (goburrow/serial last changed in 2017).
	"go.bug.st/serial"
)

// SerialConfig describes one serial line (RS-485 or RS-232) carrying
// Modbus RTU. Characters are always 8 data bits (Modbus over Serial Line
// V1.02, 2.5.1: the RTU character is 8 data bits).
type SerialConfig struct {
	Device   string        // path of the serial device, e.g. /dev/ttyUSB0
	Baud     int           // bits per second, > 0
	Parity   string        // "none", "even" or "odd"
	StopBits int           // 1 or 2
	Timeout  time.Duration // bounds each transaction; zero or less leaves only the context's deadline
	Logger   *slog.Logger  // nil discards logs
}

// Validate reports a configuration no serial port can take, naming the
// setting.
func (c SerialConfig) Validate() error {
	switch {
	case c.Device == "":
		return errors.New("serial line: no device")
	case c.Baud <= 0:
		return fmt.Errorf("serial line %s: baud %d must be positive", c.Device, c.Baud)
	case c.StopBits != 1 && c.StopBits != 2:
		return fmt.Errorf("serial line %s: stop bits %d (want 1 or 2)", c.Device, c.StopBits)
	}
	if _, err := parseParity(c.Parity); err != nil {
		return fmt.Errorf("serial line %s: %w", c.Device, err)
	}
	return nil
}

func parseParity(s string) (serial.Parity, error) {
	switch s {
	case "none":
		return serial.NoParity, nil
	case "even":
		return serial.EvenParity, nil
	case "odd":
		return serial.OddParity, nil
	}
	return 0, fmt.Errorf("parity %q unknown (want \"none\", \"even\" or \"odd\")", s)
}

// Unit addresses on a serial line (Modbus over Serial Line V1.02, 2.2):
// 0 is the broadcast address, which no device answers; 1..247 are devices;
// 248..255 are reserved.
const maxSerialUnit = 247

// Frame sizes (Modbus over Serial Line V1.02, 2.5.1.1): an RTU frame is at
// most 256 bytes; an exception answer is address, function|0x80, code and
// CRC.
const (
	rtuMaxFrame      = 256
	rtuExceptionSize = 5
)

// Timing on a serial line. A character is 11 bits on the wire (start, 8
// data, parity or a second stop bit, stop; Modbus over Serial Line V1.02,
// 2.5.1). Frames are separated by at least 3.5 character times, t3.5; above
// 19200 baud the specification fixes t3.5 at 1.750 ms (2.5.1.1):
//
//	t3.5 = 3.5 · 11 bit / baud   for baud ≤ 19200   (2.005 ms at 19200)
//	t3.5 = 1.750 ms              for baud > 19200
func frameGap(baud int) time.Duration {
	if baud > 19200 {
		return 1750 * time.Microsecond
	}
	return time.Duration(3.5 * 11 * float64(time.Second) / float64(baud))
}

// charGap is the longest silence tolerated between two bytes of one reply
// before the reply is declared truncated:
//
//	max(t3.5, 20 ms)
//
// The specification's t1.5 (750 µs above 19200 baud) cannot be kept on a
// PC: the operating system hands received bytes over in bursts, and a
// USB serial adapter forwards them on its latency timer (16 ms by default
// on the common FTDI chips; from memory of their application notes), so a
// healthy reply can show a gap of some 16 ms between two of its bytes. 20 ms
// clears that; the price is that a reply which really stops short is
// reported 20 ms after its last byte instead of at once, still well inside
// any transaction timeout.
func charGap(baud int) time.Duration {
	return max(frameGap(baud), 20*time.Millisecond)
}

// settleTime is how long the client waits for a second frame after one that
// could be a late answer as well as the answer to the current request (see
// RTUClient): a device that was late with the earlier answer sends the
// current one right after it. 50 ms, or twice the inter-character limit when
// that is longer, is a judgement (common practice, no source): ample for a
// device's turnaround on a request it already holds, and paid only in that
// rare case.
func settleTime(baud int) time.Duration {
	return max(50*time.Millisecond, 2*charGap(baud))
}

// pollSlice is the longest a blocked read waits before looking at its
// context again: the latency with which cancelling a Read takes effect.
const pollSlice = 50 * time.Millisecond

// RTUClient is a Modbus RTU client on one serial line. goburrow/modbus's RTU
// handler frames each request (address, PDU, CRC) and decodes the answer;
// the bytes move through the client's own transport, which handles the traps
// of the library's serial transport (LIBRARIES.md, goburrow/modbus) and of
// serial lines generally:
//
//   - the input buffer is flushed (TCFLSH) before every request, so no byte
//     left over from an earlier exchange is read as the answer;
//   - at least t3.5 of silence precedes every request (see frameGap), and
//     the client waits no longer than that: back-to-back transactions leave
//     no idle gap beyond t3.5;
//   - the answer is read to exactly its length: after address and function
//     an exception (function|0x80) is 5 bytes, an answer to a read 5 + 2·N;
//     a silence longer than max(t3.5, 20 ms) inside it makes it truncated;
//   - address, function, byte count (= 2 × quantity) and CRC-16/MODBUS are
//     checked; a CRC mismatch or a truncated or garbled frame is ErrFrame,
//     a well-formed answer that does not fit the request ErrMalformed or
//     ErrShortResponse;
//   - one deadline covers the whole transaction: the earlier of now +
//     Timeout and the context's deadline;
//   - a device that fails to open or vanishes is ErrConnection: the port is
//     closed and the next Read opens it again ("serial device lost" and
//     "serial device reopened" are logged once per change).
//
// Late answers. RTU frames carry no transaction number, so an answer that
// arrives after its request timed out could be taken for the answer to the
// next request (goburrow/modbus's own RTU transport returns the wrong
// registers with a nil error then). Besides the flush, the client
// therefore remembers, for one Timeout, a request that timed out after it
// was sent, and in the transactions that follow:
//
//   - after any failed transaction it first waits until the line has been
//     silent for the inter-character limit, so that a frame under way is
//     not cut in two by the flush;
//   - a frame that fits the late request but not the current one (another
//     unit, function or quantity) is skipped and the answer read after it;
//   - a frame that fits both (same unit and function, and for registers the
//     same quantity at another address) is ambiguous: if a second frame
//     follows within settleTime, that is the answer and the first was the
//     late one; if none follows, the request is sent once more and that
//     answer is taken.
//
// So a reading can carry another request's registers only when a late
// answer turns up more than settleTime after the ambiguous frame, or more
// than one Timeout after its request was given up, and then lands in a
// transaction with the same unit, function and quantity: the client takes
// such answers as never coming. (A Line makes even that rarer: after a
// timeout the poll fails, and its head is read again only after its
// backoff.)
//
// An RTUClient is owned by one goroutine: it is not safe for concurrent use.
type RTUClient struct {
	cfg    SerialConfig
	cfgErr error
	framer *gmodbus.RTUClientHandler // used as packager only: its serial transport never opens
	mb     gmodbus.Client
	tr     rtuTransport
	regs   []uint16
}

// NewRTUClient returns a client for the serial line cfg describes. Nothing
// is opened until the first Read. An invalid cfg (see SerialConfig.Validate)
// makes every Read fail with ErrConnection naming the setting.
func NewRTUClient(cfg SerialConfig) *RTUClient {
	c := &RTUClient{cfg: cfg, cfgErr: cfg.Validate()}
	log := cfg.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	parity, _ := parseParity(cfg.Parity)
	stop := serial.OneStopBit
	if cfg.StopBits == 2 {
		stop = serial.TwoStopBits
	}
	c.tr = rtuTransport{
		device:  cfg.Device,
		mode:    serial.Mode{BaudRate: cfg.Baud, DataBits: 8, Parity: parity, StopBits: stop},
		log:     log.With("device", cfg.Device),
		horizon: cfg.Timeout,
	}
	if cfg.Baud > 0 {
		c.tr.gap, c.tr.charGap, c.tr.settle = frameGap(cfg.Baud), charGap(cfg.Baud), settleTime(cfg.Baud)
	}
	if c.tr.horizon <= 0 {
		c.tr.horizon = DefaultTimeout
	}
	c.framer = gmodbus.NewRTUClientHandler(cfg.Device)
	c.framer.IdleTimeout = 0
	c.mb = gmodbus.NewClient2(c.framer, &c.tr)
	return c
}

// Read reads the registers r asks for. The returned slice is valid until the
// next Read or Close. Errors wrap ErrTimeout, ErrConnection, ErrFrame,
// ErrShortResponse, ErrMalformed, ErrInvalidRequest or an *ExceptionError
// (see Kind). r.Unit must be 1..247: 0 is the broadcast address.
func (c *RTUClient) Read(ctx context.Context, r Request) ([]uint16, error) {
	if err := r.Validate(); err != nil {
		return nil, fmt.Errorf("%v: %w", r, err)
	}
	if r.Unit < 1 || r.Unit > maxSerialUnit {
		return nil, fmt.Errorf("%v: %w: unit %d outside 1..%d on a serial line (0 is the broadcast address, which no device answers)",
			r, ErrInvalidRequest, r.Unit, maxSerialUnit)
	}
	if c.cfgErr != nil {
		return nil, fmt.Errorf("%v: %w: %v", r, ErrConnection, c.cfgErr)
	}
	c.framer.SlaveId = r.Unit
	c.tr.ctx, c.tr.deadline, c.tr.req = ctx, transactionDeadline(ctx, c.cfg.Timeout), r
	regs, err := readRegisters(c.mb, r, c.regs)
	c.tr.ctx = nil
	if err != nil {
		return nil, err
	}
	c.regs = regs[:cap(regs)]
	return regs, nil
}

// Close closes the serial port, if open. A later Read opens it again.
func (c *RTUClient) Close() error {
	return c.tr.close()
}

// CRC16 is the CRC of Modbus RTU frames, CRC-16/MODBUS (Modbus over Serial
// Line V1.02, 6.2.2): reflected polynomial 0xA001, initial value 0xFFFF, no
// final XOR. On the wire the low byte goes first (AppendCRC). Check values
// (LIBRARIES.md): "123456789" gives 0x4B37; 01 03 00 00 00 0A is sent with
// C5 CD.
func CRC16(b []byte) uint16 {
	crc := uint16(0xFFFF)
	for _, x := range b {
		crc ^= uint16(x)
		for range 8 {
			if crc&1 != 0 {
				crc = crc>>1 ^ 0xA001
			} else {
				crc >>= 1
			}
		}
	}
	return crc
}

// AppendCRC appends the CRC of frame, low byte first.
func AppendCRC(frame []byte) []byte {
	crc := CRC16(frame)
	return append(frame, byte(crc), byte(crc>>8))
}

// lineState is what the transport last knew of its device, for logging
// changes only.
type lineState uint8

const (
	stateUnknown lineState = iota // never opened
	stateUp
	stateDown
)

// lateRequest is a request that timed out after it was sent: its answer may
// still come.
type lateRequest struct {
	valid bool
	at    time.Time // when it timed out
	unit  uint8
	fc    byte
	addr  uint16
	qty   uint16
}

// fits reports whether frame could be the late request's answer.
func (l *lateRequest) fits(frame []byte) bool {
	if !l.valid || frame[0] != l.unit {
		return false
	}
	return frame[1] == l.fc|0x80 || (frame[1] == l.fc && int(frame[2]) == 2*int(l.qty))
}

// ambiguous reports whether frame, which answers r, could as well be the
// late request's answer, and would then say something else: it fits the
// late request, and r is not the very same request.
func (l *lateRequest) ambiguous(frame []byte, r Request) bool {
	return l.fits(frame) && !(r.Address == l.addr && r.Quantity == l.qty)
}

// errNoFrame: no byte of a frame arrived before the time given.
var errNoFrame = errors.New("no frame")

// rtuTransport implements goburrow's Transporter on a serial port.
type rtuTransport struct {
	device string
	mode   serial.Mode
	log    *slog.Logger
	port   serial.Port
	state  lineState
	downAt time.Time

	gap     time.Duration // t3.5
	charGap time.Duration // longest silence inside a frame
	settle  time.Duration // wait for a second frame after an ambiguous one
	horizon time.Duration // how long a late answer is waited for

	// The transaction in progress, set by Read.
	ctx      context.Context
	deadline time.Time
	req      Request

	lastByte time.Time // when a byte last went out or came in
	sent     bool      // the current request went out
	dirty    bool      // a failed transaction may have left bytes on the line
	failedAt time.Time
	late     lateRequest
	timer    *time.Timer
	rx       [rtuMaxFrame]byte
	scratch  [64]byte
}

// Send writes one request ADU and returns the one answer frame that belongs
// to it, checked as the RTUClient documentation describes. The returned
// slice is valid until the next Send.
func (t *rtuTransport) Send(req []byte) ([]byte, error) {
	ctx := t.ctx
	if ctx == nil {
		ctx = context.Background()
	}
	if err := ctx.Err(); err != nil {
		return nil, t.ctxErr(ctx, err, "before sending")
	}
	t.sent = false
	if err := t.open(); err != nil {
		return nil, err
	}
	if t.late.valid && time.Since(t.late.at) > t.horizon {
		t.late.valid = false
	}
	if t.dirty {
		if _, err := t.drain(ctx, t.charGap); err != nil {
			return nil, err
		}
		t.dirty = false
	}
	for attempt := 0; ; attempt++ {
		frame, err := t.exchange(ctx, req, attempt > 0)
		if err == errAskAgain {
			continue
		}
		if err != nil {
			return nil, t.failed(ctx, err)
		}
		return frame, nil
	}
}

// errAskAgain: the answer could not be told from a late answer and nothing
// followed it; the request is sent once more.
var errAskAgain = errors.New("ask again")

// exchange sends req and reads frames until one answers it.
func (t *rtuTransport) exchange(ctx context.Context, req []byte, again bool) ([]byte, error) {
	if err := t.waitGap(ctx); err != nil {
		return nil, err
	}
	if err := t.port.ResetInputBuffer(); err != nil {
		return nil, t.lost("flush input", err)
	}
	if _, err := t.port.Write(req); err != nil {
		return nil, t.lost("send request", err)
	}
	t.lastByte, t.sent = time.Now(), true
	for {
		frame, err := t.readFrame(ctx, t.deadline)
		if err == errNoFrame {
			return nil, fmt.Errorf("%w: %s: no answer before the deadline", ErrTimeout, t.device)
		}
		if err != nil {
			return nil, err
		}
		if err := t.check(frame); err != nil {
			if t.late.fits(frame) {
				t.late.valid = false // the late answer to an earlier request: skip it
				continue
			}
			return nil, err
		}
		if again || !t.late.ambiguous(frame, t.req) {
			return frame, nil
		}
		// The late answer or this one: the answer to this request follows
		// at once if that was the late one.
		t.late.valid = false
		until := time.Now().Add(t.settle)
		if !t.deadline.IsZero() && t.deadline.Before(until) {
			until = t.deadline
		}
		next, err := t.readFrame(ctx, until)
		if err == errNoFrame {
			return nil, errAskAgain
		}
		if err != nil {
			return nil, err
		}
		if err := t.check(next); err != nil {
			return nil, err
		}
		return next, nil
	}
}

// check reports how frame fails to answer the current request, if it does.
func (t *rtuTransport) check(frame []byte) error {
	want := t.req.Table.function()
	switch unit, fc := frame[0], frame[1]; {
	case unit != t.req.Unit:
		return fmt.Errorf("%w: answer from unit %d to a request for unit %d", ErrMalformed, unit, t.req.Unit)
	case fc == want|0x80:
		return nil
	case fc != want:
		return fmt.Errorf("%w: function code 0x%02x in answer to 0x%02x", ErrMalformed, fc, want)
	case int(frame[2]) != 2*int(t.req.Quantity):
		return fmt.Errorf("%w: byte count %d for %d registers asked", ErrShortResponse, frame[2], t.req.Quantity)
	}
	return nil
}

// failed records what a failed transaction leaves behind and returns err.
func (t *rtuTransport) failed(ctx context.Context, err error) error {
	now := time.Now()
	switch {
	case errors.Is(err, ErrConnection):
		// The port is closed; the next Send opens it afresh.
	case errors.Is(err, ErrTimeout) || ctx.Err() != nil:
		if t.sent {
			t.late = lateRequest{valid: true, at: now, unit: t.req.Unit, fc: t.req.Table.function(),
				addr: t.req.Address, qty: t.req.Quantity}
		}
		t.dirty, t.failedAt = true, now
	default:
		t.dirty, t.failedAt = true, now
	}
	if cerr := ctx.Err(); cerr != nil && !errors.Is(err, ErrConnection) {
		return t.ctxErr(ctx, cerr, "waiting for the answer")
	}
	return err
}

// readFrame reads one frame: address and function; then, for an exception
// (function|0x80), its code, or for an answer to read function 03 or 04 the
// byte count and that many bytes; then the CRC. The first byte must come by
// firstBy (else errNoFrame), each further one within charGap of the one
// before and all by the deadline.
func (t *rtuTransport) readFrame(ctx context.Context, firstBy time.Time) ([]byte, error) {
	n, need := 0, 2
	for n < need {
		until := firstBy
		if n > 0 {
			until = t.lastByte.Add(t.charGap)
			if !t.deadline.IsZero() && t.deadline.Before(until) {
				until = t.deadline
			}
		}
		k, err := t.recv(ctx, t.rx[n:need], until)
		if err != nil {
			return nil, err
		}
		if k == 0 {
			switch {
			case n == 0:
				return nil, errNoFrame
			case time.Since(t.lastByte) >= t.charGap:
				return nil, fmt.Errorf("%w: %s: frame stops after %d of %d bytes (silent for %v)",
					ErrFrame, t.device, n, need, t.charGap)
			default:
				return nil, fmt.Errorf("%w: %s: answer incomplete at the deadline (%d of %d bytes)",
					ErrTimeout, t.device, n, need)
			}
		}
		n += k
		switch {
		case need == 2 && n == 2:
			switch fc := t.rx[1]; {
			case fc&0x80 != 0:
				need = rtuExceptionSize
			case fc == 0x03 || fc == 0x04:
				need = 3
			default:
				return nil, fmt.Errorf("%w: %s: function code 0x%02x cannot begin an answer to a read",
					ErrFrame, t.device, fc)
			}
		case need == 3 && n == 3:
			bc := int(t.rx[2])
			if bc == 0 || bc%2 != 0 || bc > 2*MaxQuantity {
				return nil, fmt.Errorf("%w: %s: byte count %d is not that of 1..%d registers",
					ErrFrame, t.device, bc, MaxQuantity)
			}
			need = 3 + bc + 2
		}
	}
	frame := t.rx[:need]
	got := uint16(frame[need-2]) | uint16(frame[need-1])<<8
	if want := CRC16(frame[:need-2]); got != want {
		return nil, fmt.Errorf("%w: %s: CRC 0x%04x, computed 0x%04x over % X", ErrFrame, t.device, got, want, frame[:need-2])
	}
	return frame, nil
}

// drain reads and discards until the line has been silent for quiet, counted
// from the failed transaction's end or from the last byte discarded,
// whichever is later. It returns how many bytes it discarded.
func (t *rtuTransport) drain(ctx context.Context, quiet time.Duration) (int, error) {
	since := t.failedAt
	if t.lastByte.After(since) {
		since = t.lastByte
	}
	discarded := 0
	for {
		until := since.Add(quiet)
		limit := until
		if !t.deadline.IsZero() && t.deadline.Before(limit) {
			limit = t.deadline
		}
		n, err := t.recv(ctx, t.scratch[:], limit)
		if err != nil {
			if ctx.Err() != nil {
				return discarded, t.ctxErr(ctx, ctx.Err(), "waiting for the line to fall silent")
			}
			return discarded, err
		}
		if n == 0 {
			if !time.Now().Before(until) {
				return discarded, nil
			}
			return discarded, fmt.Errorf("%w: %s: line not silent for %v before the deadline", ErrTimeout, t.device, quiet)
		}
		discarded += n
		since = t.lastByte
	}
}

// recv reads what has arrived into p, waiting until until (the zero time:
// without limit) for at least one byte. It returns 0, nil when nothing came
// in time; at a time already past it still takes what is buffered.
func (t *rtuTransport) recv(ctx context.Context, p []byte, until time.Time) (int, error) {
	for {
		if err := ctx.Err(); err != nil {
			return 0, err
		}
		d := pollSlice
		if !until.IsZero() {
			d = min(d, max(time.Until(until), 0))
		}
		if err := t.port.SetReadTimeout(d); err != nil {
			return 0, t.lost("set read timeout", err)
		}
		n, err := t.port.Read(p)
		if err != nil {
			return 0, t.lost("read", err)
		}
		if n > 0 {
			t.lastByte = time.Now()
			return n, nil
		}
		if !until.IsZero() && !time.Now().Before(until) {
			return 0, nil
		}
	}
}

// waitGap waits until t3.5 has passed since the last byte on the line.
// maxExactWait is the longest inter-frame wait slept with sleepExact
// rather than a cancellable timer: t3.5 at 9600 baud is 4 ms.
const maxExactWait = 5 * time.Millisecond

func (t *rtuTransport) waitGap(ctx context.Context) error {
	wait := time.Until(t.lastByte.Add(t.gap))
	if wait <= 0 {
		return nil
	}
	if !t.deadline.IsZero() && time.Until(t.deadline) < wait {
		return fmt.Errorf("%w: %s: no time left for the inter-frame gap", ErrTimeout, t.device)
	}
	if wait <= maxExactWait {
		// t3.5 itself: a few milliseconds at most, slept exactly.
		sleepExact(wait)
		if err := ctx.Err(); err != nil {
			return t.ctxErr(ctx, err, "before sending")
		}
		return nil
	}
	if t.timer == nil {
		t.timer = time.NewTimer(wait)
	} else {
		t.timer.Reset(wait)
	}
	select {
	case <-ctx.Done():
		t.timer.Stop()
		return t.ctxErr(ctx, ctx.Err(), "before sending")
	case <-t.timer.C:
		return nil
	}
}

func (t *rtuTransport) ctxErr(ctx context.Context, err error, when string) error {
	if errors.Is(err, context.DeadlineExceeded) {
		return fmt.Errorf("%w: %s: %s: %v", ErrTimeout, t.device, when, context.Cause(ctx))
	}
	return err
}

// open opens the port if it is not open.
func (t *rtuTransport) open() error {
	if t.port != nil {
		return nil
	}
	p, err := serial.Open(t.device, &t.mode)
	if err != nil {
		t.down(err)
		return fmt.Errorf("%w: open %s: %v", ErrConnection, t.device, err)
	}
	t.port = p
	switch t.state {
	case stateDown:
		t.log.Info("serial device reopened", "down_for", time.Since(t.downAt))
	case stateUnknown:
		t.log.Info("serial device opened")
	}
	t.state = stateUp
	return nil
}

// lost closes the port after an I/O error and returns the error to report.
func (t *rtuTransport) lost(op string, err error) error {
	t.close()
	t.down(err)
	return fmt.Errorf("%w: %s: %s: %v", ErrConnection, t.device, op, err)
}

func (t *rtuTransport) down(err error) {
	if t.state != stateDown {
		t.log.Warn("serial device lost", "err", err)
		t.state, t.downAt = stateDown, time.Now()
	}
}

func (t *rtuTransport) close() error {
	if t.port == nil {
		return nil
	}
	err := t.port.Close()
	t.port, t.dirty = nil, false
	return err
}
