package sim

import (
	"fmt"
	"time"

	"glowgate/bus/modbus"
)

// StatusWord is a head's status register: a 16-bit word whose bits are set
// while scripted episodes are active (a saturated detector, a dirty window,
// an aiming light switched on, …). Bits without an active episode are 0.
type StatusWord struct {
	// Field locates the word. It must be of type uint16 with no scaling (Scale
	// 0 or 1, Offset 0): the register holds the bit pattern itself. A
	// LittleEndian byte order swaps the two bytes as for any field.
	Field modbus.Field
	// Table is the register table holding the word; nil means the head's.
	Table *modbus.Table
	Bits  []BitEpisode
}

// BitEpisode sets one bit of a StatusWord while its window is active. The
// window is that of a Fault: from At (scenario time) for For (0: to the end),
// repeating every Period (0: once).
type BitEpisode struct {
	Bit    int // 0 (least significant) to 15
	At     time.Duration
	For    time.Duration
	Period time.Duration
}

// Word returns the status word at elapsed scenario time: the OR of 1<<Bit
// over the episodes active then.
func (s *StatusWord) Word(elapsed time.Duration) uint16 {
	var w uint16
	for _, b := range s.Bits {
		if b.Bit >= 0 && b.Bit < 16 && inWindow(b.At, b.For, b.Period, elapsed) {
			w |= 1 << b.Bit
		}
	}
	return w
}

func (s *StatusWord) validate() error {
	f := s.Field
	if f.Type != modbus.Uint16 {
		return fmt.Errorf("field: register type %v, want uint16", f.Type)
	}
	if (f.Scale != 0 && f.Scale != 1) || f.Offset != 0 {
		return fmt.Errorf("field: scale %v and offset %v, want none (the register holds the bits)", f.Scale, f.Offset)
	}
	if err := validateTable(s.Table); err != nil {
		return err
	}
	for i, b := range s.Bits {
		if b.Bit < 0 || b.Bit > 15 {
			return fmt.Errorf("bits[%d].bit: %d outside 0..15", i, b.Bit)
		}
		if err := validateWindow(b.At, b.For, b.Period); err != nil {
			return fmt.Errorf("bits[%d].%w", i, err)
		}
	}
	return nil
}

// Extra is a value a head serves beside its channel signals: its internal
// temperature, a setting read back, any scripted quantity. It carries no noise.
type Extra struct {
	Name  string       // names the value in logs and errors; optional
	Field modbus.Field // where and how the value is served
	// Table is the register table holding the value; nil means the head's.
	Table *modbus.Table
	Value Profile // the value over scenario time, in the unit the field's scale expects
}

func (e *Extra) validate() error {
	if err := validateTable(e.Table); err != nil {
		return err
	}
	if err := e.Value.Validate(); err != nil {
		return fmt.Errorf("value: %w", err)
	}
	return nil
}

func validateTable(t *modbus.Table) error {
	if t == nil {
		return nil
	}
	switch *t {
	case modbus.InputRegisters, modbus.HoldingRegisters:
		return nil
	}
	return fmt.Errorf("table: unknown register table %d", *t)
}
