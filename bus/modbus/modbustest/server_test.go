package modbustest

import (
	"bytes"
	"io"
	"net"
	"testing"
	"time"

	"glowgate/bus/modbus"
)

// exchange sends one raw ADU and reads the answer of the length its MBAP
// header gives.
func exchange(t *testing.T, c net.Conn, adu []byte) []byte {
	t.Helper()
	c.SetDeadline(time.Now().Add(5 * time.Second))
	if _, err := c.Write(adu); err != nil {
		t.Fatal(err)
	}
	hdr := make([]byte, 7)
	if _, err := io.ReadFull(c, hdr); err != nil {
		t.Fatal(err)
	}
	body := make([]byte, int(hdr[4])<<8|int(hdr[5])-1)
	if _, err := io.ReadFull(c, body); err != nil {
		t.Fatal(err)
	}
	return append(hdr, body...)
}

// The PDUs are the examples of the Modbus Application Protocol V1.1b3: 6.3
// (registers 108..110 = 022B 0000 0064) and 6.4 (input register 9 = 000A);
// the MBAP header around them (transaction id, protocol 0, length, unit) is
// built by hand from the Modbus Messaging on TCP/IP Implementation Guide
// V1.0b, 3.1.3.
func TestServerAnswersSpecificationExamples(t *testing.T) {
	s := NewServer(t)
	s.Set(0x11, modbus.HoldingRegisters, 0x6B, 0x022B, 0x0000, 0x0064)
	s.Set(0x11, modbus.InputRegisters, 0x08, 0x000A)
	c, err := net.Dial("tcp", s.Addr())
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()

	cases := []struct {
		name      string
		req, want []byte
	}{
		{"6.3 read holding registers",
			[]byte{0x00, 0x01, 0x00, 0x00, 0x00, 0x06, 0x11, 0x03, 0x00, 0x6B, 0x00, 0x03},
			[]byte{0x00, 0x01, 0x00, 0x00, 0x00, 0x09, 0x11, 0x03, 0x06, 0x02, 0x2B, 0x00, 0x00, 0x00, 0x64}},
		{"6.4 read input registers",
			[]byte{0x12, 0x34, 0x00, 0x00, 0x00, 0x06, 0x11, 0x04, 0x00, 0x08, 0x00, 0x01},
			[]byte{0x12, 0x34, 0x00, 0x00, 0x00, 0x05, 0x11, 0x04, 0x02, 0x00, 0x0A}},
		{"unset register: exception 02",
			[]byte{0x00, 0x02, 0x00, 0x00, 0x00, 0x06, 0x11, 0x04, 0x00, 0x08, 0x00, 0x02},
			[]byte{0x00, 0x02, 0x00, 0x00, 0x00, 0x03, 0x11, 0x84, 0x02}},
		{"quantity 0: exception 03",
			[]byte{0x00, 0x03, 0x00, 0x00, 0x00, 0x06, 0x11, 0x03, 0x00, 0x6B, 0x00, 0x00},
			[]byte{0x00, 0x03, 0x00, 0x00, 0x00, 0x03, 0x11, 0x83, 0x03}},
		{"quantity 126: exception 03",
			[]byte{0x00, 0x04, 0x00, 0x00, 0x00, 0x06, 0x11, 0x03, 0x00, 0x00, 0x00, 0x7E},
			[]byte{0x00, 0x04, 0x00, 0x00, 0x00, 0x03, 0x11, 0x83, 0x03}},
		{"read coils: exception 01",
			[]byte{0x00, 0x05, 0x00, 0x00, 0x00, 0x06, 0x11, 0x01, 0x00, 0x13, 0x00, 0x13},
			[]byte{0x00, 0x05, 0x00, 0x00, 0x00, 0x03, 0x11, 0x81, 0x01}},
		{"unknown unit: exception 0B",
			[]byte{0x00, 0x06, 0x00, 0x00, 0x00, 0x06, 0x12, 0x04, 0x00, 0x08, 0x00, 0x01},
			[]byte{0x00, 0x06, 0x00, 0x00, 0x00, 0x03, 0x12, 0x84, 0x0B}},
	}
	for _, tc := range cases {
		if got := exchange(t, c, tc.req); !bytes.Equal(got, tc.want) {
			t.Errorf("%s: answer % X, want % X", tc.name, got, tc.want)
		}
	}
	if n := s.Requests(); n != len(cases) {
		t.Errorf("Requests() = %d, want %d", n, len(cases))
	}
}

func TestServerFaults(t *testing.T) {
	s := NewServer(t)
	s.Set(1, modbus.InputRegisters, 0, 1, 2)
	c, err := net.Dial("tcp", s.Addr())
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	req := []byte{0x00, 0x07, 0x00, 0x00, 0x00, 0x06, 0x01, 0x04, 0x00, 0x00, 0x00, 0x02}

	s.SetFault(1, Fault{Kind: Short, Times: 1})
	if got, want := exchange(t, c, req), []byte{0, 7, 0, 0, 0, 5, 1, 4, 2, 0, 1}; !bytes.Equal(got, want) {
		t.Errorf("short: % X, want % X", got, want)
	}
	s.SetFault(1, Fault{Kind: WrongTxID, Times: 1})
	if got, want := exchange(t, c, req), []byte{0, 8, 0, 0, 0, 7, 1, 4, 4, 0, 1, 0, 2}; !bytes.Equal(got, want) {
		t.Errorf("wrong transaction id: % X, want % X", got, want)
	}
	s.SetFault(1, Fault{Kind: Exception, Code: 0x04, Times: 2})
	for range 2 {
		if got, want := exchange(t, c, req), []byte{0, 7, 0, 0, 0, 3, 1, 0x84, 0x04}; !bytes.Equal(got, want) {
			t.Errorf("exception: % X, want % X", got, want)
		}
	}
	if got, want := exchange(t, c, req), []byte{0, 7, 0, 0, 0, 7, 1, 4, 4, 0, 1, 0, 2}; !bytes.Equal(got, want) {
		t.Errorf("after the fault ran out: % X, want % X", got, want)
	}
	s.SetFault(1, Fault{Kind: Drop})
	c.Write(req)
	if n, err := c.Read(make([]byte, 1)); err == nil {
		t.Errorf("dropped connection still answered %d bytes", n)
	}
}

func TestServerDropsNonModbus(t *testing.T) {
	s := NewServer(t)
	c, err := net.Dial("tcp", s.Addr())
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	c.SetDeadline(time.Now().Add(5 * time.Second))
	c.Write([]byte("GET / HTTP/1.1\r\n\r\n"))
	if n, err := c.Read(make([]byte, 1)); err == nil {
		t.Errorf("server answered %d bytes to HTTP", n)
	}
	if n := s.Requests(); n != 0 {
		t.Errorf("Requests() = %d, want 0", n)
	}
}

func TestSetRejectsOverflow(t *testing.T) {
	ft := &fakeTB{TB: t}
	s := NewPipeServer(t)
	s.t = ft
	s.Set(1, modbus.InputRegisters, 65535, 1, 2)
	s.Set(1, modbus.Table(5), 0, 1)
	if ft.errors != 2 {
		t.Errorf("%d errors reported, want 2", ft.errors)
	}
}

type fakeTB struct {
	testing.TB
	errors int
}

func (f *fakeTB) Errorf(string, ...any) { f.errors++ }
