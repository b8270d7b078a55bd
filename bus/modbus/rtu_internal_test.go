package modbus

import (
	"bytes"
	"testing"
	"time"
)

// CRC-16/MODBUS check values from LIBRARIES.md ("Modbus spec"): the
// catalogue check "123456789" gives 0x4B37, and the request 01 03 00 00 00 0A
// goes on the wire followed by C5 CD (low byte first).
func TestCRC16(t *testing.T) {
	if got := CRC16([]byte("123456789")); got != 0x4B37 {
		t.Errorf(`CRC16("123456789") = %04X, want 4B37`, got)
	}
	if got := CRC16([]byte{0x01, 0x03, 0x00, 0x00, 0x00, 0x0A}); byte(got) != 0xC5 || byte(got>>8) != 0xCD {
		t.Errorf("CRC16(01 03 00 00 00 0A) = %04X, want C5 CD on the wire", got)
	}
	if got := CRC16(nil); got != 0xFFFF {
		t.Errorf("CRC16 of nothing = %04X, want the preset FFFF", got)
	}
	if got := AppendCRC([]byte{0x01, 0x03, 0x00, 0x00, 0x00, 0x0A}); !bytes.Equal(got[6:], []byte{0xC5, 0xCD}) {
		t.Errorf("CRC of 01 03 00 00 00 0A sent as % X, want C5 CD", got[6:])
	}
}

// t3.5 from Modbus over Serial Line V1.02, 2.5.1.1: 3.5 characters of 11
// bits up to 19200 baud, 1.750 ms above; the inter-character limit is
// max(t3.5, 20 ms) (see charGap for why).
func TestSerialTiming(t *testing.T) {
	for _, c := range []struct {
		baud         int
		gap, charGap time.Duration
		settle       time.Duration
	}{
		{1200, 32083333, 32083333, 64166666},
		{9600, 4010416, 20 * time.Millisecond, 50 * time.Millisecond},
		{19200, 2005208, 20 * time.Millisecond, 50 * time.Millisecond},
		{19201, 1750 * time.Microsecond, 20 * time.Millisecond, 50 * time.Millisecond},
		{115200, 1750 * time.Microsecond, 20 * time.Millisecond, 50 * time.Millisecond},
	} {
		if got := frameGap(c.baud); got != c.gap {
			t.Errorf("t3.5 at %d baud = %v, want %v", c.baud, got, c.gap)
		}
		if got := charGap(c.baud); got != c.charGap {
			t.Errorf("inter-character limit at %d baud = %v, want %v", c.baud, got, c.charGap)
		}
		if got := settleTime(c.baud); got != c.settle {
			t.Errorf("settle time at %d baud = %v, want %v", c.baud, got, c.settle)
		}
	}
}
