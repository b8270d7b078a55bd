package modbus_test

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"testing"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/modbus/modbustest"
)

// RTUClient against an independent Modbus RTU implementation: Debian's
// python3-pymodbus serving fixed registers on one end of a pty pair (its
// StartAsyncSerialServer with ModbusRtuFramer, through
// testdata/pymodbus_server.py --serial). The float layouts are those of
// LIBRARIES.md ("Modbus spec": 123.456f = 0x42F6E979 in four orders).
func TestRTUClientAgainstPymodbus(t *testing.T) {
	p := modbustest.NewPtyPair(t)
	modbustest.StartPymodbusRTU(t, p.A, "--baud", "19200", "--unit", "7",
		"--input", "100=42F6:E979,102=FF85,103=0001:0002",
		"--holding", "0=E979:42F6,2=F642:79E9,4=79E9:F642")
	c := rtuClient(t, p.B, 2*time.Second, nil)

	in := modbus.Request{Unit: 7, Table: modbus.InputRegisters, Address: 100, Quantity: 5}
	regs, err := c.Read(t.Context(), in)
	if err != nil {
		t.Fatalf("%v: %v", in, err)
	}
	if got, want := fmt.Sprintf("%04X", regs), "[42F6 E979 FF85 0001 0002]"; got != want {
		t.Fatalf("input registers = %s, want %s", got, want)
	}
	for _, c := range []struct {
		field modbus.Field
		want  float64
	}{
		{modbus.Field{Address: 100, Type: modbus.Float32}, float32Value123456},
		{modbus.Field{Address: 102, Type: modbus.Int16}, -123},
		{modbus.Field{Address: 103, Type: modbus.Uint32}, 65538},
	} {
		if v, err := c.field.Decode(regs, in.Address); err != nil || v != c.want {
			t.Errorf("%v at %d = %v, %v; want %v", c.field.Type, c.field.Address, v, err, c.want)
		}
	}
	hold := holding(7, 0, 6)
	regs, err = c.Read(t.Context(), hold)
	if err != nil {
		t.Fatalf("%v: %v", hold, err)
	}
	for _, f := range []modbus.Field{
		{Address: 0, Type: modbus.Float32, Words: modbus.LowFirst},
		{Address: 2, Type: modbus.Float32, Bytes: modbus.LittleEndian},
		{Address: 4, Type: modbus.Float32, Words: modbus.LowFirst, Bytes: modbus.LittleEndian},
	} {
		if v, err := f.Decode(regs, 0); err != nil || v != float32Value123456 {
			t.Errorf("float32 %v/%v at %d = %v, %v; want 123.456", f.Words, f.Bytes, f.Address, v, err)
		}
	}
	// An address pymodbus does not hold: its exception 02, typed.
	_, err = c.Read(t.Context(), modbus.Request{Unit: 7, Table: modbus.InputRegisters, Address: 104, Quantity: 2})
	var exc *modbus.ExceptionError
	if !errors.As(err, &exc) || exc.Function != 0x04 || exc.Code != 0x02 {
		t.Errorf("read of an absent register: err = %v, want exception 02 on function 04", err)
	}
	// A unit pymodbus does not serve: no answer.
	ctx, cancel := context.WithTimeout(t.Context(), 200*time.Millisecond)
	_, err = c.Read(ctx, holding(8, 0, 1))
	cancel()
	if modbus.Kind(err) != modbus.KindTimeout {
		t.Errorf("read of an absent unit: err = %v, want a timeout", err)
	}
	// And the client carries on after both.
	if regs, err := c.Read(t.Context(), in); err != nil || regs[0] != 0x42F6 {
		t.Errorf("read after errors = %04X, %v", regs, err)
	}
}

// A Line on a serial line to pymodbus: two heads, each with a register map
// coalesced into blocks, polled back to back; every block decodes.
func TestLineRTUAgainstPymodbus(t *testing.T) {
	p := modbustest.NewPtyPair(t)
	modbustest.StartPymodbusRTU(t, p.A, "--spec", writeSpec(t, `{"units": [
		{"unit": 1, "input": {"0": ["42F6", "E979"], "4": ["42F6", "E979"], "200": [1, 2]}},
		{"unit": 2, "holding": {"10": ["E979", "42F6"], "12": 7}}
	]}`))
	c := rtuClient(t, p.B, 2*time.Second, nil)
	mapA := []modbus.Field{{Address: 0, Type: modbus.Float32}, {Address: 4, Type: modbus.Float32}, {Address: 200, Type: modbus.Uint32}}
	mapB := []modbus.Field{{Address: 10, Type: modbus.Float32, Words: modbus.LowFirst}, {Address: 12, Type: modbus.Uint16}}
	var polls []modbus.Poll
	for i, m := range [][]modbus.Field{mapA, mapB} {
		table := modbus.InputRegisters
		if i == 1 {
			table = modbus.HoldingRegisters
		}
		var spans []modbus.Span
		for _, f := range m {
			spans = append(spans, f.Span(table))
		}
		blocks, _, err := modbus.CoalesceWithGap(spans, modbus.MaxQuantity, 0) // pymodbus refuses gaps: exception 02
		if err != nil {
			t.Fatal(err)
		}
		poll := modbus.Poll{Name: fmt.Sprint("head", i+1), Period: 50 * time.Millisecond}
		for _, b := range blocks {
			poll.Requests = append(poll.Requests, b.Request(uint8(i+1)))
		}
		polls = append(polls, poll)
	}
	if len(polls[0].Requests) != 3 || len(polls[1].Requests) != 1 {
		t.Fatalf("blocks: %+v", polls)
	}
	results := make(chan string, 64)
	l := modbus.NewLine(modbus.LineConfig{Name: "rtu"}, c, polls, func(r modbus.Result) {
		if r.Err != nil {
			results <- fmt.Sprintf("poll %d: %v", r.Poll, r.Err)
			return
		}
		var vals []float64
		for k, req := range polls[r.Poll].Requests {
			for _, f := range [][]modbus.Field{mapA, mapB}[r.Poll] {
				if v, err := f.Decode(r.Blocks[k], req.Address); err == nil {
					vals = append(vals, v)
				}
			}
		}
		results <- fmt.Sprint(r.Poll, vals)
	})
	errc := make(chan error, 1)
	ctx, cancel := context.WithCancel(t.Context())
	go func() { errc <- l.Run(ctx) }()
	want := map[string]bool{
		fmt.Sprint(0, []float64{float32Value123456, float32Value123456, 65538}): true,
		fmt.Sprint(1, []float64{float32Value123456, 7}):                         true,
	}
	for range 6 {
		if r := <-results; !want[r] {
			t.Errorf("result %s, want one of %v", r, want)
		}
	}
	cancel()
	<-errc
	if s := l.Stats(); s.Times.Count < 6 || s.Busy() <= 0 {
		t.Errorf("stats %+v", s)
	}
}

// writeSpec writes a pymodbus_server.py --spec file and returns its path.
func writeSpec(t *testing.T, spec string) string {
	t.Helper()
	path := filepath.Join(t.TempDir(), "spec.json")
	if err := os.WriteFile(path, []byte(spec), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}
