package modbus

import (
	"fmt"
	"math"
	"strings"
	"testing"
)

// f123456 is float32(123.456) widened to float64: 123.45600128173828 (bits
// 0x42F6E979, the value LIBRARIES.md "Modbus spec" lays out in four orders).
var f123456 = float64(float32(123.456))

func TestFieldDecode(t *testing.T) {
	tests := []struct {
		name  string
		field Field
		block []uint16
		want  float64
	}{
		// The float32 123.456 = 0x42F6E979 in the four layouts listed in
		// LIBRARIES.md, "Modbus spec": 42F6 E979 / E979 42F6 / F642 79E9 / 79E9 F642.
		{"float high_first big", Field{Type: Float32, Words: HighFirst, Bytes: BigEndian}, []uint16{0x42F6, 0xE979}, f123456},
		{"float low_first big", Field{Type: Float32, Words: LowFirst, Bytes: BigEndian}, []uint16{0xE979, 0x42F6}, f123456},
		{"float high_first little", Field{Type: Float32, Words: HighFirst, Bytes: LittleEndian}, []uint16{0xF642, 0x79E9}, f123456},
		{"float low_first little", Field{Type: Float32, Words: LowFirst, Bytes: LittleEndian}, []uint16{0x79E9, 0xF642}, f123456},
		// IEEE 754 binary32 encodings of special values (IEEE 754-2008, 3.4;
		// bit patterns from memory, checked against math.Float32bits).
		{"float +inf", Field{Type: Float32}, []uint16{0x7F80, 0x0000}, math.Inf(1)},
		{"float -inf", Field{Type: Float32}, []uint16{0xFF80, 0x0000}, math.Inf(-1)},
		{"float 1.0", Field{Type: Float32}, []uint16{0x3F80, 0x0000}, 1},
		{"float -2.5", Field{Type: Float32}, []uint16{0xC020, 0x0000}, -2.5},
		// 16- and 32-bit integers, unsigned and two's complement (computed by
		// hand; the Modbus specification leaves signedness to the register map,
		// two's complement is common practice, no source).
		{"uint16 max", Field{Type: Uint16}, []uint16{0xFFFF}, 65535},
		{"uint16 zero", Field{Type: Uint16}, []uint16{0x0000}, 0},
		{"uint16 little", Field{Type: Uint16, Bytes: LittleEndian}, []uint16{0x3412}, 0x1234},
		{"int16 -1", Field{Type: Int16}, []uint16{0xFFFF}, -1},
		{"int16 min", Field{Type: Int16}, []uint16{0x8000}, -32768},
		{"int16 max", Field{Type: Int16}, []uint16{0x7FFF}, 32767},
		{"int16 -123 little", Field{Type: Int16, Bytes: LittleEndian}, []uint16{0x85FF}, -123},
		{"int16 ignores word order", Field{Type: Int16, Words: LowFirst}, []uint16{0xFF85}, -123},
		{"uint32 high_first", Field{Type: Uint32}, []uint16{0x0001, 0x0002}, 65538},
		{"uint32 low_first", Field{Type: Uint32, Words: LowFirst}, []uint16{0x0002, 0x0001}, 65538},
		{"uint32 max", Field{Type: Uint32}, []uint16{0xFFFF, 0xFFFF}, 4294967295},
		{"uint32 little low_first", Field{Type: Uint32, Words: LowFirst, Bytes: LittleEndian}, []uint16{0x0200, 0x0100}, 65538},
		{"int32 -2", Field{Type: Int32}, []uint16{0xFFFF, 0xFFFE}, -2},
		{"int32 -2 low_first", Field{Type: Int32, Words: LowFirst}, []uint16{0xFFFE, 0xFFFF}, -2},
		{"int32 -2 low_first little", Field{Type: Int32, Words: LowFirst, Bytes: LittleEndian}, []uint16{0xFEFF, 0xFFFF}, -2},
		{"int32 min", Field{Type: Int32}, []uint16{0x8000, 0x0000}, -2147483648},
		{"int32 max", Field{Type: Int32}, []uint16{0x7FFF, 0xFFFF}, 2147483647},
		{"int32 -100000", Field{Type: Int32}, []uint16{0xFFFE, 0x7960}, -100000},
		// Scale and offset: value = raw*Scale + Offset (computed by hand).
		{"uint16 tenths minus 40", Field{Type: Uint16, Scale: 0.1, Offset: -40}, []uint16{1234}, 83.4},
		{"int16 halves plus 273.15", Field{Type: Int16, Scale: 0.5, Offset: 273.15}, []uint16{0xFF85}, 211.65},
		{"int32 hundredths", Field{Type: Int32, Scale: 0.01}, []uint16{0xFFFE, 0x7960}, -1000},
		{"offset only (zero scale means 1)", Field{Type: Uint16, Offset: 10}, []uint16{5}, 15},
		{"float scaled", Field{Type: Float32, Scale: 2, Offset: 1}, []uint16{0x3F80, 0x0000}, 3},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := tt.field.Decode(tt.block, 0)
			if err != nil {
				t.Fatalf("Decode(%04X): %v", tt.block, err)
			}
			if !close(got, tt.want) {
				t.Errorf("Decode(%04X) = %.17g, want %.17g", tt.block, got, tt.want)
			}
		})
	}
}

func close(a, b float64) bool {
	if math.IsInf(a, 0) || math.IsInf(b, 0) {
		return a == b
	}
	return math.Abs(a-b) <= 1e-12*math.Max(1, math.Abs(b))
}

func TestFieldDecodeNaNAndNegativeZero(t *testing.T) {
	// 0x7FC00000 is the quiet NaN, 0x80000000 is -0 (IEEE 754-2008, from memory).
	v, err := Field{Type: Float32}.Decode([]uint16{0x7FC0, 0x0000}, 0)
	if err != nil || !math.IsNaN(v) {
		t.Errorf("Decode(7FC0 0000) = %v, %v; want NaN, nil", v, err)
	}
	v, err = Field{Type: Float32, Scale: 2, Offset: 1}.Decode([]uint16{0x7FC0, 0x0000}, 0)
	if err != nil || !math.IsNaN(v) {
		t.Errorf("scaled Decode(7FC0 0000) = %v, %v; want NaN, nil", v, err)
	}
	v, err = Field{Type: Float32}.Decode([]uint16{0x8000, 0x0000}, 0)
	if err != nil || v != 0 || !math.Signbit(v) {
		t.Errorf("Decode(8000 0000) = %v, %v; want -0, nil", v, err)
	}
}

func TestFieldDecodeInBlock(t *testing.T) {
	block := []uint16{0, 0x42F6, 0xE979, 7}
	f := Field{Address: 101, Type: Float32}
	got, err := f.Decode(block, 100)
	if err != nil || got != f123456 {
		t.Errorf("Decode at 101 in block 100.. = %v, %v; want %v", got, err, f123456)
	}
	got, err = Field{Address: 103, Type: Uint16}.Decode(block, 100)
	if err != nil || got != 7 {
		t.Errorf("Decode last register = %v, %v; want 7", got, err)
	}
}

func TestFieldDecodeErrors(t *testing.T) {
	block := []uint16{1, 2, 3, 4}
	tests := []struct {
		name  string
		field Field
		base  uint16
		block []uint16
		want  string
	}{
		{"before block", Field{Address: 99, Type: Uint16}, 100, block, "addresses 99..99 outside block 100..103"},
		{"after block", Field{Address: 104, Type: Uint16}, 100, block, "outside block 100..103"},
		{"straddles end", Field{Address: 103, Type: Float32}, 100, block, "addresses 103..104 outside block 100..103"},
		{"empty block", Field{Address: 0, Type: Uint16}, 0, nil, "empty"},
		{"unknown type", Field{Address: 100, Type: Type(9)}, 100, block, "unknown register type Type(9)"},
		{"top of address space", Field{Address: 65535, Type: Uint32}, 65535, []uint16{1}, "65535..65536"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			v, err := tt.field.Decode(tt.block, tt.base)
			if err == nil || !strings.Contains(err.Error(), tt.want) {
				t.Fatalf("Decode = %v, %v; want error containing %q", v, err, tt.want)
			}
			if !math.IsNaN(v) {
				t.Errorf("Decode value on error = %v, want NaN", v)
			}
			if err := tt.field.Encode(1, tt.block, tt.base); err == nil {
				t.Errorf("Encode succeeded where Decode failed")
			}
		})
	}
}

func TestFieldEncode(t *testing.T) {
	tests := []struct {
		name  string
		field Field
		v     float64
		want  []uint16
	}{
		// Inverse of the Decode rows above (same sources).
		{"float high_first big", Field{Type: Float32}, 123.456, []uint16{0x42F6, 0xE979}},
		{"float low_first big", Field{Type: Float32, Words: LowFirst}, 123.456, []uint16{0xE979, 0x42F6}},
		{"float high_first little", Field{Type: Float32, Bytes: LittleEndian}, 123.456, []uint16{0xF642, 0x79E9}},
		{"float low_first little", Field{Type: Float32, Words: LowFirst, Bytes: LittleEndian}, 123.456, []uint16{0x79E9, 0xF642}},
		{"float +inf", Field{Type: Float32}, math.Inf(1), []uint16{0x7F80, 0x0000}},
		{"int16 -123", Field{Type: Int16}, -123, []uint16{0xFF85}},
		{"int16 -123 little", Field{Type: Int16, Bytes: LittleEndian}, -123, []uint16{0x85FF}},
		{"int32 -2 low_first", Field{Type: Int32, Words: LowFirst}, -2, []uint16{0xFFFE, 0xFFFF}},
		{"uint32 65538", Field{Type: Uint32}, 65538, []uint16{0x0001, 0x0002}},
		{"round half away from zero", Field{Type: Int16}, -2.5, []uint16{0xFFFD}},
		{"round to nearest", Field{Type: Uint16}, 2.4, []uint16{2}},
		{"scaled", Field{Type: Uint16, Scale: 0.1, Offset: -40}, 83.4, []uint16{1234}},
		{"scaled rounds", Field{Type: Int16, Scale: 0.5, Offset: 273.15}, 211.7, []uint16{0xFF85}},
		{"uint16 max", Field{Type: Uint16}, 65535.4, []uint16{0xFFFF}},
		{"int32 min", Field{Type: Int32}, -2147483648, []uint16{0x8000, 0x0000}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := make([]uint16, len(tt.want))
			if err := tt.field.Encode(tt.v, got, 0); err != nil {
				t.Fatalf("Encode(%v): %v", tt.v, err)
			}
			if fmt.Sprint(got) != fmt.Sprint(tt.want) {
				t.Errorf("Encode(%v) = %04X, want %04X", tt.v, got, tt.want)
			}
		})
	}
}

func TestFieldEncodeErrors(t *testing.T) {
	tests := []struct {
		name  string
		field Field
		v     float64
		want  string
	}{
		{"uint16 negative", Field{Type: Uint16}, -1, "outside 0..65535"},
		{"uint16 rounds over", Field{Type: Uint16}, 65535.5, "outside 0..65535"},
		{"int16 over", Field{Type: Int16}, 32768, "outside -32768..32767"},
		{"int32 under", Field{Type: Int32}, -2147483649, "outside -2.147483648e+09..2.147483647e+09"},
		{"uint32 over", Field{Type: Uint32}, 4294967296, "outside 0..4.294967295e+09"},
		{"int NaN", Field{Type: Int32}, math.NaN(), "not a finite number"},
		{"int Inf", Field{Type: Uint16}, math.Inf(1), "not a finite number"},
		{"scaled over", Field{Type: Uint16, Scale: 0.1}, 6553.6, "outside 0..65535"},
		{"float overflow", Field{Type: Float32}, 1e39, "overflows float32"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			block := []uint16{0xAAAA, 0xAAAA}
			err := tt.field.Encode(tt.v, block, 0)
			if err == nil || !strings.Contains(err.Error(), tt.want) {
				t.Fatalf("Encode(%v) error = %v, want one containing %q", tt.v, err, tt.want)
			}
			if block[0] != 0xAAAA || block[1] != 0xAAAA {
				t.Errorf("Encode changed the block on error: %04X", block)
			}
		})
	}
}

// Every representable value survives Encode then Decode, in every layout.
func TestFieldRoundTrip(t *testing.T) {
	values := map[Type][]float64{
		Uint16:  {0, 1, 1234, 65535},
		Int16:   {-32768, -123, -1, 0, 1, 32767},
		Uint32:  {0, 65536, 4294967295},
		Int32:   {-2147483648, -100000, -1, 0, 2147483647},
		Float32: {f123456, -f123456, 0, 1e-38, 3.4e38, math.Inf(1), math.Inf(-1)},
	}
	for typ, vs := range values {
		for _, words := range []WordOrder{HighFirst, LowFirst} {
			for _, bytes := range []ByteOrder{BigEndian, LittleEndian} {
				f := Field{Address: 10, Type: typ, Words: words, Bytes: bytes}
				for _, v := range vs {
					if typ == Float32 {
						v = float64(float32(v))
					}
					block := make([]uint16, 4)
					if err := f.Encode(v, block, 9); err != nil {
						t.Fatalf("%v %v %v: Encode(%v): %v", typ, words, bytes, v, err)
					}
					got, err := f.Decode(block, 9)
					if err != nil || got != v {
						t.Errorf("%v %v %v: Decode(Encode(%v)) = %v, %v", typ, words, bytes, v, got, err)
					}
				}
			}
		}
	}
}

func TestParseNames(t *testing.T) {
	for _, name := range []string{"input", "holding"} {
		v, err := ParseTable(name)
		if err != nil || v.String() != name {
			t.Errorf("ParseTable(%q) = %v, %v", name, v, err)
		}
	}
	for _, name := range []string{"uint16", "int16", "uint32", "int32", "float32"} {
		v, err := ParseType(name)
		if err != nil || v.String() != name {
			t.Errorf("ParseType(%q) = %v, %v", name, v, err)
		}
	}
	for _, name := range []string{"high_first", "low_first"} {
		v, err := ParseWordOrder(name)
		if err != nil || v.String() != name {
			t.Errorf("ParseWordOrder(%q) = %v, %v", name, v, err)
		}
	}
	for _, name := range []string{"big", "little"} {
		v, err := ParseByteOrder(name)
		if err != nil || v.String() != name {
			t.Errorf("ParseByteOrder(%q) = %v, %v", name, v, err)
		}
	}
	bad := []struct {
		err  error
		want string
	}{
		{second(ParseTable("coils")), `unknown register table "coils" (want one of ["input" "holding"])`},
		{second(ParseType("float64")), `unknown register type "float64"`},
		{second(ParseWordOrder("HIGH_FIRST")), `unknown word order "HIGH_FIRST"`},
		{second(ParseByteOrder("")), `unknown byte order ""`},
	}
	for _, b := range bad {
		if b.err == nil || !strings.Contains(b.err.Error(), b.want) {
			t.Errorf("error = %v, want one containing %q", b.err, b.want)
		}
	}
	var typ Type
	if err := typ.UnmarshalText([]byte("int32")); err != nil || typ != Int32 {
		t.Errorf("UnmarshalText(int32) = %v, %v", typ, err)
	}
	if _, err := Type(7).MarshalText(); err == nil {
		t.Errorf("MarshalText of Type(7) succeeded")
	}
	if s := Type(7).String(); s != "Type(7)" {
		t.Errorf("Type(7).String() = %q", s)
	}
}

func second[T any](_ T, err error) error { return err }

func TestFieldLen(t *testing.T) {
	for typ, want := range map[Type]uint16{Uint16: 1, Int16: 1, Uint32: 2, Int32: 2, Float32: 2, Type(5): 0} {
		if got := (Field{Type: typ}).Len(); got != want {
			t.Errorf("Field{Type: %v}.Len() = %d, want %d", typ, got, want)
		}
	}
}

// FuzzFieldDecode decodes arbitrary registers in every layout: no panic, an
// error exactly when the field leaves the block, and where the value is
// representable, Encode gives registers that decode to the same value.
func FuzzFieldDecode(f *testing.F) {
	f.Add(uint16(0x42F6), uint16(0xE979), uint8(4), uint8(0), uint8(0), uint16(0), uint16(0), uint8(0))
	f.Add(uint16(0x79E9), uint16(0xF642), uint8(4), uint8(1), uint8(1), uint16(0), uint16(0), uint8(1))
	f.Add(uint16(0xFF85), uint16(0), uint8(1), uint8(0), uint8(1), uint16(5), uint16(5), uint8(2))
	f.Add(uint16(0x7FC0), uint16(0x0001), uint8(4), uint8(0), uint8(0), uint16(1), uint16(0), uint8(3))
	f.Add(uint16(0xFFFF), uint16(0xFFFF), uint8(9), uint8(3), uint8(7), uint16(65535), uint16(65535), uint8(9))
	scales := []struct{ scale, offset float64 }{{1, 0}, {0, 0}, {0.1, -40}, {0.01, 273.15}, {2, 1}, {-0.5, 0}}
	f.Fuzz(func(t *testing.T, w0, w1 uint16, typ, words, bytes uint8, addr, base uint16, sc uint8) {
		s := scales[int(sc)%len(scales)]
		fld := Field{Address: addr, Type: Type(typ), Words: WordOrder(words), Bytes: ByteOrder(bytes),
			Scale: s.scale, Offset: s.offset}
		block := []uint16{w0, w1}
		v, err := fld.Decode(block, base)
		inside := fld.Len() > 0 && int(addr) >= int(base) && int(addr)+int(fld.Len()) <= int(base)+len(block)
		if (err == nil) != inside {
			t.Fatalf("Decode(%04X at %d) of %+v: err = %v, field inside block = %v", block, base, fld, err, inside)
		}
		if err != nil {
			return
		}
		unit := (s.scale == 0 || s.scale == 1) && s.offset == 0
		out := make([]uint16, len(block))
		if err := fld.Encode(v, out, base); err != nil {
			// A decoded raw value always fits its type; only a scaled value
			// may round just outside it.
			if unit {
				t.Fatalf("Encode(%v) of %+v: %v", v, fld, err)
			}
			return
		}
		back, err := fld.Decode(out, base)
		if err != nil {
			t.Fatalf("Decode after Encode: %v", err)
		}
		switch {
		case math.IsNaN(v):
			if !math.IsNaN(back) {
				t.Fatalf("NaN came back as %v", back)
			}
		case fld.Type == Float32 && !unit:
			// (v−Offset)/Scale and back in float64, then float32 rounding.
			if back != v && !(math.Abs(back-v) <= 1e-6*math.Max(1, math.Abs(v))) {
				t.Fatalf("round trip of %v gave %v (%+v)", v, back, fld)
			}
		default:
			// Unscaled values, and scaled integers (rounding to nearest
			// recovers the raw count), come back exactly.
			if back != v && !(math.Abs(back-v) <= 1e-9*math.Max(1, math.Abs(v)) && !unit) {
				t.Fatalf("round trip of %v gave %v (%+v, registers %04X -> %04X)", v, back, fld, block, out)
			}
		}
	})
}

func TestFieldEncodeNaNFloat(t *testing.T) {
	block := make([]uint16, 2)
	if err := (Field{Type: Float32}).Encode(math.NaN(), block, 0); err != nil {
		t.Fatalf("Encode(NaN) into float32: %v", err)
	}
	if v, _ := (Field{Type: Float32}).Decode(block, 0); !math.IsNaN(v) {
		t.Errorf("Encode(NaN) gave %04X, which decodes as %v", block, v)
	}
}

func ExampleField_Decode() {
	// A float32 stored low word first, as some heads do: 123.456 = 0x42F6E979.
	f := Field{Address: 100, Type: Float32, Words: LowFirst}
	v, err := f.Decode([]uint16{0xE979, 0x42F6}, 100)
	fmt.Printf("%.3f %v\n", v, err)

	// A signed tenth-of-a-degree register: 0xFB2E = -1234 -> -123.4.
	g := Field{Address: 7, Type: Int16, Scale: 0.1}
	v, err = g.Decode([]uint16{0xFB2E}, 7)
	fmt.Printf("%.1f %v\n", v, err)
	// Output:
	// 123.456 <nil>
	// -123.4 <nil>
}

func BenchmarkFieldDecode(b *testing.B) {
	block := []uint16{0x79E9, 0xF642}
	f := Field{Type: Float32, Words: LowFirst, Bytes: LittleEndian, Scale: 0.5, Offset: 1}
	for b.Loop() {
		if _, err := f.Decode(block, 0); err != nil {
			b.Fatal(err)
		}
	}
}
