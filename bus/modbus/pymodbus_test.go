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

// float32Value123456 is float32(123.456) = 0x42F6E979 widened to float64.
var float32Value123456 = float64(float32(123.456))

// pymodbusUnit7 is the register layout the pymodbus peer serves as unit 7.
var pymodbusUnit7 = []string{"--unit", "7",
	"--input", "100=42F6:E979,102=FF85,103=0001:0002",
	"--holding", "0=E979:42F6,2=F642:79E9,4=79E9:F642"}

// Client against an independent Modbus implementation: Debian's
// python3-pymodbus serving fixed registers. The float layouts are those of
// LIBRARIES.md ("Modbus spec": 123.456f = 0x42F6E979 in four orders).
func TestClientAgainstPymodbus(t *testing.T) {
	addr := modbustest.StartPymodbus(t, pymodbusUnit7...)
	c := modbus.NewTCPClient(addr, 5*time.Second)
	defer c.Close()

	in := modbus.Request{Unit: 7, Table: modbus.InputRegisters, Address: 100, Quantity: 5}
	regs, err := read(t, c, in, 5*time.Second)
	if err != nil {
		t.Fatalf("%v: %v", in, err)
	}
	if got, want := fmt.Sprintf("%04X", regs), "[42F6 E979 FF85 0001 0002]"; got != want {
		t.Fatalf("input registers = %s, want %s", got, want)
	}
	checks := []struct {
		field modbus.Field
		want  float64
	}{
		{modbus.Field{Address: 100, Type: modbus.Float32}, float32Value123456},
		{modbus.Field{Address: 102, Type: modbus.Int16}, -123},
		{modbus.Field{Address: 103, Type: modbus.Uint32}, 65538},
	}
	for _, c := range checks {
		if v, err := c.field.Decode(regs, in.Address); err != nil || v != c.want {
			t.Errorf("%v at %d = %v, %v; want %v", c.field.Type, c.field.Address, v, err, c.want)
		}
	}

	hold := modbus.Request{Unit: 7, Table: modbus.HoldingRegisters, Address: 0, Quantity: 6}
	regs, err = read(t, c, hold, 5*time.Second)
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
	_, err = read(t, c, modbus.Request{Unit: 7, Table: modbus.InputRegisters, Address: 104, Quantity: 2}, 5*time.Second)
	var exc *modbus.ExceptionError
	if !errors.As(err, &exc) || exc.Function != 0x04 || exc.Code != 0x02 {
		t.Errorf("read of an absent register: err = %v, want exception 02 on function 04", err)
	}
	// A unit pymodbus does not serve: it drops the request, so a timeout.
	_, err = read(t, c, modbus.Request{Unit: 8, Table: modbus.InputRegisters, Address: 100, Quantity: 1}, 300*time.Millisecond)
	if modbus.Kind(err) != modbus.KindTimeout {
		t.Errorf("read of an absent unit: err = %v, want a timeout", err)
	}
	// And the client carries on after both.
	if regs, err := read(t, c, in, 5*time.Second); err != nil || regs[0] != 0x42F6 {
		t.Errorf("read after errors = %04X, %v", regs, err)
	}
}

// The JSON form of the script's register spec, several units at once (the
// form the daemon's end-to-end test uses).
func TestPymodbusServerJSONSpec(t *testing.T) {
	spec := filepath.Join(t.TempDir(), "spec.json")
	err := os.WriteFile(spec, []byte(`{"units": [
		{"unit": 1, "input": {"0": ["42F6", "E979"]}},
		{"unit": 2, "holding": {"0x10": [1, "0xFFFF"]}}
	]}`), 0o644)
	if err != nil {
		t.Fatal(err)
	}
	addr := modbustest.StartPymodbus(t, "--spec", spec)
	c := modbus.NewTCPClient(addr, 5*time.Second)
	defer c.Close()
	regs, err := c.Read(context.Background(), modbus.Request{Unit: 1, Table: modbus.InputRegisters, Quantity: 2})
	if err != nil || fmt.Sprintf("%04X", regs) != "[42F6 E979]" {
		t.Errorf("unit 1 input 0..1 = %04X, %v", regs, err)
	}
	regs, err = c.Read(context.Background(), modbus.Request{Unit: 2, Table: modbus.HoldingRegisters, Address: 16, Quantity: 2})
	if err != nil || fmt.Sprintf("%04X", regs) != "[0001 FFFF]" {
		t.Errorf("unit 2 holding 16..17 = %04X, %v", regs, err)
	}
}
