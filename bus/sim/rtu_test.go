//go:build linux

package sim

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/modbus/modbustest"
)

// startRTU starts an RTU server for heads with clk as its scenario clock and
// closes it when the test ends.
func startRTU(t testing.TB, cfg RTUConfig, heads []Head, clk *testClock, logger *slog.Logger) *RTUServer {
	t.Helper()
	if clk != nil {
		cfg.Now = clk.Now
	}
	srv, err := NewRTUServer(cfg, heads, logger)
	if err != nil {
		t.Fatalf("NewRTUServer: %v", err)
	}
	if err := srv.Start(t.Context()); err != nil {
		t.Fatalf("Start: %v", err)
	}
	t.Cleanup(func() {
		if err := srv.Close(); err != nil {
			t.Errorf("Close: %v", err)
		}
	})
	return srv
}

// rtuPeer is a client end of a simulated RTU line that speaks raw frames as
// Modbus over Serial Line V1.02 (2.5.1.1: address, function, data, CRC low
// byte first) and the Application Protocol V1.1b3 (6.3, 6.4, 7) lay them out,
// independently of any Modbus library.
type rtuPeer struct {
	t testing.TB
	f *os.File
}

func openPeer(t testing.TB, path string) *rtuPeer {
	t.Helper()
	fd, err := syscall.Open(path, syscall.O_RDWR|syscall.O_NOCTTY|syscall.O_NONBLOCK|syscall.O_CLOEXEC, 0)
	if err != nil {
		t.Fatalf("open %s: %v", path, err)
	}
	f := os.NewFile(uintptr(fd), path)
	t.Cleanup(func() { f.Close() })
	p := &rtuPeer{t: t, f: f}
	p.raw()
	return p
}

// raw sets the line's terminal to raw mode with one-byte reads, as a serial
// client does when it opens its device: another client (pyserial) may have
// left other settings on the shared terminal.
func (p *rtuPeer) raw() {
	p.t.Helper()
	rc, err := p.f.SyscallConn()
	if err != nil {
		p.t.Fatal(err)
	}
	var rerr error
	if err := rc.Control(func(fd uintptr) { rerr = setRaw(int(fd)) }); err != nil {
		p.t.Fatal(err)
	}
	if rerr != nil {
		p.t.Fatal(rerr)
	}
}

// readRequest is the RTU frame of a register read.
func readRequest(unit, fc byte, addr, qty uint16) []byte {
	return modbus.AppendCRC([]byte{unit, fc, byte(addr >> 8), byte(addr), byte(qty >> 8), byte(qty)})
}

func (p *rtuPeer) write(frames ...[]byte) {
	p.t.Helper()
	if _, err := p.f.Write(bytes.Join(frames, nil)); err != nil {
		p.t.Fatal(err)
	}
}

// read reads exactly n bytes, waiting at most wait.
func (p *rtuPeer) read(n int, wait time.Duration) ([]byte, error) {
	if err := p.f.SetReadDeadline(time.Now().Add(wait)); err != nil {
		p.t.Fatal(err)
	}
	b := make([]byte, n)
	got, err := io.ReadFull(p.f, b)
	return b[:got], err
}

// mustRead reads exactly n bytes or fails the test.
func (p *rtuPeer) mustRead(n int) []byte {
	p.t.Helper()
	b, err := p.read(n, 5*time.Second)
	if err != nil {
		p.t.Fatalf("read %d bytes: got % X: %v", n, b, err)
	}
	return b
}

// registers reads the answer to a read of qty registers from unit and
// returns them, failing on anything else.
func (p *rtuPeer) registers(unit, fc byte, qty uint16) []uint16 {
	p.t.Helper()
	b := p.mustRead(5 + 2*int(qty))
	checkFrame(p.t, b)
	if b[0] != unit || b[1] != fc || int(b[2]) != 2*int(qty) {
		p.t.Fatalf("answer % X: want unit %d, function %#02x, %d bytes", b, unit, fc, 2*qty)
	}
	regs := make([]uint16, qty)
	for i := range regs {
		regs[i] = uint16(b[3+2*i])<<8 | uint16(b[4+2*i])
	}
	return regs
}

// exception reads an exception answer and returns its code.
func (p *rtuPeer) exception(unit, fc byte) byte {
	p.t.Helper()
	b := p.mustRead(5)
	checkFrame(p.t, b)
	if b[0] != unit || b[1] != fc|0x80 {
		p.t.Fatalf("answer % X: want an exception to function %#02x from unit %d", b, fc, unit)
	}
	return b[2]
}

func checkFrame(t testing.TB, b []byte) {
	t.Helper()
	if got, want := uint16(b[len(b)-2])|uint16(b[len(b)-1])<<8, modbus.CRC16(b[:len(b)-2]); got != want {
		t.Fatalf("answer % X: CRC %#04x, want %#04x", b, got, want)
	}
}

// headRange is the register range covering every channel of h.
func headRange(h Head) (lo, n uint16) {
	lo, hi := uint16(math.MaxUint16), uint16(0)
	for _, ch := range h.Channels {
		lo, hi = min(lo, ch.Field.Address), max(hi, ch.Field.Address+ch.Field.Len())
	}
	return lo, hi - lo
}

func fcOf(tb modbus.Table) byte {
	if tb == modbus.HoldingRegisters {
		return 0x03
	}
	return 0x04
}

// checkSignals decodes h's channels from regs (starting at lo) with
// modbus.Field.Decode and compares them with the head's signals at elapsed.
func checkSignals(t testing.TB, h Head, regs []uint16, lo uint16, elapsed time.Duration) {
	t.Helper()
	want := h.Signals(elapsed, nil, nil)
	for i, ch := range h.Channels {
		v, err := ch.Field.Decode(regs, lo)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(v-want[i]) > encodingTolerance(ch.Field, want[i]) {
			t.Errorf("unit %d channel %d at %v: %.9g, want %.9g", h.Unit, i, elapsed, v, want[i])
		}
	}
}

// The RTU server answers a read with the head's registers (decoded with
// modbus.Field), answers exceptions as the TCP server does, and stays silent
// for other unit ids, broadcasts and frames with a wrong CRC: the answer read
// after such a frame is the answer to the request sent after it.
func TestRTUServerAnswers(t *testing.T) {
	clk := newTestClock()
	caster, kiln := casterScenario(t), kilnHead(t)
	srv := startRTU(t, RTUConfig{Baud: 115200}, []Head{caster, kiln}, clk, nil)
	if !strings.HasPrefix(srv.Path(), "/dev/pts/") {
		t.Errorf("Path() = %q, want a /dev/pts/ device", srv.Path())
	}
	p := openPeer(t, srv.Path())

	for _, e := range []time.Duration{0, 31 * time.Second, 100 * time.Second} {
		clk.Set(e)
		for _, h := range []Head{caster, kiln} {
			lo, n := headRange(h)
			p.write(readRequest(h.Unit, fcOf(h.Table), lo, n))
			checkSignals(t, h, p.registers(h.Unit, fcOf(h.Table), n), lo, e)
		}
	}

	lo, n := headRange(caster)
	good := readRequest(caster.Unit, 0x04, lo, n)
	badCRC := readRequest(caster.Unit, 0x04, lo, n)
	badCRC[7] ^= 0x01
	for _, tc := range []struct {
		name  string
		frame []byte
	}{
		{"other unit", readRequest(17, 0x04, lo, n)},
		{"broadcast", readRequest(0, 0x04, lo, n)},
		{"wrong CRC", badCRC},
	} {
		t.Run(tc.name, func(t *testing.T) {
			p.write(tc.frame, good)
			checkSignals(t, caster, p.registers(caster.Unit, 0x04, n), lo, 100*time.Second)
		})
	}

	// Exception answers (Modbus Application Protocol V1.1b3, section 7).
	for _, tc := range []struct {
		name  string
		frame []byte
		fc    byte
		want  byte
	}{
		{"beyond the last field", readRequest(1, 0x04, 3, 2), 0x04, 0x02},
		{"table not served", readRequest(1, 0x03, 0, 2), 0x03, 0x02},
		{"quantity 0", readRequest(1, 0x04, 0, 0), 0x04, 0x03},
		{"quantity 126", readRequest(2, 0x03, 0, 126), 0x03, 0x03},
		{"write single register", modbus.AppendCRC([]byte{1, 0x06, 0, 0, 0, 7}), 0x06, 0x01},
		{"write multiple registers", modbus.AppendCRC([]byte{2, 0x10, 0, 100, 0, 1, 2, 0, 7}), 0x10, 0x01},
		{"read coils", modbus.AppendCRC([]byte{1, 0x01, 0, 0, 0, 8}), 0x01, 0x01},
		// Function 0x2B has no fixed length here: the frame ends with t3.5 of silence.
		{"unknown length function", modbus.AppendCRC([]byte{1, 0x2B, 0x0E, 0x01, 0x00}), 0x2B, 0x01},
	} {
		unit := tc.frame[0]
		p.write(tc.frame)
		if got := p.exception(unit, tc.fc); got != tc.want {
			t.Errorf("%s: exception %#02x, want %#02x", tc.name, got, tc.want)
		}
	}
}

// An answer takes as long as the wire would: a read of 125 registers at
// 9600 baud is an 8-byte request, t3.5 and a 255-byte answer, (8 + 255)·11/9600
// s + 3.5·11/9600 s = 305.4 ms from the request's first byte to the answer's
// last (Modbus over Serial Line V1.02, 2.5.1: 11 bits per character). The
// measurement includes the request's write and the wake-up of this reader, a
// few hundred microseconds at most; the tolerance is ±10 %.
func TestRTUPacing(t *testing.T) {
	h := twoColour(t, 5, 1500)
	h.Extras = []Extra{{Name: "pad", Field: modbus.Field{Address: 123, Type: modbus.Float32}, Value: Constant(1)}}
	srv := startRTU(t, RTUConfig{Baud: 9600}, []Head{h}, nil, nil)
	p := openPeer(t, srv.Path())
	char := 11 * time.Second / 9600
	want := 263*char + T35(9600)
	if want < 305*time.Millisecond || want > 306*time.Millisecond {
		t.Fatalf("expected wire time %v, want 305.4 ms by the formula", want)
	}
	start := time.Now()
	p.write(readRequest(5, 0x04, 0, 125))
	p.registers(5, 0x04, 125)
	got := time.Since(start)
	if math.Abs(got.Seconds()/want.Seconds()-1) > 0.10 {
		t.Errorf("a 125-register read at 9600 baud took %v, want %v ± 10 %%", got, want)
	}
	t.Logf("125-register read at 9600 baud: %v (wire %v)", got, want)
}

func TestRTUTiming(t *testing.T) {
	// Modbus over Serial Line V1.02, 2.5.1.1: 11-bit characters; t3.5 fixed
	// at 1.750 ms above 19200 baud.
	for _, tc := range []struct {
		baud      int
		char, t35 time.Duration
	}{
		{9600, 1145833, 4010416},
		{19200, 572916, 2005208},
		{38400, 286458, 1750 * time.Microsecond},
		{115200, 95486, 1750 * time.Microsecond},
	} {
		if got := CharTime(tc.baud); got != tc.char {
			t.Errorf("CharTime(%d) = %v, want %v", tc.baud, got, tc.char)
		}
		if got := T35(tc.baud); got != tc.t35 {
			t.Errorf("T35(%d) = %v, want %v", tc.baud, got, tc.t35)
		}
	}
}

// Each fault kind acts within its window (10 s to 15 s of scenario time, on
// the injected clock) and not before or after it.
func TestRTUFaults(t *testing.T) {
	for _, tc := range []struct {
		fault Fault
		check func(t *testing.T, p *rtuPeer, req []byte, h Head)
	}{
		{Fault{Kind: Silent}, func(t *testing.T, p *rtuPeer, req []byte, h Head) {
			p.write(req, readRequest(9, 0x04, 0, 4))
			p.registers(9, 0x04, 4) // the probe answers first: the head said nothing
		}},
		{Fault{Kind: Late, Delay: 60 * time.Millisecond}, func(t *testing.T, p *rtuPeer, req []byte, h Head) {
			start := time.Now()
			p.write(req)
			p.registers(h.Unit, 0x04, 4)
			if d := time.Since(start); d < 60*time.Millisecond {
				t.Errorf("late answer after %v, want at least the 60 ms delay", d)
			}
		}},
		{Fault{Kind: CRCError}, func(t *testing.T, p *rtuPeer, req []byte, h Head) {
			p.write(req)
			b := p.mustRead(13)
			if crc := uint16(b[11]) | uint16(b[12])<<8; crc == modbus.CRC16(b[:11]) {
				t.Errorf("answer % X has a correct CRC", b)
			}
			if b[0] != h.Unit || b[1] != 0x04 || b[2] != 8 {
				t.Errorf("answer % X: want the head's registers with a bad CRC", b)
			}
		}},
		{Fault{Kind: Exception, Code: 0x06}, func(t *testing.T, p *rtuPeer, req []byte, h Head) {
			p.write(req)
			if c := p.exception(h.Unit, 0x04); c != 0x06 {
				t.Errorf("exception %#02x, want 0x06", c)
			}
		}},
		{Fault{Kind: Truncated}, func(t *testing.T, p *rtuPeer, req []byte, h Head) {
			p.write(req)
			b := p.mustRead(6) // half of the 13-byte answer
			if b[0] != h.Unit || b[1] != 0x04 || b[2] != 8 {
				t.Errorf("first half % X: want the start of the head's answer", b)
			}
			p.write(readRequest(9, 0x04, 0, 4))
			p.registers(9, 0x04, 4) // nothing more came from the head
		}},
	} {
		t.Run(tc.fault.Kind.String(), func(t *testing.T) {
			clk := newTestClock()
			h := twoColour(t, 3, 1500)
			f := tc.fault
			f.At, f.For = 10*time.Second, 5*time.Second
			h.Faults = []Fault{f}
			srv := startRTU(t, RTUConfig{Baud: 115200}, []Head{h, faultProbe(t)}, clk, nil)
			p := openPeer(t, srv.Path())
			req := readRequest(3, 0x04, 0, 4)
			healthy := func(when string) {
				t.Helper()
				p.write(req)
				if regs := p.registers(3, 0x04, 4); len(regs) != 4 {
					t.Fatalf("%s: %d registers", when, len(regs))
				}
			}
			healthy("before the window")
			clk.Advance(10*time.Second - 1)
			healthy("1 ns before the window")
			clk.Advance(1)
			tc.check(t, p, req, h)
			clk.Advance(5*time.Second - 1)
			tc.check(t, p, req, h)
			clk.Advance(1)
			healthy("after the window")
		})
	}
}

// A repeating window with Every: within each 1 s of every 4 s, every second
// request is answered with exception 0x04.
func TestRTUFaultPeriodEvery(t *testing.T) {
	clk := newTestClock()
	h := twoColour(t, 3, 1500)
	h.Faults = []Fault{{Kind: Exception, Code: 0x04, At: 2 * time.Second, For: time.Second, Period: 4 * time.Second, Every: 2}}
	srv := startRTU(t, RTUConfig{Baud: 115200}, []Head{h}, clk, nil)
	p := openPeer(t, srv.Path())
	req := readRequest(3, 0x04, 0, 4)
	failed := func() bool {
		t.Helper()
		p.write(req)
		b := p.mustRead(5)
		if b[1] == 0x84 {
			checkFrame(t, b)
			return true
		}
		p.mustRead(8) // rest of the 13-byte answer
		return false
	}
	var got []bool
	for _, at := range []time.Duration{0, 2 * time.Second, 2500 * time.Millisecond, 2900 * time.Millisecond, 3 * time.Second,
		6 * time.Second, 6 * time.Second, 7 * time.Second, 10 * time.Second} {
		clk.Set(at)
		got = append(got, failed())
	}
	// Requests in windows: 2 s, 2.5 s, 2.9 s, 6 s, 6 s, 10 s; every second one fails.
	want := []bool{false, false, true, false, false, true, false, false, true}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("failed requests %v, want %v", got, want)
	}
}

// The status word and the extras are served alongside the channels, over RTU
// and over TCP, in the tables they name, with gaps reading 0.
func TestStatusAndExtrasServed(t *testing.T) {
	h := statusHead(t)
	clkR, clkT := newTestClock(), newTestClock()
	srv := startRTU(t, RTUConfig{Baud: 115200}, []Head{h}, clkR, nil)
	p := openPeer(t, srv.Path())
	_, addr := startServer(t, []Head{h}, clkT, nil)
	r := dialRaw(t, addr)
	for _, c := range statusCases {
		clkR.Set(c.at)
		clkT.Set(c.at)
		p.write(readRequest(4, 0x04, 0, 7))
		inR := p.registers(4, 0x04, 7)
		p.write(readRequest(4, 0x03, 0, 3))
		holdR := p.registers(4, 0x03, 3)
		inT := r.read(4, 0x04, 0, 7)
		holdT := r.read(4, 0x03, 0, 3)
		for _, got := range []struct {
			via        string
			in, holdng []uint16
		}{{"rtu", inR, holdR}, {"tcp", inT, holdT}} {
			checkSignals(t, h, got.in, 0, c.at)
			if got.in[4] != 0 || got.in[5] != 0 {
				t.Errorf("%s at %v: gap registers 4..5 = %v, want 0", got.via, c.at, got.in[4:6])
			}
			if got.in[6] != c.raw6 {
				t.Errorf("%s at %v: head temperature register %d, want %d", got.via, c.at, got.in[6], c.raw6)
			}
			v, _ := h.Extras[0].Field.Decode(got.in, 0)
			if math.Abs(v-c.headK) > 0.05 {
				t.Errorf("%s at %v: head temperature %.2f K, want %.2f K", got.via, c.at, v, c.headK)
			}
			if [3]uint16(got.holdng) != c.holdng {
				t.Errorf("%s at %v: holding registers %v, want %v", got.via, c.at, got.holdng, c.holdng)
			}
			word, _ := h.Status.Field.Decode(got.holdng, 0)
			if uint16(word) != c.word {
				t.Errorf("%s at %v: status word %#04x, want %#04x", got.via, c.at, uint16(word), c.word)
			}
		}
	}
	// The holding table ends at the status word.
	p.write(readRequest(4, 0x03, 0, 4))
	if c := p.exception(4, 0x03); c != 0x02 {
		t.Errorf("read past the status word: exception %#02x, want 0x02", c)
	}
}

func TestRTULink(t *testing.T) {
	dir := t.TempDir()
	link := filepath.Join(dir, "line-a")
	h := twoColour(t, 1, 1500)

	srv := startRTU(t, RTUConfig{Link: link, Baud: 19200}, []Head{h}, nil, nil)
	if target, err := os.Readlink(link); err != nil || target != srv.Path() {
		t.Fatalf("link %s -> %q (%v), want %s", link, target, err, srv.Path())
	}
	// The link works as the device: a read through it is answered.
	p := openPeer(t, link)
	p.write(readRequest(1, 0x04, 0, 4))
	p.registers(1, 0x04, 4)

	// A live link is not taken over by a second line.
	other, err := NewRTUServer(RTUConfig{Link: link, Baud: 19200}, []Head{h}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := other.Start(t.Context()); err == nil || !strings.Contains(err.Error(), "already points to "+srv.Path()) {
		t.Errorf("second line on a live link: %v", err)
	}
	other.Close()
	if target, _ := os.Readlink(link); target != srv.Path() {
		t.Errorf("after the refused start the link points to %q, want %s", target, srv.Path())
	}

	if err := srv.Close(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Lstat(link); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("link still there after Close: %v", err)
	}

	// A stale link is replaced.
	if err := os.Symlink(filepath.Join(dir, "gone"), link); err != nil {
		t.Fatal(err)
	}
	srv2 := startRTU(t, RTUConfig{Link: link, Baud: 19200}, []Head{h}, nil, nil)
	if target, _ := os.Readlink(link); target != srv2.Path() {
		t.Errorf("stale link not replaced: points to %q, want %s", target, srv2.Path())
	}

	// A regular file is refused and left alone.
	file := filepath.Join(dir, "file")
	if err := os.WriteFile(file, []byte("keep"), 0o600); err != nil {
		t.Fatal(err)
	}
	srv3, _ := NewRTUServer(RTUConfig{Link: file, Baud: 19200}, []Head{h}, nil)
	if err := srv3.Start(t.Context()); err == nil || !strings.Contains(err.Error(), "is not a symbolic link") {
		t.Errorf("link over a regular file: %v", err)
	}
	srv3.Close()
	if b, _ := os.ReadFile(file); string(b) != "keep" {
		t.Errorf("regular file changed to %q", b)
	}
}

func TestNewRTUServerValidates(t *testing.T) {
	a := twoColour(t, 1, 1500)
	b := twoColour(t, 1, 1500)
	b.Name = "second"
	zero := twoColour(t, 0, 1500)
	high := twoColour(t, 248, 1500)
	for _, tc := range []struct {
		name  string
		cfg   RTUConfig
		heads []Head
		want  string
	}{
		{"no baud", RTUConfig{}, []Head{a}, "sim: RTU line (no link): baud: 0 outside 50..4000000"},
		{"no heads", RTUConfig{Baud: 9600, Link: "/tmp/x"}, nil, "sim: RTU line /tmp/x: no heads"},
		{"unit 0", RTUConfig{Baud: 9600}, []Head{zero}, `heads[0]: head "strand" (unit 0): unit: 0 outside 1..247`},
		{"unit 248", RTUConfig{Baud: 9600}, []Head{high}, `unit: 248 outside 1..247`},
		{"duplicate unit", RTUConfig{Baud: 9600}, []Head{a, b}, `heads[1]: head "second": unit id 1 already used by heads[0] "strand"`},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := NewRTUServer(tc.cfg, tc.heads, nil)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("NewRTUServer: %v, want an error containing %q", err, tc.want)
			}
		})
	}
}

func TestRTUServerLifecycle(t *testing.T) {
	h := twoColour(t, 1, 1500)
	srv, err := NewRTUServer(RTUConfig{Baud: 19200}, []Head{h}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if srv.Path() != "" {
		t.Errorf("Path() before Start = %q, want empty", srv.Path())
	}
	ctx, cancel := context.WithCancel(t.Context())
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	if err := srv.Start(ctx); err == nil || !strings.Contains(err.Error(), "already started") {
		t.Errorf("second Start: %v", err)
	}
	path := srv.Path()
	cancel() // closes the server
	if err := srv.Close(); err != nil {
		t.Errorf("Close after cancel: %v", err)
	}
	if err := srv.Start(t.Context()); err == nil || !strings.Contains(err.Error(), "server closed") {
		t.Errorf("Start after Close: %v", err)
	}
	// The device is gone, or (if another pseudo-terminal took its number at
	// once) it does not answer.
	if fd, err := syscall.Open(path, syscall.O_RDWR|syscall.O_NOCTTY|syscall.O_NONBLOCK|syscall.O_CLOEXEC, 0); err == nil {
		f := os.NewFile(uintptr(fd), path)
		defer f.Close()
		p := &rtuPeer{t: t, f: f}
		p.write(readRequest(1, 0x04, 0, 4))
		if b, err := p.read(1, 50*time.Millisecond); err == nil {
			t.Errorf("closed line answered % X", b)
		}
	}
}

// pymodbusReadRTU runs testdata/read_pymodbus_rtu.py (Debian's
// python3-pymodbus, ModbusSerialClient with the RTU framer) on device and
// returns its registers, or the exception code it saw.
func pymodbusReadRTU(t *testing.T, device string, baud int, unit uint8, table modbus.Table, start, count uint16) ([]uint16, int) {
	t.Helper()
	return runPymodbusReader(t, "testdata/read_pymodbus_rtu.py", device, strconv.Itoa(baud),
		strconv.Itoa(int(unit)), table.String(), strconv.Itoa(int(start)), strconv.Itoa(int(count)))
}

// An independent Modbus RTU client (Debian's python3-pymodbus 3.0) reads the
// same registers over the simulated line as the Go decoder gets, and sees the
// documented exception for a read past the head's last register.
func TestRTUServerWithPymodbus(t *testing.T) {
	if err := exec.Command("/usr/bin/python3", "-c", "import pymodbus.client, serial").Run(); err != nil {
		modbustest.RequireReal(t, "Debian's python3-pymodbus (with pyserial) is not available: %v", err)
	}
	clk := newTestClock()
	caster, kiln, status := casterScenario(t), kilnHead(t), statusHead(t)
	srv := startRTU(t, RTUConfig{Baud: 19200}, []Head{caster, kiln, status}, clk, nil)
	e := 31 * time.Second // inside the clouding ramp and the temperature ramp
	clk.Advance(e)
	p := openPeer(t, srv.Path())
	for _, h := range []Head{caster, kiln} {
		lo, n := headRange(h)
		regs, exc := pymodbusReadRTU(t, srv.Path(), 19200, h.Unit, h.Table, lo, n)
		if exc != 0 || len(regs) != int(n) {
			t.Fatalf("unit %d: pymodbus read %v, exception %d", h.Unit, regs, exc)
		}
		checkSignals(t, h, regs, lo, e)
		p.raw()
		p.write(readRequest(h.Unit, fcOf(h.Table), lo, n))
		if goRegs := p.registers(h.Unit, fcOf(h.Table), n); fmt.Sprint(goRegs) != fmt.Sprint(regs) {
			t.Errorf("unit %d: pymodbus read %v, the raw Go peer %v", h.Unit, regs, goRegs)
		}
	}
	// The status word and the setting read back, in the holding table.
	regs, exc := pymodbusReadRTU(t, srv.Path(), 19200, 4, modbus.HoldingRegisters, 0, 3)
	// At 31 s only bit 15 is set (see statusCases).
	if exc != 0 || fmt.Sprint(regs) != fmt.Sprint([]uint16{850, 0, 0x8000}) {
		t.Errorf("status head holding registers via pymodbus: %v (exception %d), want [850 0 32768]", regs, exc)
	}
	if _, exc := pymodbusReadRTU(t, srv.Path(), 19200, 1, modbus.InputRegisters, 3, 2); exc != 0x02 {
		t.Errorf("read past the last register: pymodbus saw exception %d, want 2", exc)
	}
}
