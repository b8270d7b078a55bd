package sim

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"os"
	"sync"
	"time"

	"glowgate/bus/modbus"
)

// RTUConfig configures an RTUServer.
type RTUConfig struct {
	// Link, when set, is the path of a symbolic link Start creates to the
	// line's device (the pseudo-terminal's slave side), so that a
	// configuration can name a fixed device such as /tmp/glowgate-line-a.
	// A stale link there (one whose target is gone) is replaced; anything
	// else at that path makes Start fail. Close removes the link.
	Link string
	// Baud is the line's bit rate, bits per second: answers are paced as a
	// real line at this rate would deliver them.
	Baud int
	// Now is the clock for scenario time (fault windows, profiles, status
	// episodes); nil means time.Now. Pacing always runs on the wall clock.
	Now func() time.Time
}

// Timing of Modbus RTU (Modbus over Serial Line V1.02, 2.5.1 and 2.5.1.1):
// a character is 11 bits on the wire (start, 8 data, parity or a second
// stop bit, stop); frames are separated by a silence of at least 3.5
// characters, fixed at 1.750 ms above 19200 baud.
const (
	bitsPerChar  = 11
	fixedT35     = 1750 * time.Microsecond
	fixedT35Baud = 19200
)

// CharTime is the time one RTU character takes on a line of baud bits per
// second: 11 bits / baud.
func CharTime(baud int) time.Duration {
	return time.Duration(bitsPerChar * int64(time.Second) / int64(baud))
}

// T35 is the least silence between two RTU frames at baud: 3.5 character
// times up to 19200 baud, and 1.750 ms above.
func T35(baud int) time.Duration {
	if baud > fixedT35Baud {
		return fixedT35
	}
	return time.Duration(3.5 * bitsPerChar * float64(time.Second) / float64(baud))
}

// Pacing parameters: answers are written in chunks of about pacingChunk of
// line time; waits longer than coarseWait are slept on the runtime's timers
// up to coarseWait before their end, the rest with sleepFine.
const (
	pacingChunk = time.Millisecond
	coarseWait  = 2 * time.Millisecond
	spinTail    = 500 * time.Microsecond
	maxLate     = 64  // most late answers pending at once
	maxFrame    = 256 // longest RTU frame (Modbus over Serial Line V1.02, 2.5.1.1)
)

// RTUServer serves simulated heads as slaves on a simulated Modbus RTU line:
// a pseudo-terminal whose slave side (Path, or the Link made to it) a client
// opens as its serial device. Each head answers to its own unit id, 1..247.
//
// Receiving: a request frame ends at its expected length (8 bytes for
// functions 01 to 06, 9 + byte count for 0F and 10) or, for other functions,
// after a silence of t3.5. Frames with a wrong CRC, requests for a unit id no
// head uses, and broadcasts (unit 0) go unanswered, as on a real multi-drop
// line. Requests are otherwise answered as the TCP Server answers them
// (registers, or exceptions 01, 02, 03, 04).
//
// Timing: a pseudo-terminal moves bytes at once, whatever baud rate it is set
// to, so the server paces itself as the wire would. A request of n bytes is
// taken to have ended n·11/baud after its first byte arrived (or when its
// last byte arrived, if later); the answer starts t3.5 after that and its
// bytes are written in chunks of about 1 ms of line time, each when its last
// character would have arrived, so an answer of m bytes takes m·11/baud. A
// read of N registers therefore costs (8 + 5 + 2N)·11/baud + t3.5 before the
// client has it all, and a client that keeps t3.5 before its next request sees
// the wire limit (13 + 2N)·11/baud + 2·t3.5 per read. Waits are slept with
// the kernel's high-resolution timer, and the last 0.5 ms before an answer's
// final chunk is spun (a busy wait of at most 0.5 ms per answer), so the final
// byte is written within some 0.1 ms of its time; the host's wake-up latency
// on receiving a request (0.1 to 0.5 ms on a virtual machine) still adds to
// each transaction.
//
// The line is half duplex and served one frame at a time: bytes that arrive
// while the server waits t3.5 or transmits are discarded, as a collision on a
// real line would garble them. Late answers (Fault kind Late) are held while
// the server keeps listening, and sent when due even if a request is arriving
// then, garbling it.
//
// Faults: Silent sends nothing, Late answers Delay later, CRCError sends the
// answer with both CRC bytes inverted, Exception answers the fault's code,
// Truncated sends the first half of the answer frame.
type RTUServer struct {
	cfg    RTUConfig
	logger *slog.Logger
	heads  map[uint8]*servedHead
	units  []int
	char   time.Duration // one character on the wire
	t35    time.Duration
	chunk  int // characters per paced write

	mu      sync.Mutex // guards state and the files' lifetime
	state   serverState
	start   time.Time // scenario time zero
	master  *os.File
	slave   *os.File
	path    string
	linked  bool
	done    chan struct{} // closed when Close begins
	closed  chan struct{} // closed when Close has finished
	wg      sync.WaitGroup
	stopCtx func() bool
}

// NewRTUServer checks the configuration and the heads and returns a server for
// them. cfg.Baud must be within 50..4000000; each head is validated with
// Head.Validate and must have a unit id within 1..247 (Modbus over Serial
// Line V1.02, 2.2: 0 is the broadcast address, 248..255 are reserved), all
// distinct. The heads are copied. A nil logger discards log output. No
// pseudo-terminal is opened before Start.
func NewRTUServer(cfg RTUConfig, heads []Head, logger *slog.Logger) (*RTUServer, error) {
	name := cfg.Link
	if name == "" {
		name = "(no link)"
	}
	if cfg.Baud < 50 || cfg.Baud > 4000000 {
		return nil, fmt.Errorf("sim: RTU line %s: baud: %d outside 50..4000000", name, cfg.Baud)
	}
	if len(heads) == 0 {
		return nil, fmt.Errorf("sim: RTU line %s: no heads", name)
	}
	if logger == nil {
		logger = slog.New(slog.DiscardHandler)
	}
	served, units, err := servedHeads(heads, logger, func(h *Head) error {
		if h.Unit < 1 || h.Unit > 247 {
			return fmt.Errorf("unit: %d outside 1..247, the addresses of slaves on a serial line", h.Unit)
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("sim: RTU line %s: %w", name, err)
	}
	s := &RTUServer{
		cfg:    cfg,
		logger: logger,
		heads:  served,
		units:  units,
		char:   CharTime(cfg.Baud),
		t35:    T35(cfg.Baud),
		done:   make(chan struct{}),
		closed: make(chan struct{}),
	}
	s.chunk = max(1, int(pacingChunk/s.char))
	return s, nil
}

// Path returns the line's device, the pseudo-terminal's slave side (for
// example /dev/pts/7), once Start has opened it, and "" before.
func (s *RTUServer) Path() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.path
}

// Start opens the pseudo-terminal, makes the link, and serves requests until
// Close is called or ctx is cancelled. Scenario time zero is the clock's time
// at this call. Start fails if ctx is already done, if the pseudo-terminal
// cannot be opened, if the link cannot be made, or if the server was started
// or closed before.
func (s *RTUServer) Start(ctx context.Context) error {
	if err := ctx.Err(); err != nil {
		return fmt.Errorf("sim: start RTU line: %w", err)
	}
	s.mu.Lock()
	defer s.mu.Unlock()
	switch s.state {
	case stateRunning:
		return errors.New("sim: start RTU line: already started")
	case stateClosed:
		return errors.New("sim: start RTU line: server closed")
	}
	master, slave, path, err := openPTY()
	if err != nil {
		return fmt.Errorf("sim: start RTU line: %w", err)
	}
	if s.cfg.Link != "" {
		if err := makeLink(s.cfg.Link, path); err != nil {
			master.Close()
			slave.Close()
			return fmt.Errorf("sim: start RTU line: %w", err)
		}
		s.linked = true
	}
	s.master, s.slave, s.path = master, slave, path
	s.start = s.now()
	s.state = stateRunning
	s.wg.Go(s.run)
	s.stopCtx = context.AfterFunc(ctx, func() { _ = s.Close() })
	s.logger.Info("serving simulated heads on an RTU line", "device", path, "link", s.cfg.Link,
		"baud", s.cfg.Baud, "units", s.units)
	return nil
}

// Close stops serving, closes the pseudo-terminal and removes the link (if it
// still points at this server's device). It waits for the serving goroutine
// to end. It is safe to call more than once and before Start; a closed server
// cannot be started again.
func (s *RTUServer) Close() error {
	s.mu.Lock()
	if !s.state.close(&s.mu, s.closed) {
		return nil
	}
	defer close(s.closed)
	s.stopCtx()
	close(s.done)
	err := s.master.Close() // ends the serving goroutine's read
	s.mu.Unlock()
	s.wg.Wait()
	s.mu.Lock()
	defer s.mu.Unlock()
	err = errors.Join(err, s.slave.Close())
	if s.linked {
		if target, lerr := os.Readlink(s.cfg.Link); lerr == nil && target == s.path {
			err = errors.Join(err, os.Remove(s.cfg.Link))
		}
	}
	if err != nil {
		return fmt.Errorf("sim: close RTU line %s: %w", s.path, err)
	}
	s.logger.Info("stopped serving simulated heads on an RTU line", "device", s.path, "link", s.cfg.Link)
	return nil
}

// makeLink makes link a symbolic link to target, replacing a stale link.
func makeLink(link, target string) error {
	fi, err := os.Lstat(link)
	switch {
	case err == nil && fi.Mode()&fs.ModeSymlink != 0:
		old, _ := os.Readlink(link)
		if _, serr := os.Stat(link); serr == nil {
			return fmt.Errorf("link %s: already points to %s, which exists (is another simulated line running?); remove the link or choose another path", link, old)
		} else if !errors.Is(serr, fs.ErrNotExist) {
			return fmt.Errorf("link %s: %w", link, serr)
		}
		if err := os.Remove(link); err != nil {
			return fmt.Errorf("link %s: remove stale link to %s: %w", link, old, err)
		}
	case err == nil:
		return fmt.Errorf("link %s: exists and is not a symbolic link (%v); refusing to replace it", link, fi.Mode().Type())
	case !errors.Is(err, fs.ErrNotExist):
		return fmt.Errorf("link %s: %w", link, err)
	}
	if err := os.Symlink(target, link); err != nil {
		return fmt.Errorf("link %s: %w", link, err)
	}
	return nil
}

func (s *RTUServer) now() time.Time {
	if s.cfg.Now != nil {
		return s.cfg.Now()
	}
	return time.Now()
}

// pendingAnswer is a late answer waiting for its time.
type pendingAnswer struct {
	due   time.Time // when its first character goes on the wire
	frame []byte
}

// run receives frames and answers them until the master is closed.
func (s *RTUServer) run() {
	var (
		buf         = make([]byte, 0, 2*maxFrame)
		tmp         = make([]byte, maxFrame)
		first, last time.Time // arrival of the pending frame's first and latest bytes
		late        []pendingAnswer
		out         = make([]byte, 0, maxFrame)
	)
	for {
		var deadline time.Time
		if len(buf) > 0 {
			deadline = last.Add(s.t35)
		}
		if len(late) > 0 {
			if d := late[0].due.Add(-coarseWait); deadline.IsZero() || d.Before(deadline) {
				deadline = d
			}
		}
		if err := s.master.SetReadDeadline(deadline); err != nil {
			s.fail(err)
			return
		}
		n, err := s.master.Read(tmp)
		now := time.Now()
		if n > 0 {
			if len(buf) == 0 {
				first = now
			}
			buf = append(buf, tmp[:n]...)
			last = now
		}
		if err != nil && !errors.Is(err, os.ErrDeadlineExceeded) {
			s.fail(err)
			return
		}
		// Frames complete by length.
		for len(buf) > 0 {
			want := frameLen(buf)
			if want == 0 || len(buf) < want {
				break
			}
			out, late = s.frame(buf[:want], first, last, out, late)
			buf = buf[:copy(buf, buf[want:])]
			first = last
		}
		// A frame of unknown length, or garbage, ends with a silence of t3.5;
		// so does a frame longer than any RTU frame may be.
		if len(buf) > 0 && (!now.Before(last.Add(s.t35)) || len(buf) >= maxFrame) {
			out, late = s.frame(buf, first, last, out, late)
			buf = buf[:0]
		}
		// Late answers that are due.
		if len(late) > 0 && !now.Before(late[0].due.Add(-coarseWait)) {
			p := late[0]
			late = late[:copy(late, late[1:])]
			if !s.transmit(p.frame, p.due) {
				return
			}
			buf = buf[:0] // anything arriving meanwhile collided with the answer
		}
	}
}

// fail logs why serving stopped, unless the server is closing.
func (s *RTUServer) fail(err error) {
	select {
	case <-s.done:
	default:
		s.logger.Error("RTU line stopped serving", "device", s.path, "err", err)
	}
}

// frameLen returns the length an RTU request frame starting with b will have,
// or 0 when it cannot be known yet (or at all: then silence ends the frame).
// Lengths from the Modbus Application Protocol V1.1b3, section 6: unit id,
// function code, 4 bytes of address and quantity or value (functions 01 to
// 06), or 5 bytes and a byte count (0F and 10), then 2 bytes of CRC.
func frameLen(b []byte) int {
	if len(b) < 2 {
		return 0
	}
	switch b[1] {
	case 0x01, 0x02, 0x03, 0x04, 0x05, 0x06:
		return 8
	case 0x0F, 0x10:
		if len(b) < 7 {
			return 0
		}
		return 9 + int(b[6])
	}
	return 0
}

// frame handles one received frame whose first byte arrived at first and last
// at last: it checks the CRC and the unit id, applies the head's faults, and
// answers at once or queues a late answer. It returns the reused output buffer
// and the queue.
func (s *RTUServer) frame(f []byte, first, last time.Time, out []byte, late []pendingAnswer) ([]byte, []pendingAnswer) {
	if len(f) < 4 {
		s.logger.Debug("RTU frame too short; ignored", "bytes", len(f))
		return out, late
	}
	body := f[:len(f)-2]
	if got, want := uint16(f[len(f)-2])|uint16(f[len(f)-1])<<8, modbus.CRC16(body); got != want {
		s.logger.Debug("RTU frame with a wrong CRC; ignored", "crc", got, "want", want, "bytes", len(f))
		return out, late
	}
	h, ok := s.heads[f[0]]
	if !ok {
		return out, late // another slave's request, or a broadcast: not ours to answer
	}
	ended := first.Add(time.Duration(len(f)) * s.char)
	if last.After(ended) {
		ended = last
	}
	start := ended.Add(s.t35)

	now := s.now()
	elapsed := now.Sub(s.start)
	hit := h.decide(elapsed)
	out = append(out[:0], f[0])
	switch hit.kind {
	case Silent:
		return out, late
	case Exception:
		out = append(out, body[1]|0x80, hit.code)
	default:
		out = h.answer(out, body[1:], now, elapsed)
	}
	out = modbus.AppendCRC(out)
	switch hit.kind {
	case CRCError:
		out[len(out)-2] ^= 0xFF
		out[len(out)-1] ^= 0xFF
	case Truncated:
		out = out[:len(out)/2]
	case Late:
		if len(late) >= maxLate {
			h.logger.Warn("too many late answers pending; answer dropped", "pending", len(late))
			return out, late
		}
		p := pendingAnswer{due: start.Add(hit.delay), frame: append([]byte(nil), out...)}
		i := len(late)
		for i > 0 && late[i-1].due.After(p.due) {
			i--
		}
		late = append(late, pendingAnswer{})
		copy(late[i+1:], late[i:])
		late[i] = p
		return out, late
	}
	s.transmit(out, start)
	return out, late
}

// transmit writes frame as a line at the configured baud would deliver it,
// its first character starting at start: character i (from 0) is complete at
// start + (i+1)·11/baud. Characters are written in chunks, each when its last
// character is complete. Input that arrived before the last chunk is
// discarded: it collided with the answer (a client may only speak once it
// has the whole answer). transmit reports false if the server closed.
func (s *RTUServer) transmit(frame []byte, start time.Time) bool {
	for off := 0; off < len(frame); {
		end := min(off+s.chunk, len(frame))
		if !s.waitUntil(start.Add(time.Duration(end)*s.char), end == len(frame)) {
			return false
		}
		if end == len(frame) {
			s.discardInput()
		}
		if _, err := s.master.Write(frame[off:end]); err != nil {
			s.fail(err)
			return false
		}
		off = end
	}
	return true
}

// waitUntil waits for the wall clock to reach t and reports false if the
// server closed meanwhile. Waits are slept on the runtime's timers up to
// coarseWait before t, and from there with sleepFine; with exact set, the last
// spinTail before t is spun instead, since a sleeping thread wakes late by
// the host's wake-up latency (0.1 to 0.5 ms on a virtual machine).
func (s *RTUServer) waitUntil(t time.Time, exact bool) bool {
	d := time.Until(t)
	if d > coarseWait {
		timer := time.NewTimer(d - coarseWait)
		select {
		case <-timer.C:
		case <-s.done:
			timer.Stop()
			return false
		}
		d = time.Until(t)
	}
	tail := time.Duration(0)
	if exact {
		tail = spinTail
	}
	if d > tail {
		sleepFine(d - tail)
	}
	for exact && time.Now().Before(t) {
	}
	return true
}

// discardInput drops whatever input is waiting, without blocking.
func (s *RTUServer) discardInput() {
	if n := drain(s.master); n > 0 {
		s.logger.Debug("input during an answer discarded (collision)", "bytes", n)
	}
}
