package sim

import (
	"context"
	"errors"
	"fmt"
	"log"
	"log/slog"
	"math/rand/v2"
	"net"
	"strings"
	"sync"
	"time"

	"glowgate/bus/modbus"

	svmodbus "github.com/simonvetter/modbus"
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
// its own unit id. Heads are read-only: the server answers reads of the head's
// register table (function 03 for holding, 04 for input registers) with the
// channel signals at the moment of the request, encoded as each channel's Field
// says. Scenario time zero is the moment Start is called.
//
// Answers other than register data:
//   - a unit id no head uses: exception 0x0B (gateway target device failed to
//     respond), promptly, so a poller configured with a wrong unit id sees a
//     clear error instead of a timeout;
//   - a read of the table the head does not use: exception 0x02 (illegal data
//     address), since the head has no registers there;
//   - a read reaching beyond the head's last channel register: exception 0x02;
//     registers between channel fields read as zero;
//   - a channel signal the field cannot encode (integer overflow, NaN):
//     exception 0x04 (server device failure) and a rate-limited warning;
//   - any write, and coil or discrete-input functions: exception 0x01 (illegal
//     function);
//   - a read quantity of 0 or more than 125 registers: the Modbus library
//     closes the connection instead of answering exception 0x03 (illegal data
//     value). Pollers never ask for such quantities, so this is left as is.
//
// A Server is served by several goroutines of the Modbus library at once; each
// head's noise source is guarded by its own mutex, so concurrent reads of one
// head draw distinct noise samples.
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

	mu      sync.Mutex
	state   serverState
	start   time.Time // scenario time zero; written once in Start, before serving
	mb      *svmodbus.ModbusServer
	stopCtx func() bool
}

type serverState uint8

const (
	stateNew serverState = iota
	stateRunning
	stateClosed
)

// servedHead is a head with its serving state.
type servedHead struct {
	head   Head
	end    uint32 // one past the last register of any channel field
	logger *slog.Logger

	mu      sync.Mutex // guards everything below
	rng     *rand.Rand
	signals []float64
	scratch []uint16
	encode  rateLimit
}

// NewServer checks the heads and returns a server for them at address (host:port,
// as net.Listen takes it). Each head is validated with Head.Validate, and unit
// ids must be distinct. The heads are copied; later changes to the slice or its
// channels do not reach the server. A nil logger discards log output.
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
	s := &Server{
		address: address,
		logger:  logger,
		heads:   make(map[uint8]*servedHead, len(heads)),
	}
	var errs []error
	byUnit := make(map[uint8]int, len(heads))
	for i := range heads {
		h := heads[i]
		h.Channels = append([]Channel(nil), h.Channels...)
		h.Temperature.Segments = append([]Segment(nil), h.Temperature.Segments...)
		h.Transmission.Segments = append([]Segment(nil), h.Transmission.Segments...)
		if err := h.Validate(); err != nil {
			errs = append(errs, fmt.Errorf("heads[%d]: %w", i, err))
			continue
		}
		if j, dup := byUnit[h.Unit]; dup {
			errs = append(errs, fmt.Errorf("heads[%d]: head %q: unit id %d already used by heads[%d] %q",
				i, h.Name, h.Unit, j, heads[j].Name))
			continue
		}
		byUnit[h.Unit] = i
		sh := &servedHead{
			head:    h,
			logger:  logger.With("head", h.Name, "unit", h.Unit),
			rng:     h.NewRand(),
			signals: make([]float64, len(h.Channels)),
		}
		var widest uint16
		for _, c := range h.Channels {
			n := c.Field.Len()
			sh.end = max(sh.end, uint32(c.Field.Address)+uint32(n))
			widest = max(widest, n)
		}
		sh.scratch = make([]uint16, widest)
		s.heads[h.Unit] = sh
		s.units = append(s.units, int(h.Unit))
	}
	if err := errors.Join(errs...); err != nil {
		return nil, fmt.Errorf("sim: address %s: %w", address, err)
	}
	return s, nil
}

// Address returns the address the server was configured with.
func (s *Server) Address() string { return s.address }

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
	idle := s.IdleTimeout
	if idle <= 0 {
		idle = DefaultIdleTimeout
	}
	clients := s.MaxClients
	if clients == 0 {
		clients = DefaultMaxClients
	}
	mb, err := svmodbus.NewServer(&svmodbus.ServerConfiguration{
		URL:        "tcp://" + s.address,
		Timeout:    idle,
		MaxClients: clients,
		Logger:     log.New(libraryLog{s.logger}, "", 0),
	}, handler{s})
	if err != nil {
		return fmt.Errorf("sim: start %s: %w", s.address, err)
	}
	s.start = s.now()
	if err := mb.Start(); err != nil {
		return fmt.Errorf("sim: listen on %s: %w", s.address, err)
	}
	s.mb = mb
	s.state = stateRunning
	s.stopCtx = context.AfterFunc(ctx, func() { _ = s.Close() })
	s.logger.Info("serving simulated heads", "address", s.address, "units", s.units)
	return nil
}

// Close stops listening and closes every client connection. It is safe to call
// more than once and before Start; a closed server cannot be started again.
// Requests already being handled by the Modbus library finish on their own.
func (s *Server) Close() error {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.state != stateRunning {
		s.state = stateClosed
		return nil
	}
	s.state = stateClosed
	s.stopCtx()
	if err := s.mb.Stop(); err != nil {
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

// head returns the head at unit, logging requests for unknown units at a
// limited rate.
func (s *Server) head(unit uint8, client string) (*servedHead, error) {
	if h, ok := s.heads[unit]; ok {
		return h, nil
	}
	if ok, skipped := s.unknownUnit.allow(s.now()); ok {
		s.logger.Warn("request for a unit id no simulated head uses; answering exception 0x0B",
			"unit", unit, "client", client, "units", s.units, "suppressed", skipped)
	}
	return nil, svmodbus.ErrGWTargetFailedToRespond
}

// read answers a register read of qty registers from addr in table of the head
// at unit.
func (s *Server) read(unit uint8, client string, table modbus.Table, addr, qty uint16) ([]uint16, error) {
	h, err := s.head(unit, client)
	if err != nil {
		return nil, err
	}
	if table != h.head.Table || uint32(addr)+uint32(qty) > h.end {
		return nil, svmodbus.ErrIllegalDataAddress
	}
	now := s.now()
	elapsed := now.Sub(s.start)
	regs := make([]uint16, qty)

	h.mu.Lock()
	defer h.mu.Unlock()
	sig := h.head.Signals(elapsed, h.rng, h.signals)
	for i, c := range h.head.Channels {
		f := c.Field
		n := f.Len()
		if !overlap(addr, qty, f.Address, n) {
			continue
		}
		block := h.scratch[:n]
		clear(block)
		if err := f.Encode(sig[i], block, f.Address); err != nil {
			if ok, skipped := h.encode.allow(now); ok {
				h.logger.Warn("channel signal cannot be encoded; answering exception 0x04",
					"channel", i, "signal", sig[i], "elapsed", elapsed, "err", err, "suppressed", skipped)
			}
			return nil, svmodbus.ErrServerDeviceFailure
		}
		lo := max(uint32(addr), uint32(f.Address))
		hi := min(uint32(addr)+uint32(qty), uint32(f.Address)+uint32(n))
		copy(regs[lo-uint32(addr):hi-uint32(addr)], block[lo-uint32(f.Address):hi-uint32(f.Address)])
	}
	return regs, nil
}

// handler adapts a Server to the Modbus library's request handler, keeping the
// handler methods out of Server's API.
type handler struct{ s *Server }

func (h handler) HandleCoils(req *svmodbus.CoilsRequest) ([]bool, error) {
	if _, err := h.s.head(req.UnitId, req.ClientAddr); err != nil {
		return nil, err
	}
	return nil, svmodbus.ErrIllegalFunction
}

func (h handler) HandleDiscreteInputs(req *svmodbus.DiscreteInputsRequest) ([]bool, error) {
	if _, err := h.s.head(req.UnitId, req.ClientAddr); err != nil {
		return nil, err
	}
	return nil, svmodbus.ErrIllegalFunction
}

func (h handler) HandleHoldingRegisters(req *svmodbus.HoldingRegistersRequest) ([]uint16, error) {
	if req.IsWrite {
		if _, err := h.s.head(req.UnitId, req.ClientAddr); err != nil {
			return nil, err
		}
		return nil, svmodbus.ErrIllegalFunction
	}
	return h.s.read(req.UnitId, req.ClientAddr, modbus.HoldingRegisters, req.Addr, req.Quantity)
}

func (h handler) HandleInputRegisters(req *svmodbus.InputRegistersRequest) ([]uint16, error) {
	return h.s.read(req.UnitId, req.ClientAddr, modbus.InputRegisters, req.Addr, req.Quantity)
}

// rateLimit lets one event through per logEvery and counts the rest.
type rateLimit struct {
	mu         sync.Mutex
	last       time.Time
	suppressed int
}

// allow reports whether an event at now may be logged, and how many events were
// held back since the last one that was.
func (r *rateLimit) allow(now time.Time) (ok bool, suppressed int) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if !r.last.IsZero() && now.Sub(r.last) < logEvery {
		r.suppressed++
		return false, 0
	}
	r.last, suppressed, r.suppressed = now, r.suppressed, 0
	return true, suppressed
}

// libraryLog turns the Modbus library's log lines ("<prefix> [warn]: <text>")
// into structured records at the matching level.
type libraryLog struct{ logger *slog.Logger }

func (l libraryLog) Write(p []byte) (int, error) {
	line := strings.TrimSpace(string(p))
	level, msg, origin := slog.LevelInfo, line, ""
	for _, lv := range []struct {
		tag   string
		level slog.Level
	}{{" [info]: ", slog.LevelInfo}, {" [warn]: ", slog.LevelWarn}, {" [error]: ", slog.LevelError}} {
		if i := strings.Index(line, lv.tag); i >= 0 {
			level, origin, msg = lv.level, line[:i], line[i+len(lv.tag):]
			break
		}
	}
	l.logger.Log(context.Background(), level, msg, "origin", origin)
	return len(p), nil
}

// FreeAddr returns a loopback address with a port that was free a moment ago:
// it listens on 127.0.0.1:0, notes the port and closes the listener. Another
// process may take the port before the caller binds it; callers that must not
// fail retry with a fresh address. It exists because the Modbus library binds
// its own listener and does not report the port it got.
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
