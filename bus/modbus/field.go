package modbus

import (
	"fmt"
	"math"
	"math/bits"
)

// Table names one of the two register tables a head's values are read from.
type Table uint8

const (
	InputRegisters   Table = iota // read with function 04
	HoldingRegisters              // read with function 03
)

var tableNames = [...]string{InputRegisters: "input", HoldingRegisters: "holding"}

// ParseTable parses "input" or "holding".
func ParseTable(s string) (Table, error) {
	i, err := parseName("register table", s, tableNames[:])
	return Table(i), err
}

func (t Table) String() string { return nameOf(uint8(t), tableNames[:], "Table") }

// MarshalText gives the name ParseTable accepts.
func (t Table) MarshalText() ([]byte, error) {
	return marshalName(uint8(t), tableNames[:], "register table")
}

// UnmarshalText parses the name as ParseTable does.
func (t *Table) UnmarshalText(b []byte) (err error) { *t, err = ParseTable(string(b)); return err }

// function is the Modbus read function code of the table: 04 for input and 03
// for holding registers (Modbus Application Protocol V1.1b3, 6.3 and 6.4).
func (t Table) function() byte {
	if t == HoldingRegisters {
		return 0x03
	}
	return 0x04
}

// Type is the data type of a value held in one or two registers.
type Type uint8

const (
	Uint16  Type = iota // one register, 0..65535
	Int16               // one register, two's complement
	Uint32              // two registers
	Int32               // two registers, two's complement
	Float32             // two registers, IEEE 754 binary32
)

var typeNames = [...]string{Uint16: "uint16", Int16: "int16", Uint32: "uint32", Int32: "int32", Float32: "float32"}

// ParseType parses "uint16", "int16", "uint32", "int32" or "float32".
func ParseType(s string) (Type, error) {
	i, err := parseName("register type", s, typeNames[:])
	return Type(i), err
}

func (t Type) String() string { return nameOf(uint8(t), typeNames[:], "Type") }

// MarshalText gives the name ParseType accepts.
func (t Type) MarshalText() ([]byte, error) {
	return marshalName(uint8(t), typeNames[:], "register type")
}

// UnmarshalText parses the name as ParseType does.
func (t *Type) UnmarshalText(b []byte) (err error) { *t, err = ParseType(string(b)); return err }

// WordOrder is the order of the two registers of a 32-bit value.
type WordOrder uint8

const (
	HighFirst WordOrder = iota // most significant register at the lower address
	LowFirst                   // least significant register at the lower address ("word swapped")
)

var wordOrderNames = [...]string{HighFirst: "high_first", LowFirst: "low_first"}

// ParseWordOrder parses "high_first" or "low_first".
func ParseWordOrder(s string) (WordOrder, error) {
	i, err := parseName("word order", s, wordOrderNames[:])
	return WordOrder(i), err
}

func (w WordOrder) String() string { return nameOf(uint8(w), wordOrderNames[:], "WordOrder") }

// MarshalText gives the name ParseWordOrder accepts.
func (w WordOrder) MarshalText() ([]byte, error) {
	return marshalName(uint8(w), wordOrderNames[:], "word order")
}

// UnmarshalText parses the name as ParseWordOrder does.
func (w *WordOrder) UnmarshalText(b []byte) (err error) {
	*w, err = ParseWordOrder(string(b))
	return err
}

// ByteOrder is the order of the two bytes inside each register as the head
// stores them. The Modbus protocol itself sends every register big-endian;
// LittleEndian is for heads that put the low byte of a value first.
type ByteOrder uint8

const (
	BigEndian    ByteOrder = iota // high byte first, as the Modbus specification sends registers
	LittleEndian                  // low byte first ("byte swapped")
)

var byteOrderNames = [...]string{BigEndian: "big", LittleEndian: "little"}

// ParseByteOrder parses "big" or "little".
func ParseByteOrder(s string) (ByteOrder, error) {
	i, err := parseName("byte order", s, byteOrderNames[:])
	return ByteOrder(i), err
}

func (b ByteOrder) String() string { return nameOf(uint8(b), byteOrderNames[:], "ByteOrder") }

// MarshalText gives the name ParseByteOrder accepts.
func (b ByteOrder) MarshalText() ([]byte, error) {
	return marshalName(uint8(b), byteOrderNames[:], "byte order")
}

// UnmarshalText parses the name as ParseByteOrder does.
func (b *ByteOrder) UnmarshalText(t []byte) (err error) {
	*b, err = ParseByteOrder(string(t))
	return err
}

func parseName(what, s string, names []string) (uint8, error) {
	for i, n := range names {
		if s == n {
			return uint8(i), nil
		}
	}
	return 0, fmt.Errorf("unknown %s %q (want one of %q)", what, s, names)
}

func nameOf(v uint8, names []string, typ string) string {
	if int(v) < len(names) {
		return names[v]
	}
	return fmt.Sprintf("%s(%d)", typ, v)
}

func marshalName(v uint8, names []string, what string) ([]byte, error) {
	if int(v) < len(names) {
		return []byte(names[v]), nil
	}
	return nil, fmt.Errorf("unknown %s %d", what, v)
}

// Field locates one value in the register space and scales it:
//
//	value = raw·Scale + Offset
//
// where raw is the register contents read as Type, after putting the words
// (Words) and the bytes inside each register (Bytes) in order. The unit of
// value is the unit of the quantity the register map says the field holds;
// Scale carries that unit per raw count. A zero Scale means 1 (a scale of
// zero would make every value equal to Offset, which no register map wants).
//
// The four layouts of the float32 123.456 = 0x42F6E979 on the wire, register
// by register (see LIBRARIES.md, "Modbus spec"):
//
//	high_first big     42F6 E979
//	low_first  big     E979 42F6
//	high_first little  F642 79E9
//	low_first  little  79E9 F642
type Field struct {
	Address uint16 // protocol (zero-based) address of the first register
	Type    Type
	Words   WordOrder // ignored for 16-bit types
	Bytes   ByteOrder
	Scale   float64
	Offset  float64
}

// Len is the number of registers the field occupies: 1 for 16-bit types, 2
// for 32-bit types, and 0 for an unknown Type.
func (f Field) Len() uint16 {
	switch f.Type {
	case Uint16, Int16:
		return 1
	case Uint32, Int32, Float32:
		return 2
	}
	return 0
}

// locate returns the field's offset in a block of n registers starting at
// address base, or an error naming the field and the block.
func (f Field) locate(n int, base uint16) (int, error) {
	l := f.Len()
	if l == 0 {
		return 0, fmt.Errorf("field at address %d: unknown register type %v", f.Address, f.Type)
	}
	off := int(f.Address) - int(base)
	if off < 0 || off+int(l) > n {
		if n == 0 {
			return 0, fmt.Errorf("field %v at address %d: block starting at %d is empty", f.Type, f.Address, base)
		}
		return 0, fmt.Errorf("field %v at addresses %d..%d outside block %d..%d",
			f.Type, f.Address, int(f.Address)+int(l)-1, base, int(base)+n-1)
	}
	return off, nil
}

func (f Field) scale() float64 {
	if f.Scale == 0 {
		return 1
	}
	return f.Scale
}

// Decode returns the field's value from block, which holds the registers
// starting at address base. It fails when the field does not lie wholly inside
// the block or its Type is unknown. A float32 NaN or ±Inf decodes as such (the
// caller decides what a non-finite reading means).
func (f Field) Decode(block []uint16, base uint16) (float64, error) {
	off, err := f.locate(len(block), base)
	if err != nil {
		return math.NaN(), err
	}
	word := func(i int) uint16 {
		w := block[off+i]
		if f.Bytes == LittleEndian {
			w = bits.ReverseBytes16(w)
		}
		return w
	}
	var raw float64
	switch f.Type {
	case Uint16:
		raw = float64(word(0))
	case Int16:
		raw = float64(int16(word(0)))
	default:
		hi, lo := word(0), word(1)
		if f.Words == LowFirst {
			hi, lo = lo, hi
		}
		u := uint32(hi)<<16 | uint32(lo)
		switch f.Type {
		case Uint32:
			raw = float64(u)
		case Int32:
			raw = float64(int32(u))
		case Float32:
			raw = float64(math.Float32frombits(u))
		}
	}
	if f.Scale == 0 || f.Scale == 1 {
		if f.Offset == 0 {
			return raw, nil // keeps -0 a negative zero
		}
	}
	return raw*f.scale() + f.Offset, nil
}

// Encode is the inverse of Decode: it writes v into block (registers starting
// at address base) as
//
//	raw = (v − Offset) / Scale
//
// rounded to the nearest integer (halves away from zero) for integer types.
// It fails, leaving block unchanged, when the field lies outside the block,
// when v is NaN or ±Inf for an integer type, when raw is outside the type's
// range, or when a finite raw overflows float32. NaN and ±Inf encode as such
// into a float32 field.
func (f Field) Encode(v float64, block []uint16, base uint16) error {
	off, err := f.locate(len(block), base)
	if err != nil {
		return err
	}
	raw := v
	if !(f.Offset == 0 && (f.Scale == 0 || f.Scale == 1)) {
		raw = (v - f.Offset) / f.scale()
	}
	var u uint32
	switch f.Type {
	case Float32:
		if math.IsNaN(raw) || math.IsInf(raw, 0) {
			u = math.Float32bits(float32(raw))
			break
		}
		r32 := float32(raw)
		if math.IsInf(float64(r32), 0) {
			return fmt.Errorf("encode %v into float32 field at address %d: raw value %g overflows float32",
				v, f.Address, raw)
		}
		u = math.Float32bits(r32)
	default:
		if math.IsNaN(raw) || math.IsInf(raw, 0) {
			return fmt.Errorf("encode %v into %v field at address %d: raw value %g is not a finite number",
				v, f.Type, f.Address, raw)
		}
		r := math.Round(raw)
		lo, hi := intRange(f.Type)
		if r < lo || r > hi {
			return fmt.Errorf("encode %v into %v field at address %d: raw value %g outside %g..%g",
				v, f.Type, f.Address, r, lo, hi)
		}
		if r < 0 {
			u = uint32(int32(r)) // two's complement; 16-bit types keep the low half
		} else {
			u = uint32(r)
		}
	}
	put := func(i int, w uint16) {
		if f.Bytes == LittleEndian {
			w = bits.ReverseBytes16(w)
		}
		block[off+i] = w
	}
	if f.Len() == 1 {
		put(0, uint16(u))
		return nil
	}
	hi, lo := uint16(u>>16), uint16(u)
	if f.Words == LowFirst {
		hi, lo = lo, hi
	}
	put(0, hi)
	put(1, lo)
	return nil
}

func intRange(t Type) (lo, hi float64) {
	switch t {
	case Uint16:
		return 0, math.MaxUint16
	case Int16:
		return math.MinInt16, math.MaxInt16
	case Uint32:
		return 0, math.MaxUint32
	default:
		return math.MinInt32, math.MaxInt32
	}
}
