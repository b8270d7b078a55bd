package modbus_test

import (
	"encoding/binary"
	"errors"
	"io"
	"os"
	"sync"
	"syscall"
	"testing"
	"time"

	"glowgate/bus/modbus/modbustest"
)

// rtuDevice is a Modbus RTU device for tests, on one end of a pty pair: it
// reads request frames and answers them one at a time, as a device does,
// each as the next scripted behaviour says (a normal answer when none is
// scripted). Register r of any unit holds 0x1000 + r, so that an answer
// shows which registers it carries.
//
// Framing and CRC are written here by hand from Modbus over Serial Line
// V1.02 (2.5.1.1 frame, 6.2.2 CRC), so that they share no code with the
// client under test; the pty is opened with package os, not with the
// client's serial library.
type rtuDevice struct {
	t testing.TB
	f *os.File

	mu       sync.Mutex
	script   []devBehaviour
	requests [][]byte      // every request frame received, in order
	arrived  []time.Time   // when each request's last byte was read
	answered []time.Time   // when each answer was written (zero if none)
	quit     chan struct{} // closed by stop
	done     chan struct{} // closed when serve returns
}

// rtuReq is one request frame as the device parsed it.
type rtuReq struct {
	raw       []byte
	unit, fc  byte
	addr, qty uint16
}

// devBehaviour answers one request; it may read further requests itself
// (d.next) to model a device that answers late.
type devBehaviour func(d *rtuDevice, req rtuReq)

// startDevice opens path (one end of a pty pair) and serves it until the
// file is closed at cleanup or the pair goes away.
func startDevice(t testing.TB, path string) *rtuDevice {
	t.Helper()
	f, err := os.OpenFile(path, os.O_RDWR|syscall.O_NOCTTY, 0)
	if err != nil {
		t.Fatalf("open device end %s: %v", path, err)
	}
	d := &rtuDevice{t: t, f: f, quit: make(chan struct{}), done: make(chan struct{})}
	go d.serve()
	t.Cleanup(d.stop)
	return d
}

// stop closes the device's end and waits for its goroutine.
func (d *rtuDevice) stop() {
	select {
	case <-d.quit:
		return
	default:
	}
	close(d.quit)
	d.f.Close()
	<-d.done
}

// do scripts behaviours for the next requests, in order.
func (d *rtuDevice) do(b ...devBehaviour) {
	d.mu.Lock()
	d.script = append(d.script, b...)
	d.mu.Unlock()
}

// received returns copies of the request frames received so far.
func (d *rtuDevice) received() [][]byte {
	d.mu.Lock()
	defer d.mu.Unlock()
	out := make([][]byte, len(d.requests))
	for i, r := range d.requests {
		out[i] = append([]byte(nil), r...)
	}
	return out
}

func (d *rtuDevice) serve() {
	defer close(d.done)
	for {
		req, ok := d.next()
		if !ok {
			return
		}
		d.handle(req)
	}
}

// handle answers req with the next scripted behaviour.
func (d *rtuDevice) handle(req rtuReq) {
	d.mu.Lock()
	b := answer
	if len(d.script) > 0 {
		b = d.script[0]
		d.script = d.script[1:]
	}
	d.mu.Unlock()
	b(d, req)
}

// next reads one request frame: address, function, then four bytes of
// address and quantity for functions 03 and 04, then the CRC.
func (d *rtuDevice) next() (rtuReq, bool) {
	var b [8]byte
	if _, err := io.ReadFull(d.f, b[:]); err != nil {
		if !errors.Is(err, os.ErrClosed) && !errors.Is(err, syscall.EIO) && !errors.Is(err, io.EOF) {
			d.t.Errorf("device: read request: %v", err)
		}
		return rtuReq{}, false
	}
	now := time.Now()
	if got, want := binary.LittleEndian.Uint16(b[6:]), testCRC(b[:6]); got != want {
		d.t.Errorf("device: request % X: CRC %04X, want %04X", b, got, want)
	}
	d.mu.Lock()
	d.requests = append(d.requests, append([]byte(nil), b[:]...))
	d.arrived = append(d.arrived, now)
	d.answered = append(d.answered, time.Time{})
	d.mu.Unlock()
	return rtuReq{raw: b[:], unit: b[0], fc: b[1],
		addr: binary.BigEndian.Uint16(b[2:]), qty: binary.BigEndian.Uint16(b[4:])}, true
}

// write sends one frame as is.
//
// The answer is stamped just before the write: on a pty the reader can
// take the bytes, and start its t3.5, before Write returns, so a stamp
// taken after it can fall behind the true end of the frame by however
// long this goroutine waits for the CPU, and the silence measured from it
// would come out short on a loaded machine.
func (d *rtuDevice) write(frame []byte) {
	d.mu.Lock()
	d.answered[len(d.answered)-1] = time.Now()
	d.mu.Unlock()
	if _, err := d.f.Write(frame); err != nil && !errors.Is(err, os.ErrClosed) && !errors.Is(err, syscall.EIO) {
		d.t.Errorf("device: write: %v", err)
	}
}

// testCRC is CRC-16/MODBUS computed bit by bit as Modbus over Serial Line
// V1.02, 6.2.2 describes it: preset 0xFFFF; for each byte XOR it into the
// low byte, then eight times shift right, XORing 0xA001 when the bit
// shifted out was 1.
func testCRC(b []byte) uint16 {
	crc := uint16(0xFFFF)
	for _, x := range b {
		crc ^= uint16(x)
		for range 8 {
			lsb := crc & 1
			crc >>= 1
			if lsb == 1 {
				crc ^= 0xA001
			}
		}
	}
	return crc
}

// frame appends the CRC, low byte first.
func frame(b ...byte) []byte {
	return binary.LittleEndian.AppendUint16(b, testCRC(b))
}

// registers answers req from unit with n registers from its address on.
func registers(unit byte, req rtuReq, n int) []byte {
	b := []byte{unit, req.fc, byte(2 * n)}
	for i := range n {
		b = binary.BigEndian.AppendUint16(b, 0x1000+req.addr+uint16(i))
	}
	return frame(b...)
}

// Behaviours.

func answer(d *rtuDevice, req rtuReq) { d.write(registers(req.unit, req, int(req.qty))) }

func silent(d *rtuDevice, req rtuReq) {}

func exceptionWith(code byte) devBehaviour {
	return func(d *rtuDevice, req rtuReq) { d.write(frame(req.unit, req.fc|0x80, code)) }
}

func badCRC(d *rtuDevice, req rtuReq) {
	f := registers(req.unit, req, int(req.qty))
	f[len(f)-1] ^= 0x5A
	d.write(f)
}

func truncated(d *rtuDevice, req rtuReq) { d.write(registers(req.unit, req, int(req.qty))[:5]) }

func wrongUnit(d *rtuDevice, req rtuReq) { d.write(registers(req.unit+1, req, int(req.qty))) }

func wrongCount(d *rtuDevice, req rtuReq) { d.write(registers(req.unit, req, int(req.qty)-1)) }

func oddByteCount(d *rtuDevice, req rtuReq) { d.write(frame(req.unit, req.fc, 3, 0, 1, 2)) }

func unknownFunction(d *rtuDevice, req rtuReq) { d.write(frame(req.unit, 0x10, 0, 0, 0, 1)) }

// lateAfter answers once release is closed (the client has given up
// meanwhile), before reading the next request.
func lateAfter(release <-chan struct{}) devBehaviour {
	return func(d *rtuDevice, req rtuReq) {
		select {
		case <-release:
		case <-d.quit:
			return
		}
		answer(d, req)
	}
}

// lateAfterDropNext is lateAfter by a device that then drops the next
// request (it was busy when it came).
func lateAfterDropNext(release <-chan struct{}) devBehaviour {
	return func(d *rtuDevice, req rtuReq) {
		lateAfter(release)(d, req)
		d.next()
	}
}

// lateDuringNext holds its answer until the next request has arrived, sends
// it then, and answers the next request as scripted: the late answer lands
// inside the next transaction.
func lateDuringNext(d *rtuDevice, req rtuReq) {
	next, ok := d.next()
	if !ok {
		return
	}
	answer(d, req)
	d.handle(next)
}

// lateDuringNextDropNext is lateDuringNext by a device that then drops the
// request it received while busy.
func lateDuringNextDropNext(d *rtuDevice, req rtuReq) {
	if _, ok := d.next(); !ok {
		return
	}
	answer(d, req)
}

// ptyDevice starts a pty pair and a device on its end A, and returns the
// pair (the client opens B).
func ptyDevice(t testing.TB) (*modbustest.PtyPair, *rtuDevice) {
	t.Helper()
	p := modbustest.NewPtyPair(t)
	return p, startDevice(t, p.A)
}
