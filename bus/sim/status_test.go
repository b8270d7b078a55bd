package sim

import (
	"testing"
	"time"

	"glowgate/bus/modbus"
)

// statusHead is an input-register head with a status word in the holding
// table and two extras: its internal temperature (int16, 0.1 K per count) in
// the input table beside the channels, and an emissivity setting read back
// (uint16, 0.001 per count), with a gap register before the status word.
func statusHead(t testing.TB) Head {
	h := twoColour(t, 4, 1500)
	holding := modbus.HoldingRegisters
	h.Status = &StatusWord{
		Field: modbus.Field{Address: 2, Type: modbus.Uint16},
		Table: &holding,
		Bits: []BitEpisode{
			{Bit: 0, At: 5 * time.Second, For: 10 * time.Second},
			{Bit: 3, At: 0, For: time.Second, Period: 4 * time.Second},
			{Bit: 15, At: 20 * time.Second},
		},
	}
	h.Extras = []Extra{
		{Name: "head temperature", Field: modbus.Field{Address: 6, Type: modbus.Int16, Scale: 0.1},
			Value: Profile{Start: 303, Segments: []Segment{{Kind: Ramp, Value: 323, Duration: 20 * time.Second}}}},
		{Name: "emissivity setting", Field: modbus.Field{Address: 0, Type: modbus.Uint16, Scale: 0.001},
			Table: &holding, Value: Constant(0.85)},
	}
	return h
}

// statusCases are moments of statusHead's scenario and the values expected
// then, worked out by hand from its episodes and profiles: bit 0 is set in
// [5 s, 15 s), bit 3 in the first second of every 4 s, bit 15 from 20 s; the
// head temperature is 303 K + 1 K/s·t up to 20 s, encoded as round(T/0.1);
// the setting 0.85 encodes as 850.
var statusCases = []struct {
	at     time.Duration
	word   uint16
	headK  float64
	raw6   uint16    // input register 6
	holdng [3]uint16 // holding registers 0..2: setting, gap, status word
}{
	{0, 0x0008, 303, 3030, [3]uint16{850, 0, 0x0008}},
	{2 * time.Second, 0x0000, 305, 3050, [3]uint16{850, 0, 0x0000}},
	{5 * time.Second, 0x0001, 308, 3080, [3]uint16{850, 0, 0x0001}},
	{14 * time.Second, 0x0001, 317, 3170, [3]uint16{850, 0, 0x0001}},
	{20 * time.Second, 0x8008, 323, 3230, [3]uint16{850, 0, 0x8008}},
	{21500 * time.Millisecond, 0x8000, 323, 3230, [3]uint16{850, 0, 0x8000}},
}

func TestStatusWord(t *testing.T) {
	h := statusHead(t)
	if err := h.Validate(); err != nil {
		t.Fatal(err)
	}
	for _, c := range statusCases {
		if got := h.Status.Word(c.at); got != c.word {
			t.Errorf("Word(%v) = %#04x, want %#04x", c.at, got, c.word)
		}
	}
}
