package sim

import (
	"encoding/binary"
	"fmt"
	"io"
	"log/slog"
	"slices"
	"strings"
	"testing"
	"time"

	"glowgate/bus/modbus"
)

func TestInWindow(t *testing.T) {
	s := time.Second
	for _, tc := range []struct {
		at, length, period, elapsed time.Duration
		want                        bool
	}{
		{0, 0, 0, 0, true},                           // from the start to the end
		{0, 0, 0, time.Hour, true},                   //
		{10 * s, 0, 0, 10*s - 1, false},              // before At
		{10 * s, 0, 0, 10 * s, true},                 // At itself
		{10 * s, 5 * s, 0, 15*s - 1, true},           // last instant of the window
		{10 * s, 5 * s, 0, 15 * s, false},            // the window is half open
		{10 * s, 5 * s, 0, time.Hour, false},         // once only
		{10 * s, 5 * s, 60 * s, 70 * s, true},        // repeated a period later
		{10 * s, 5 * s, 60 * s, 75 * s, false},       //
		{10 * s, 5 * s, 60 * s, 3610 * s, true},      // 60 periods later
		{10 * s, 60 * s, 60 * s, 1000 * s, true},     // For = Period: always on after At
		{10 * s, 5 * s, 60 * s, 9 * s, false},        // no window before At, even repeating
		{0, time.Millisecond, s, 5*s + 999999, true}, // 1 ms of every second
	} {
		if got := inWindow(tc.at, tc.length, tc.period, tc.elapsed); got != tc.want {
			t.Errorf("inWindow(at %v, for %v, period %v, %v) = %v, want %v", tc.at, tc.length, tc.period, tc.elapsed, got, tc.want)
		}
	}
}

func TestFaultValidate(t *testing.T) {
	for _, tc := range []struct {
		f    Fault
		want string // substring of the error; empty for valid
	}{
		{Fault{Kind: Silent}, ""},
		{Fault{Kind: Late, Delay: time.Second, At: time.Minute, For: time.Second, Period: time.Hour, Every: 3}, ""},
		{Fault{Kind: CRCError, Every: 1}, ""},
		{Fault{Kind: Exception, Code: 0x0B}, ""},
		{Fault{Kind: Truncated, For: time.Second, Period: time.Second}, ""},
		{Fault{}, "kind: unknown fault kind 0"},
		{Fault{Kind: 9}, "kind: unknown fault kind 9"},
		{Fault{Kind: Exception, Code: 0x05}, "code: exception code 0x05 is not one of 01, 02, 03, 04, 06, 0A, 0B"},
		{Fault{Kind: Exception}, "code: exception code 0x00"},
		{Fault{Kind: Silent, Code: 2}, "code: 0x02 given for a silent fault"},
		{Fault{Kind: Late}, "delay: 0s, want a late fault's delay above 0"},
		{Fault{Kind: Truncated, Delay: time.Second}, "delay: 1s given for a truncated fault"},
		{Fault{Kind: Silent, Every: -1}, "every: -1, want 0 or more"},
		{Fault{Kind: Silent, At: -time.Second}, "at: -1s is negative"},
		{Fault{Kind: Silent, For: -time.Second}, "for: -1s is negative"},
		{Fault{Kind: Silent, Period: -time.Second, For: time.Second}, "period: -1s is negative"},
		{Fault{Kind: Silent, Period: time.Second}, "period: 1s repeats a window that never ends"},
		{Fault{Kind: Silent, Period: time.Second, For: 2 * time.Second}, "for: 2s is longer than the period 1s"},
	} {
		err := tc.f.Validate()
		switch {
		case tc.want == "" && err != nil:
			t.Errorf("%+v: %v, want valid", tc.f, err)
		case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
			t.Errorf("%+v: %v, want an error containing %q", tc.f, err, tc.want)
		}
	}
}

func TestFaultKindNames(t *testing.T) {
	for _, k := range []FaultKind{Silent, Late, CRCError, Exception, Truncated} {
		got, err := ParseFaultKind(k.String())
		if err != nil || got != k {
			t.Errorf("ParseFaultKind(%q) = %v, %v; want %v", k.String(), got, err, k)
		}
	}
	if _, err := ParseFaultKind("flaky"); err == nil || !strings.Contains(err.Error(), `unknown fault kind "flaky"`) {
		t.Errorf("ParseFaultKind(flaky): %v", err)
	}
	if s := FaultKind(0).String(); s != "FaultKind(0)" {
		t.Errorf("FaultKind(0).String() = %q", s)
	}
}

// Head.Validate checks the status word, the extras and the faults, and the
// overlap of every field within its own table.
func TestHeadValidateExtras(t *testing.T) {
	holding := modbus.HoldingRegisters
	bad := modbus.Table(7)
	for _, tc := range []struct {
		name   string
		modify func(h *Head)
		want   string
	}{
		{"status and extras", func(h *Head) {}, ""},
		{"status in the other table over a channel's address", func(h *Head) {
			h.Status.Table = &holding
			h.Status.Field.Address = 0
		}, ""},
		{"status over a channel", func(h *Head) { h.Status.Field.Address = 3 },
			"status.field: input registers 3..3 overlap channels[1] at 2..3"},
		{"extra over the status word", func(h *Head) { h.Extras[0].Field.Address = 3; h.Status.Field.Address = 4 },
			"extras[0].field: input registers 3..4 overlap channels[1] at 2..3"},
		{"extras overlapping", func(h *Head) { h.Extras[1].Field = modbus.Field{Address: 11, Type: modbus.Float32} },
			"extras[1].field: input registers 11..12 overlap extras[0] at 10..11"},
		{"status not uint16", func(h *Head) { h.Status.Field.Type = modbus.Int16 }, "status.field: register type int16, want uint16"},
		{"status scaled", func(h *Head) { h.Status.Field.Scale = 2 }, "status.field: scale 2 and offset 0, want none"},
		{"status bit 16", func(h *Head) { h.Status.Bits[0].Bit = 16 }, "status.bits[0].bit: 16 outside 0..15"},
		{"status episode window", func(h *Head) { h.Status.Bits[0].Period = time.Second }, "status.bits[0].period: 1s repeats a window that never ends"},
		{"status table", func(h *Head) { h.Status.Table = &bad }, "status.table: unknown register table 7"},
		{"extra table", func(h *Head) { h.Extras[1].Table = &bad }, "extras[1].table: unknown register table 7"},
		{"extra profile", func(h *Head) {
			h.Extras[0].Value.Start = 0
			h.Extras[0].Value.Segments = []Segment{{Kind: Hold, Duration: -1}}
		},
			"extras[0].value: segments[0]: hold duration -1ns is negative"},
		{"extra field type", func(h *Head) { h.Extras[1].Field.Type = 42 }, "extras[1].field: register type Type(42) has no length"},
		{"extra beyond 65535", func(h *Head) { h.Extras[0].Field.Address = 65535 }, "extras[0].field: registers 65535..65536 reach beyond address 65535"},
		{"fault", func(h *Head) { h.Faults = []Fault{{Kind: Silent}, {Kind: Late}} }, "faults[1].delay: 0s"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			h := twoColour(t, 3, 1500)
			h.Status = &StatusWord{Field: modbus.Field{Address: 8, Type: modbus.Uint16}, Bits: []BitEpisode{{Bit: 1}}}
			h.Extras = []Extra{
				{Field: modbus.Field{Address: 10, Type: modbus.Float32}, Value: Constant(300)},
				{Field: modbus.Field{Address: 12, Type: modbus.Uint16, Scale: 0.001}, Value: Constant(0.9)},
			}
			tc.modify(&h)
			err := h.Validate()
			switch {
			case tc.want == "" && err != nil:
				t.Fatalf("Validate() = %v, want nil", err)
			case tc.want != "" && (err == nil || !strings.Contains(err.Error(), tc.want)):
				t.Fatalf("Validate() = %v, want an error containing %q", err, tc.want)
			}
		})
	}
}

// NewServer and NewRTUServer copy the status word, extras and faults: the
// caller's later changes do not reach them.
func TestServersCopyStatusExtrasFaults(t *testing.T) {
	h := statusHead(t)
	h.Faults = []Fault{{Kind: Exception, Code: 0x04, At: time.Hour}}
	served, _, err := servedHeads([]Head{h}, discardLogger(), nil)
	if err != nil {
		t.Fatal(err)
	}
	h.Status.Bits[0].Bit = 9
	*h.Status.Table = modbus.InputRegisters
	h.Extras[0].Value.Segments[0].Value = 1
	*h.Extras[1].Table = modbus.InputRegisters
	h.Faults[0].At = 0
	got := served[4].head
	if got.Status.Bits[0].Bit != 0 || *got.Status.Table != modbus.HoldingRegisters ||
		got.Extras[0].Value.Segments[0].Value != 323 || *got.Extras[1].Table != modbus.HoldingRegisters ||
		got.Faults[0].At != time.Hour {
		t.Errorf("served head changed with the caller's: %+v", got)
	}
}

// Whatever PDU arrives, answer gives either an exception to its function or
// the registers a well-formed read asked for, and never panics.
func FuzzAnswer(f *testing.F) {
	for _, seed := range [][]byte{
		{0x04, 0, 0, 0, 7}, {0x03, 0, 0, 0, 3}, {0x04, 0, 0, 0, 0}, {0x04, 0xff, 0xff, 0, 1},
		{0x06, 0, 0, 0, 1}, {0x04}, {0x04, 0, 0, 0, 125}, {0x2B, 0x0E},
	} {
		f.Add(seed)
	}
	served, _, err := servedHeads([]Head{statusHead(f)}, discardLogger(), nil)
	if err != nil {
		f.Fatal(err)
	}
	h := served[4]
	f.Fuzz(func(t *testing.T, req []byte) {
		if len(req) == 0 {
			return // both servers hand answer at least the function code
		}
		resp := h.answer(nil, req, testEpoch, 3*time.Second)
		fc := req[0]
		switch {
		case len(resp) == 2 && resp[0] == fc|0x80:
			if c := resp[1]; c != 0x01 && c != 0x02 && c != 0x03 && c != 0x04 {
				t.Fatalf("request % X: exception code %#02x", req, c)
			}
		case (fc == 0x03 || fc == 0x04) && len(req) == 5:
			qty := int(req[3])<<8 | int(req[4])
			if resp[0] != fc || int(resp[1]) != 2*qty || len(resp) != 2+2*qty {
				t.Fatalf("request % X: answer % X", req, resp)
			}
		default:
			t.Fatalf("request % X: answer % X", req, resp)
		}
	})
}

// frameLen never asks for more than an RTU frame may hold, nor panics.
func FuzzFrameLen(f *testing.F) {
	f.Add([]byte{1, 0x10, 0, 0, 0, 1, 2, 0, 7})
	f.Add([]byte{1, 0x03})
	f.Fuzz(func(t *testing.T, b []byte) {
		if n := frameLen(b); n < 0 || n > 9+255 {
			t.Fatalf("frameLen(% X) = %d", b, n)
		}
	})
}

func discardLogger() *slog.Logger { return slog.New(slog.DiscardHandler) }

// faultProbe is a fault-free head on the same line, whose answer shows that a
// faulty head's request went unanswered.
func faultProbe(t testing.TB) Head {
	h := twoColour(t, 9, 1600)
	h.Name = "probe"
	return h
}

// Faults on Modbus TCP: the same windows, with TCP's forms of each kind.
func TestServerFaults(t *testing.T) {
	for _, tc := range []struct {
		fault Fault
		check func(t *testing.T, r *rawConn)
	}{
		{Fault{Kind: Silent}, func(t *testing.T, r *rawConn) {
			// The request goes unanswered; the next one, to another head on
			// the same connection, is answered.
			r.txn++
			r.conn.Write(tcpRequest(r.txn, 3, 0x04, 0, 4))
			if regs := r.read(9, 0x04, 0, 4); len(regs) != 4 {
				t.Fatalf("probe: %d registers", len(regs))
			}
		}},
		{Fault{Kind: Late, Delay: 60 * time.Millisecond}, func(t *testing.T, r *rawConn) {
			start := time.Now()
			r.read(3, 0x04, 0, 4)
			if d := time.Since(start); d < 60*time.Millisecond {
				t.Errorf("late answer after %v, want at least the 60 ms delay", d)
			}
		}},
		{Fault{Kind: Exception, Code: 0x0A}, func(t *testing.T, r *rawConn) {
			fc, data, err := r.send(3, 0x04, 0, 0, 0, 4)
			if err != nil || fc != 0x84 || len(data) != 1 || data[0] != 0x0A {
				t.Errorf("answer fc %#x data % x (%v), want exception 0x0A", fc, data, err)
			}
		}},
		{Fault{Kind: Truncated}, func(t *testing.T, r *rawConn) {
			r.txn++
			r.conn.Write(tcpRequest(r.txn, 3, 0x04, 0, 4))
			r.conn.SetDeadline(time.Now().Add(5 * time.Second))
			b, err := io.ReadAll(r.conn)
			// The whole answer is 7 + 2 + 8 bytes; half of it arrives, then EOF.
			if err != nil || len(b) != 8 {
				t.Errorf("read % X (%v), want 8 bytes and the connection closed", b, err)
			}
		}},
	} {
		t.Run(tc.fault.Kind.String(), func(t *testing.T) {
			clk := newTestClock()
			h := twoColour(t, 3, 1500)
			f := tc.fault
			f.At, f.For = 10*time.Second, 5*time.Second
			h.Faults = []Fault{f}
			_, addr := startServer(t, []Head{h, faultProbe(t)}, clk, nil)
			healthy := func(when string) {
				t.Helper()
				if regs := dialRaw(t, addr).read(3, 0x04, 0, 4); len(regs) != 4 {
					t.Fatalf("%s: %d registers", when, len(regs))
				}
			}
			healthy("before the window")
			clk.Advance(10*time.Second - 1)
			healthy("1 ns before the window")
			clk.Advance(1)
			tc.check(t, dialRaw(t, addr))
			clk.Advance(5*time.Second - 1)
			tc.check(t, dialRaw(t, addr))
			clk.Advance(1)
			healthy("after the window")
		})
	}
}

// tcpRequest is a Modbus TCP read request ADU (Messaging on TCP/IP V1.0b,
// 3.1.3).
func tcpRequest(txn uint16, unit, fc byte, addr, qty uint16) []byte {
	return []byte{byte(txn >> 8), byte(txn), 0, 0, 0, 6, unit, fc, byte(addr >> 8), byte(addr), byte(qty >> 8), byte(qty)}
}

func TestServerRefusesCRCFault(t *testing.T) {
	h := twoColour(t, 3, 1500)
	h.Faults = []Fault{{Kind: Silent}, {Kind: CRCError, At: time.Second}}
	_, err := NewServer("127.0.0.1:0", []Head{h}, nil)
	want := `heads[0]: head "strand" (unit 3): faults[1].kind: crc: a Modbus TCP frame carries no CRC`
	if err == nil || !strings.Contains(err.Error(), want) {
		t.Errorf("NewServer with a CRC fault: %v, want an error containing %q", err, want)
	}
	if _, err := NewRTUServer(RTUConfig{Baud: 19200}, []Head{h}, nil); err != nil {
		t.Errorf("NewRTUServer with a CRC fault: %v", err)
	}
}

// Requests sent together (several in flight) are answered in their order,
// each with its own transaction id; a silent head's request is skipped and
// a late one holds back only the answers after it.
func TestServerAnswersRequestsInFlight(t *testing.T) {
	clk := newTestClock()
	silent, late, exc := twoColour(t, 3, 1500), twoColour(t, 4, 1500), twoColour(t, 5, 1500)
	silent.Faults = []Fault{{Kind: Silent}}
	late.Faults = []Fault{{Kind: Late, Delay: 50 * time.Millisecond}}
	exc.Faults = []Fault{{Kind: Exception, Code: 0x04}}
	_, addr := startServer(t, []Head{twoColour(t, 1, 1500), twoColour(t, 2, 1600), silent, late, exc}, clk, nil)
	r := dialRaw(t, addr)
	var batch []byte
	for i, unit := range []byte{1, 3, 2, 5, 4, 1} {
		batch = append(batch, tcpRequest(uint16(100+i), unit, 0x04, 0, 4)...)
	}
	r.conn.SetDeadline(time.Now().Add(5 * time.Second))
	if _, err := r.conn.Write(batch); err != nil {
		t.Fatal(err)
	}
	var got []string
	for range 5 {
		var hdr [7]byte
		if _, err := io.ReadFull(r.conn, hdr[:]); err != nil {
			t.Fatalf("after %q: %v", got, err)
		}
		pdu := make([]byte, binary.BigEndian.Uint16(hdr[4:])-1)
		if _, err := io.ReadFull(r.conn, pdu); err != nil {
			t.Fatal(err)
		}
		got = append(got, fmt.Sprintf("%d:%d:%#x", binary.BigEndian.Uint16(hdr[:]), hdr[6], pdu[0]))
	}
	if want := []string{"100:1:0x4", "102:2:0x4", "103:5:0x84", "104:4:0x4", "105:1:0x4"}; !slices.Equal(got, want) {
		t.Errorf("answers %q, want %q", got, want)
	}
}
