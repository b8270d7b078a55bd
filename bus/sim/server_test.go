package sim

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"log"
	"log/slog"
	"math"
	"net"
	"strings"
	"sync"
	"testing"
	"time"

	"glowgate/bus/modbus"

	svmodbus "github.com/simonvetter/modbus"
)

// testClock is an adjustable clock for Server.Now.
type testClock struct {
	mu sync.Mutex
	t  time.Time
}

// testEpoch is where every testClock starts, and so scenario time zero of a
// server started on one.
var testEpoch = time.Date(2025, 3, 14, 6, 0, 0, 0, time.UTC)

func newTestClock() *testClock {
	return &testClock{t: testEpoch}
}

// Set puts the clock at elapsed after testEpoch.
func (c *testClock) Set(elapsed time.Duration) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = testEpoch.Add(elapsed)
}

func (c *testClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *testClock) Advance(d time.Duration) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = c.t.Add(d)
}

// recorder is a slog.Handler that keeps every record and passes each one to
// notify, when set.
type recorder struct {
	mu      sync.Mutex
	records []slog.Record
	notify  chan slog.Record
}

func (r *recorder) Enabled(context.Context, slog.Level) bool { return true }
func (r *recorder) WithAttrs([]slog.Attr) slog.Handler       { return r } // attrs not needed by the tests
func (r *recorder) WithGroup(string) slog.Handler            { return r }
func (r *recorder) Handle(_ context.Context, rec slog.Record) error {
	r.mu.Lock()
	r.records = append(r.records, rec.Clone())
	r.mu.Unlock()
	if r.notify != nil {
		r.notify <- rec.Clone()
	}
	return nil
}

// find returns the records whose message contains msg.
func (r *recorder) find(msg string) []slog.Record {
	r.mu.Lock()
	defer r.mu.Unlock()
	var out []slog.Record
	for _, rec := range r.records {
		if strings.Contains(rec.Message, msg) {
			out = append(out, rec)
		}
	}
	return out
}

func attr(rec slog.Record, key string) slog.Value {
	var v slog.Value
	rec.Attrs(func(a slog.Attr) bool {
		if a.Key == key {
			v = a.Value
			return false
		}
		return true
	})
	return v
}

// startServer starts a server for heads on a free loopback port, with clk as
// its clock, and closes it when the test ends. FreeAddr's port may be taken
// between lookup and bind, so binding is tried a few times.
func startServer(t testing.TB, heads []Head, clk *testClock, logger *slog.Logger) (*Server, string) {
	t.Helper()
	var lastErr error
	for range 5 {
		addr, err := FreeAddr()
		if err != nil {
			t.Fatal(err)
		}
		srv, err := NewServer(addr, heads, logger)
		if err != nil {
			t.Fatalf("NewServer: %v", err)
		}
		srv.Now = clk.Now
		if lastErr = srv.Start(t.Context()); lastErr == nil {
			t.Cleanup(func() {
				if err := srv.Close(); err != nil {
					t.Errorf("Close: %v", err)
				}
			})
			return srv, addr
		}
	}
	t.Fatalf("start server: %v", lastErr)
	return nil, ""
}

// dialClient returns an open simonvetter Modbus TCP client for addr.
func dialClient(t testing.TB, addr string) *svmodbus.ModbusClient {
	t.Helper()
	c, err := svmodbus.NewClient(&svmodbus.ClientConfiguration{
		URL:     "tcp://" + addr,
		Timeout: 5 * time.Second,
		Logger:  log.New(io.Discard, "", 0),
	})
	if err != nil {
		t.Fatal(err)
	}
	if err := c.Open(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	return c
}

// casterScenario is a grey strand seen by a 0.90/1.05 µm head: the
// temperature holds, ramps and drops; the sight path clouds over to 15 % and
// clears again. These are scenario inputs; every expectation below follows from
// the physics, not from these numbers.
func casterScenario(t testing.TB) Head {
	h := twoColour(t, 1, 0)
	h.Name = "mould-exit"
	h.Channels[0].Emissivity = 0.4
	h.Channels[1].Emissivity = 0.4
	h.Temperature = Profile{Start: 1793.15, Repeat: true, Segments: []Segment{
		{Kind: Hold, Duration: 20 * time.Second},
		{Kind: Ramp, Value: 1833.15, Duration: 15 * time.Second},
		{Kind: Step, Value: 1763.15},
		{Kind: Hold, Duration: 10 * time.Second},
	}}
	h.Transmission = Profile{Start: 1, Repeat: true, Segments: []Segment{
		{Kind: Hold, Duration: 30 * time.Second},
		{Kind: Ramp, Value: 0.15, Duration: 2 * time.Second},
		{Kind: Hold, Duration: 8 * time.Second},
		{Kind: Ramp, Value: 1, Duration: 3 * time.Second},
	}}
	return h
}

// A three-channel head on holding registers with mixed layouts, to show that
// every channel field is encoded as configured. The scale of the uint32 field
// puts about 10⁶ counts at 1800 K whatever unit the model's signal has.
func kilnHead(t testing.TB) Head {
	short, mid, long := band(t, 0.75e-6, 0.80e-6), band(t, 0.875e-6, 0.925e-6), band(t, 1.025e-6, 1.075e-6)
	return Head{
		Name:  "kiln",
		Unit:  2,
		Table: modbus.HoldingRegisters,
		Channels: []Channel{
			{Model: short, Emissivity: 0.9, Field: modbus.Field{Address: 100, Type: modbus.Float32, Words: modbus.LowFirst, Bytes: modbus.LittleEndian}},
			{Model: mid, Emissivity: 0.85, Field: modbus.Field{Address: 110, Type: modbus.Uint32, Scale: mid.Signal(1800) / 1e6}},
			{Model: long, Emissivity: 0.8, Field: modbus.Field{Address: 102, Type: modbus.Float32, Words: modbus.HighFirst, Bytes: modbus.LittleEndian}},
		},
		Temperature:  Profile{Start: 1600, Segments: []Segment{{Kind: Ramp, Value: 1700, Duration: 100 * time.Second}}},
		Transmission: Constant(0.9),
	}
}

// encodingTolerance is the largest error encoding v into f and decoding it can
// make: half a count of an integer field (rounding to nearest), or float32
// rounding, 2⁻²⁴ relative (IEEE 754 binary32), with a margin.
func encodingTolerance(f modbus.Field, v float64) float64 {
	if f.Type == modbus.Float32 {
		return 7e-8 * math.Abs(v)
	}
	scale := f.Scale
	if scale == 0 {
		scale = 1
	}
	return math.Abs(scale)/2 + 1e-12*math.Abs(v)
}

// readSignals reads every channel of h from c in one request and decodes the
// fields with modbus.Field.Decode.
func readSignals(c *svmodbus.ModbusClient, h Head) ([]float64, error) {
	lo, hi := uint32(math.MaxUint16), uint32(0)
	for _, ch := range h.Channels {
		lo = min(lo, uint32(ch.Field.Address))
		hi = max(hi, uint32(ch.Field.Address)+uint32(ch.Field.Len()))
	}
	if err := c.SetUnitId(h.Unit); err != nil {
		return nil, err
	}
	table := svmodbus.INPUT_REGISTER
	if h.Table == modbus.HoldingRegisters {
		table = svmodbus.HOLDING_REGISTER
	}
	regs, err := c.ReadRegisters(uint16(lo), uint16(hi-lo), table)
	if err != nil {
		return nil, fmt.Errorf("read unit %d registers %d..%d: %w", h.Unit, lo, hi-1, err)
	}
	out := make([]float64, len(h.Channels))
	for i, ch := range h.Channels {
		if out[i], err = ch.Field.Decode(regs, uint16(lo)); err != nil {
			return nil, fmt.Errorf("decode channel %d: %w", i, err)
		}
	}
	return out, nil
}

func readFields(t testing.TB, c *svmodbus.ModbusClient, h Head) []float64 {
	t.Helper()
	v, err := readSignals(c, h)
	if err != nil {
		t.Fatal(err)
	}
	return v
}

// The served signals, read back over TCP by an independent client (simonvetter's
// client side) and decoded, are the blackbody signals at the scenario
// temperature scaled by ε·τ, and their ratio is the blackbody ratio: the grey
// emissivity and the clouding of the sight path cancel in it. Tolerance 3e-7
// covers float32 rounding (2⁻²⁴ relative per signal, IEEE 754 binary32).
func TestServerLoopback(t *testing.T) {
	clk := newTestClock()
	caster, kiln := casterScenario(t), kilnHead(t)
	_, addr := startServer(t, []Head{caster, kiln}, clk, nil)
	c := dialClient(t, addr)

	var last time.Duration
	for _, e := range []time.Duration{
		0, 10 * time.Second, 27500 * time.Millisecond, 31 * time.Second, 35 * time.Second,
		38 * time.Second, 41500 * time.Millisecond, 100 * time.Second, time.Hour,
	} {
		clk.Advance(e - last)
		last = e
		tk, tau := caster.Temperature.At(e), caster.Transmission.At(e)
		got := readFields(t, c, caster)
		s1, s2 := caster.Channels[0].Model.Signal(tk), caster.Channels[1].Model.Signal(tk)
		if r, want := got[0]/got[1], s1/s2; math.Abs(r/want-1) > 3e-7 {
			t.Errorf("t=%v T=%.3f K τ=%.3f: ratio %.9g, want blackbody ratio %.9g", e, tk, tau, r, want)
		}
		for i, sbb := range []float64{s1, s2} {
			if f, want := got[i]/sbb, 0.4*tau; math.Abs(f-want) > 3e-7*want {
				t.Errorf("t=%v channel %d: signal fraction %.9g, want ε·τ = %.9g", e, i, f, want)
			}
		}

		kt := kiln.Temperature.At(e)
		gotK := readFields(t, c, kiln)
		for i, ch := range kiln.Channels {
			want := ch.Emissivity * 0.9 * ch.Model.Signal(kt)
			if math.Abs(gotK[i]-want) > encodingTolerance(ch.Field, want) {
				t.Errorf("kiln t=%v T=%.3f K channel %d: %.9g, want %.9g", e, kt, i, gotK[i], want)
			}
		}
	}
}

// Concurrent clients reading noisy heads (run with -race): every answer is
// whole and plausible, and the per-head noise source is shared safely.
func TestServerConcurrentClients(t *testing.T) {
	clk := newTestClock()
	caster := casterScenario(t)
	caster.Noise = 0.01
	kiln := kilnHead(t)
	kiln.Noise = 0.01
	_, addr := startServer(t, []Head{caster, kiln}, clk, nil)

	var wg sync.WaitGroup
	errs := make(chan error, 4)
	for g := range 4 {
		c := dialClient(t, addr)
		wg.Go(func() {
			h := caster
			if g%2 == 1 {
				h = kiln
			}
			for range 50 {
				got, err := readSignals(c, h)
				if err != nil {
					errs <- err
					return
				}
				for i, v := range got {
					want := h.Channels[i].Emissivity * h.Transmission.At(0) * h.Channels[i].Model.Signal(h.Temperature.At(0))
					if math.Abs(v/want-1) > 0.1 { // 10 σ
						errs <- fmt.Errorf("unit %d channel %d: noisy signal %g, expected about %g", h.Unit, i, v, want)
						return
					}
				}
			}
		})
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
}

// rawConn speaks Modbus TCP byte by byte, as the Modbus Application Protocol
// V1.1b3 (sections 4.1, 6.3, 6.4, 7) and Messaging on TCP/IP V1.0b (MBAP
// header, section 3.1.3) lay it out, independently of any library.
type rawConn struct {
	t    testing.TB
	conn net.Conn
	txn  uint16
}

func dialRaw(t testing.TB, addr string) *rawConn {
	t.Helper()
	conn, err := net.DialTimeout("tcp", addr, 5*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	return &rawConn{t: t, conn: conn}
}

// send writes one request and returns the response PDU (function code and
// data), or the read error.
func (r *rawConn) send(unit, fc byte, data ...byte) (byte, []byte, error) {
	r.t.Helper()
	r.txn++
	frame := binary.BigEndian.AppendUint16(nil, r.txn)
	frame = binary.BigEndian.AppendUint16(frame, 0) // protocol identifier: Modbus
	frame = binary.BigEndian.AppendUint16(frame, uint16(2+len(data)))
	frame = append(frame, unit, fc)
	frame = append(frame, data...)
	if err := r.conn.SetDeadline(time.Now().Add(5 * time.Second)); err != nil {
		r.t.Fatal(err)
	}
	if _, err := r.conn.Write(frame); err != nil {
		return 0, nil, err
	}
	var hdr [7]byte
	if _, err := io.ReadFull(r.conn, hdr[:]); err != nil {
		return 0, nil, err
	}
	if txn, proto, u := binary.BigEndian.Uint16(hdr[0:]), binary.BigEndian.Uint16(hdr[2:]), hdr[6]; txn != r.txn || proto != 0 || u != unit {
		r.t.Fatalf("response header txn=%d proto=%d unit=%d, want %d 0 %d", txn, proto, u, r.txn, unit)
	}
	n := int(binary.BigEndian.Uint16(hdr[4:]))
	if n < 2 || n > 254 {
		r.t.Fatalf("response length field %d", n)
	}
	pdu := make([]byte, n-1)
	if _, err := io.ReadFull(r.conn, pdu); err != nil {
		return 0, nil, err
	}
	return pdu[0], pdu[1:], nil
}

// read sends a register read and returns the registers, or fails on an
// exception.
func (r *rawConn) read(unit, fc byte, addr, qty uint16) []uint16 {
	r.t.Helper()
	gotFC, data, err := r.send(unit, fc, byte(addr>>8), byte(addr), byte(qty>>8), byte(qty))
	if err != nil {
		r.t.Fatalf("read unit %d fc %d %d+%d: %v", unit, fc, addr, qty, err)
	}
	if gotFC != fc || len(data) != 1+2*int(qty) || int(data[0]) != 2*int(qty) {
		r.t.Fatalf("read unit %d fc %d %d+%d: answer fc %#x data % x", unit, fc, addr, qty, gotFC, data)
	}
	regs := make([]uint16, qty)
	for i := range regs {
		regs[i] = binary.BigEndian.Uint16(data[1+2*i:])
	}
	return regs
}

func TestServerAnswersOnTheWire(t *testing.T) {
	clk := newTestClock()
	rec := &recorder{}
	plain := twoColour(t, 1, 1800)
	plain.Channels[1].Field.Address = 4 // registers 2..3 are a gap
	over := twoColour(t, 9, 1800)
	// A uint16 field whose raw value would be about 10⁶ counts overflows.
	over.Channels[0].Field = modbus.Field{Address: 0, Type: modbus.Uint16, Scale: over.Channels[0].Model.Signal(1800) / 1e6}
	over.Channels[1].Field = modbus.Field{Address: 1, Type: modbus.Uint16, Scale: over.Channels[1].Model.Signal(1800) / 1e3}
	_, addr := startServer(t, []Head{plain, over}, clk, slog.New(rec))
	r := dialRaw(t, addr)

	whole := r.read(1, 0x04, 0, 6)
	for i, ch := range plain.Channels {
		v, err := ch.Field.Decode(whole, 0)
		if want := ch.Model.Signal(1800); err != nil || math.Abs(v/want-1) > 3e-7 {
			t.Errorf("channel %d: decoded %v (%v), want %v", i, v, err, want)
		}
	}
	if whole[2] != 0 || whole[3] != 0 {
		t.Errorf("gap registers 2..3 = %#04x %#04x, want zero", whole[2], whole[3])
	}
	// A read that cuts a float in half returns that half as it lies in the block.
	if part := r.read(1, 0x04, 1, 4); part[0] != whole[1] || part[1] != 0 || part[3] != whole[4] {
		t.Errorf("registers 1..4 = %#04x, want %#04x", part, whole[1:5])
	}
	// Only the second channel of the overflowing head fits its field.
	if regs := r.read(9, 0x04, 1, 1); regs[0] != 1000 {
		t.Errorf("unit 9 register 1 = %d, want 1000", regs[0])
	}

	// Exception responses: function code | 0x80, then the exception code
	// (Modbus Application Protocol V1.1b3, section 7).
	for _, tc := range []struct {
		name     string
		unit, fc byte
		data     []byte
		want     byte
	}{
		{"read beyond the last field", 1, 0x04, []byte{0, 5, 0, 2}, 0x02},
		{"read far away", 1, 0x04, []byte{0x9c, 0x40, 0, 1}, 0x02},
		{"read the other table", 1, 0x03, []byte{0, 0, 0, 2}, 0x02},
		{"unknown unit", 77, 0x04, []byte{0, 0, 0, 2}, 0x0B},
		{"unknown unit write", 77, 0x06, []byte{0, 0, 0, 1}, 0x0B},
		{"write single register", 1, 0x06, []byte{0, 0, 0, 1}, 0x01},
		{"write multiple registers", 1, 0x10, []byte{0, 0, 0, 1, 2, 0, 7}, 0x01},
		{"read coils", 1, 0x01, []byte{0, 0, 0, 1}, 0x01},
		{"read discrete inputs", 1, 0x02, []byte{0, 0, 0, 1}, 0x01},
		{"write single coil", 1, 0x05, []byte{0, 0, 0xff, 0}, 0x01},
		{"signal overflows its field", 9, 0x04, []byte{0, 0, 0, 2}, 0x04},
		// Quantity 0 and 126 are illegal (V1.1b3 section 6.4: 1..125), and so
		// is a read request of the wrong length.
		{"quantity 0", 1, 0x04, []byte{0, 0, 0, 0}, 0x03},
		{"quantity 126", 1, 0x04, []byte{0, 0, 0, 126}, 0x03},
		{"short read request", 1, 0x04, []byte{0, 0, 0}, 0x03},
	} {
		fc, data, err := r.send(tc.unit, tc.fc, tc.data...)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		if fc != tc.fc|0x80 || len(data) != 1 || data[0] != tc.want {
			t.Errorf("%s: answer fc %#x data % x, want fc %#x exception %#02x", tc.name, fc, data, tc.fc|0x80, tc.want)
		}
	}
	if n := len(rec.find("unit id no simulated head uses")); n != 1 {
		t.Errorf("%d log lines about the unknown unit, want 1 (rate-limited)", n)
	}

	// A frame that is not Modbus (protocol id 1) closes the connection.
	r.txn++
	bad := []byte{byte(r.txn >> 8), byte(r.txn), 0, 1, 0, 6, 1, 0x04, 0, 0, 0, 1}
	if _, err := r.conn.Write(bad); err != nil {
		t.Fatal(err)
	}
	if n, err := r.conn.Read(make([]byte, 16)); err == nil {
		t.Errorf("a frame with protocol id 1 was answered with %d bytes; want the connection closed", n)
	}
}

// The overflow warning is rate-limited per head on the server's clock, and the
// next line reports how many were held back.
func TestServerOverflowLogRateLimited(t *testing.T) {
	clk := newTestClock()
	rec := &recorder{}
	h := twoColour(t, 4, 1800)
	h.Channels[0].Field = modbus.Field{Address: 0, Type: modbus.Int16, Scale: h.Channels[0].Model.Signal(1800) / 1e5}
	_, addr := startServer(t, []Head{h}, clk, slog.New(rec))
	r := dialRaw(t, addr)
	exception := func() {
		t.Helper()
		if fc, data, err := r.send(4, 0x04, 0, 0, 0, 1); err != nil || fc != 0x84 || data[0] != 0x04 {
			t.Fatalf("answer fc %#x data % x err %v, want exception 0x04", fc, data, err)
		}
	}
	const msg = "value cannot be encoded"
	for range 3 {
		exception()
	}
	if got := rec.find(msg); len(got) != 1 || attr(got[0], "suppressed").Int64() != 0 {
		t.Fatalf("after 3 failures: %d log lines, want 1", len(got))
	}
	clk.Advance(logEvery - time.Nanosecond)
	exception()
	if got := rec.find(msg); len(got) != 1 {
		t.Fatalf("before the interval ends: %d log lines, want 1", len(got))
	}
	clk.Advance(time.Nanosecond)
	exception()
	got := rec.find(msg)
	if len(got) != 2 {
		t.Fatalf("after the interval: %d log lines, want 2", len(got))
	}
	if n := attr(got[1], "suppressed").Int64(); n != 3 {
		t.Errorf("second line reports %d suppressed, want 3", n)
	}
	if got[1].Level != slog.LevelWarn || attr(got[1], "field").String() != "channels[0]" {
		t.Errorf("second line: level %v channel %v", got[1].Level, attr(got[1], "channel"))
	}
}

func TestNewServerValidates(t *testing.T) {
	a := twoColour(t, 1, 1500)
	b := twoColour(t, 1, 1500)
	b.Name = "second"
	bad := twoColour(t, 3, 1500)
	bad.Name = "bad"
	bad.Channels[1].Field.Address = 1
	for _, tc := range []struct {
		name    string
		address string
		heads   []Head
		want    []string
	}{
		{"bad address", "localhost", []Head{a}, []string{`sim: address "localhost": `}},
		{"no heads", "127.0.0.1:15020", nil, []string{"sim: address 127.0.0.1:15020: no heads"}},
		{"duplicate unit", "127.0.0.1:15020", []Head{a, b}, []string{
			`heads[1]: head "second": unit id 1 already used by heads[0] "strand"`}},
		{"all errors reported", "127.0.0.1:15020", []Head{a, bad, b}, []string{
			`heads[1]: head "bad" (unit 3): channels[1].field: input registers 1..2 overlap channels[0] at 0..1`,
			`heads[2]: head "second": unit id 1 already used`}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := NewServer(tc.address, tc.heads, nil)
			if err == nil {
				t.Fatalf("NewServer succeeded, want an error containing %q", tc.want)
			}
			for _, w := range tc.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("NewServer error %q lacks %q", err, w)
				}
			}
		})
	}
}

// NewServer copies the heads: changing the caller's slice afterwards does not
// reach the server.
func TestNewServerCopiesHeads(t *testing.T) {
	clk := newTestClock()
	heads := []Head{twoColour(t, 1, 1500)}
	_, addr := startServer(t, heads, clk, nil)
	want := heads[0].Signals(0, nil, nil)
	heads[0].Channels[0].Emissivity = 0.1
	heads[0].Temperature = Constant(900)
	got := readFields(t, dialClient(t, addr), twoColour(t, 1, 1500))
	for i := range want {
		if math.Abs(got[i]/want[i]-1) > 3e-7 {
			t.Errorf("channel %d: %v, want %v", i, got[i], want[i])
		}
	}
}

func TestServerLifecycle(t *testing.T) {
	clk := newTestClock()
	h := twoColour(t, 1, 1500)

	// Close before Start is fine, and the server cannot start afterwards.
	srv, err := NewServer("127.0.0.1:0", []Head{h}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := srv.Close(); err != nil {
		t.Fatal(err)
	}
	if err := srv.Start(t.Context()); err == nil || !strings.Contains(err.Error(), "server closed") {
		t.Errorf("Start after Close: %v", err)
	}

	// A done context refuses to start.
	srv, _ = NewServer("127.0.0.1:0", []Head{h}, nil)
	ctx, cancel := context.WithCancel(t.Context())
	cancel()
	if err := srv.Start(ctx); !errors.Is(err, context.Canceled) {
		t.Errorf("Start with a cancelled context: %v", err)
	}

	running, addr := startServer(t, []Head{h}, clk, nil)
	if err := running.Start(t.Context()); err == nil || !strings.Contains(err.Error(), "already started") {
		t.Errorf("second Start: %v", err)
	}
	// The address is taken: a second server there fails to bind.
	other, _ := NewServer(addr, []Head{h}, nil)
	t.Cleanup(func() { other.Close() })
	if err := other.Start(t.Context()); err == nil || !strings.Contains(err.Error(), "sim: listen on "+addr) {
		t.Errorf("Start on a busy address: %v", err)
	}
	if running.Address() != addr {
		t.Errorf("Address() = %q, want %q", running.Address(), addr)
	}
	if err := running.Close(); err != nil {
		t.Fatal(err)
	}
	if err := running.Close(); err != nil {
		t.Errorf("second Close: %v", err)
	}
}

// Cancelling the Start context closes the server.
func TestServerStopsWithContext(t *testing.T) {
	rec := &recorder{notify: make(chan slog.Record, 64)}
	addr, err := FreeAddr()
	if err != nil {
		t.Fatal(err)
	}
	srv, err := NewServer(addr, []Head{twoColour(t, 1, 1500)}, slog.New(rec))
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(t.Context())
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	defer srv.Close()
	c := dialClient(t, addr)
	if _, err := c.ReadRegisters(0, 2, svmodbus.INPUT_REGISTER); err != nil {
		t.Fatalf("read while running: %v", err)
	}
	cancel()
	timeout := time.After(10 * time.Second)
	for stopped := false; !stopped; {
		select {
		case r := <-rec.notify:
			stopped = strings.Contains(r.Message, "stopped serving")
		case <-timeout:
			t.Fatal("server did not stop after its context was cancelled")
		}
	}
	if _, err := c.ReadRegisters(0, 2, svmodbus.INPUT_REGISTER); err == nil {
		t.Error("read after the context was cancelled succeeded")
	}
}

// BenchmarkServerRead measures one register read over loopback TCP, from the
// request leaving the client to the decoded answer.
func BenchmarkServerRead(b *testing.B) {
	clk := newTestClock()
	h := casterScenario(b)
	h.Noise = 0.003
	_, addr := startServer(b, []Head{h}, clk, nil)
	c := dialClient(b, addr)
	b.ReportAllocs()
	for b.Loop() {
		readFields(b, c, h)
	}
}
