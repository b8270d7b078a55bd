package sim

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"glowgate/bus/modbus"
	"glowgate/convert"
)

// Channel is one spectral channel of a simulated head.
type Channel struct {
	// Model gives the channel's blackbody signal S_bb(T) at T kelvin.
	Model convert.Model
	// Emissivity is the target's emissivity ε in this channel, within (0, 1].
	Emissivity float64
	// Field says where and how the channel signal is served.
	Field modbus.Field
}

// Head is a simulated pyrometer head: a target whose temperature and sight-path
// transmission follow scripted profiles, seen through one or more channels
// (two for a ratio head, more for a multi-colour head).
type Head struct {
	Name  string
	Unit  uint8        // Modbus unit id the head answers to
	Table modbus.Table // register table holding the channel signals

	Channels []Channel

	Temperature Profile // target temperature T(t), kelvin, > 0
	// Transmission is the grey sight-path transmission τ(t), a fraction within
	// [0, 1]. Its zero value means a blocked path (τ = 0); a clear path is
	// Constant(1).
	Transmission Profile
	// Noise is the relative 1-sigma noise of each channel signal, drawn
	// independently per channel and per sample; 0 gives exact signals.
	Noise float64
	// Seed seeds the head's noise source (see NewRand).
	Seed int64

	// Status, when set, is a status word served beside the channels.
	Status *StatusWord
	// Extras are further values served beside the channels.
	Extras []Extra
	// Faults script the head's misbehaviour on the bus.
	Faults []Fault
}

// pcgStream is the second PCG word of every head's noise source; the first is the
// head's Seed, so equal seeds give equal noise sequences.
const pcgStream = 0x676c6f7767617465

// NewRand returns a noise source seeded from h.Seed. Two sources made from the
// same seed draw the same sequence. A *rand.Rand is not safe for concurrent use.
func (h *Head) NewRand() *rand.Rand {
	return rand.New(rand.NewPCG(uint64(h.Seed), pcgStream))
}

// Signals returns the channel signals at elapsed time since the scenario start,
// one per channel in channel order:
//
//	S_i = ε_i · τ(t) · S_i,bb(T(t)) · (1 + Noise·n_i),   n_i ~ N(0, 1)
//
// where T(t) is h.Temperature.At(elapsed) in kelvin, τ(t) is
// h.Transmission.At(elapsed) and S_i,bb is the channel model's blackbody signal,
// in the model's signal unit. A result below zero (possible with large noise) is
// clipped to 0. The n_i are drawn from rng in channel order; with a nil rng or a
// zero Noise no numbers are drawn and the signals are exact.
//
// Signals reuses dst's storage when its capacity suffices. A channel without a
// Model gives NaN; Validate reports such heads.
func (h *Head) Signals(elapsed time.Duration, rng *rand.Rand, dst []float64) []float64 {
	if cap(dst) >= len(h.Channels) {
		dst = dst[:len(h.Channels)]
	} else {
		dst = make([]float64, len(h.Channels))
	}
	t := h.Temperature.At(elapsed)
	tau := h.Transmission.At(elapsed)
	for i, c := range h.Channels {
		if c.Model == nil {
			dst[i] = math.NaN()
			continue
		}
		s := c.Emissivity * tau * c.Model.Signal(t)
		if h.Noise != 0 && rng != nil {
			s *= 1 + h.Noise*rng.NormFloat64()
		}
		if s < 0 {
			s = 0
		}
		dst[i] = s
	}
	return dst
}

// Validate reports the first thing wrong with the head, naming the field: an
// unknown table, no channels, a channel without a model, an emissivity outside
// (0, 1], a register field (of a channel, the status word or an extra) of no
// length, with a non-finite scale or offset, beyond address 65535 or
// overlapping another field in the same table, a temperature profile that
// reaches 0 K or below, a transmission profile leaving [0, 1], a negative or
// non-finite noise, a status word or extra that is not well formed, or a fault
// Fault.Validate refuses.
func (h *Head) Validate() error {
	if err := h.validate(); err != nil {
		return fmt.Errorf("head %q (unit %d): %w", h.Name, h.Unit, err)
	}
	return nil
}

func (h *Head) validate() error {
	switch h.Table {
	case modbus.InputRegisters, modbus.HoldingRegisters:
	default:
		return fmt.Errorf("table: unknown register table %d", h.Table)
	}
	if len(h.Channels) == 0 {
		return errors.New("channels: none")
	}
	for i, c := range h.Channels {
		if c.Model == nil {
			return fmt.Errorf("channels[%d]: no model", i)
		}
		if !(c.Emissivity > 0 && c.Emissivity <= 1) {
			return fmt.Errorf("channels[%d].emissivity: %v outside (0, 1]", i, c.Emissivity)
		}
	}
	if h.Status != nil {
		if err := h.Status.validate(); err != nil {
			return fmt.Errorf("status.%w", err)
		}
	}
	for i := range h.Extras {
		if err := h.Extras[i].validate(); err != nil {
			return fmt.Errorf("extras[%d].%w", i, err)
		}
	}
	fields := h.placedFields()
	for i, p := range fields {
		f := p.field
		n := f.Len()
		if n == 0 {
			return fmt.Errorf("%s.field: register type %v has no length", p.what, f.Type)
		}
		if end := uint32(f.Address) + uint32(n); end > 1<<16 {
			return fmt.Errorf("%s.field: registers %d..%d reach beyond address 65535", p.what, f.Address, end-1)
		}
		if math.IsNaN(f.Scale) || math.IsInf(f.Scale, 0) || math.IsNaN(f.Offset) || math.IsInf(f.Offset, 0) {
			return fmt.Errorf("%s.field: scale %v and offset %v must be finite", p.what, f.Scale, f.Offset)
		}
		for _, o := range fields[:i] {
			if o.table == p.table && overlap(f.Address, n, o.field.Address, o.field.Len()) {
				return fmt.Errorf("%s.field: %v registers %d..%d overlap %s at %d..%d",
					p.what, p.table, f.Address, uint32(f.Address)+uint32(n)-1,
					o.what, o.field.Address, uint32(o.field.Address)+uint32(o.field.Len())-1)
			}
		}
	}
	if err := h.Temperature.Validate(); err != nil {
		return fmt.Errorf("temperature: %w", err)
	}
	if lo, _ := h.Temperature.Bounds(); !(lo > 0) {
		return fmt.Errorf("temperature: reaches %g K, want above 0 K", lo)
	}
	if err := h.Transmission.Validate(); err != nil {
		return fmt.Errorf("transmission: %w", err)
	}
	if lo, hi := h.Transmission.Bounds(); lo < 0 || hi > 1 {
		return fmt.Errorf("transmission: ranges over %g..%g, want within 0..1", lo, hi)
	}
	if !(h.Noise >= 0) || math.IsInf(h.Noise, 0) {
		return fmt.Errorf("noise: %v, want a finite value >= 0", h.Noise)
	}
	for i, f := range h.Faults {
		if err := f.Validate(); err != nil {
			return fmt.Errorf("faults[%d].%w", i, err)
		}
	}
	return nil
}

// placedField is one register field a head serves: a channel signal, the
// status word or an extra value.
type placedField struct {
	what  string // "channels[0]", "status", "extras[1]"
	kind  fieldKind
	index int // channel or extra index
	table modbus.Table
	field modbus.Field
}

type fieldKind uint8

const (
	channelField fieldKind = iota
	statusField
	extraField
)

// placedFields lists the head's register fields: channels, then the status
// word, then the extras.
func (h *Head) placedFields() []placedField {
	out := make([]placedField, 0, len(h.Channels)+1+len(h.Extras))
	for i, c := range h.Channels {
		out = append(out, placedField{fmt.Sprintf("channels[%d]", i), channelField, i, h.Table, c.Field})
	}
	tableOr := func(t *modbus.Table) modbus.Table {
		if t != nil {
			return *t
		}
		return h.Table
	}
	if h.Status != nil {
		out = append(out, placedField{"status", statusField, 0, tableOr(h.Status.Table), h.Status.Field})
	}
	for i, e := range h.Extras {
		out = append(out, placedField{fmt.Sprintf("extras[%d]", i), extraField, i, tableOr(e.Table), e.Field})
	}
	return out
}

// overlap reports whether register ranges [a, a+n) and [b, b+m) share a register.
func overlap(a, n, b, m uint16) bool {
	aEnd, bEnd := uint32(a)+uint32(n), uint32(b)+uint32(m)
	return uint32(a) < bEnd && uint32(b) < aEnd
}
