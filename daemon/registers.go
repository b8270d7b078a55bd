package daemon

import (
	"fmt"
	"math"
	"slices"

	"glowgate/bus/modbus"
	"glowgate/bus/mqtt"
	"glowgate/daemon/config"
)

// regMap is where a head's values live: the coalesced reads of one poll
// and, for every value, the read that holds it.
type regMap struct {
	reads    []modbus.Request
	channels []fieldRef
	status   *statusRef
	extras   []extraRef
}

// fieldRef is one value in the reads: its field and which read holds it.
type fieldRef struct {
	field modbus.Field
	read  int
}

type statusRef struct {
	fieldRef
	bits map[int]string
}

type extraRef struct {
	fieldRef
	cfg config.Extra
}

// newRegMap lays out a head's register map: channel signals, status word
// and extras, coalesced into the fewest reads of at most 125 registers.
func newRegMap(h config.Head) (regMap, error) {
	var rm regMap
	headTable, err := modbus.ParseTable(h.Registers)
	if err != nil {
		return rm, err
	}
	tableOf := func(name string) (modbus.Table, error) {
		if name == "" {
			return headTable, nil
		}
		return modbus.ParseTable(name)
	}
	type pending struct {
		table modbus.Table
		field modbus.Field
	}
	var all []pending
	for _, ch := range h.Channels {
		f, err := signalField(ch.Signal)
		if err != nil {
			return rm, fmt.Errorf("channel %s: %w", ch.Name, err)
		}
		all = append(all, pending{headTable, f})
	}
	if st := h.Status; st != nil {
		t, err := tableOf(st.Table)
		if err != nil {
			return rm, fmt.Errorf("status word: %w", err)
		}
		all = append(all, pending{t, modbus.Field{Address: st.Address, Type: modbus.Uint16, Scale: 1}})
	}
	for _, e := range h.Extras {
		t, err := tableOf(e.Table)
		if err != nil {
			return rm, fmt.Errorf("extra %s: %w", e.Name, err)
		}
		f, err := signalField(e.Signal)
		if err != nil {
			return rm, fmt.Errorf("extra %s: %w", e.Name, err)
		}
		all = append(all, pending{t, f})
	}
	spans := make([]modbus.Span, len(all))
	for i, p := range all {
		spans[i] = modbus.Span{Table: p.table, Address: p.field.Address, Count: p.field.Len()}
	}
	blocks, which, err := modbus.Coalesce(spans, modbus.MaxQuantity)
	if err != nil {
		return rm, err
	}
	for _, b := range blocks {
		rm.reads = append(rm.reads, modbus.Request{Unit: h.UnitID, Table: b.Table, Address: b.Address, Quantity: b.Count})
	}
	k := 0
	for range h.Channels {
		rm.channels = append(rm.channels, fieldRef{all[k].field, which[k]})
		k++
	}
	if h.Status != nil {
		rm.status = &statusRef{fieldRef{all[k].field, which[k]}, h.Status.Bits}
		k++
	}
	for _, e := range h.Extras {
		rm.extras = append(rm.extras, extraRef{fieldRef{all[k].field, which[k]}, e})
		k++
	}
	return rm, nil
}

// value decodes one field from the poll's blocks; NaN when it cannot.
func (rm *regMap) value(blocks [][]uint16, ref fieldRef) float64 {
	if ref.read >= len(blocks) {
		return math.NaN()
	}
	v, err := ref.field.Decode(blocks[ref.read], rm.reads[ref.read].Address)
	if err != nil {
		return math.NaN()
	}
	return v
}

// signals decodes the channel signals into dst.
func (rm *regMap) signals(blocks [][]uint16, dst []float64) []float64 {
	dst = dst[:0]
	for _, ref := range rm.channels {
		dst = append(dst, rm.value(blocks, ref))
	}
	return dst
}

// headState is what a head's status word and extras say, beside its
// signals.
type headState struct {
	flags  []string          // status flags and extra verdicts, by name
	extras []mqtt.NamedValue // the extra values, in the reading's units
}

// state decodes the status word and the extras of one poll. A head
// temperature is read in degC and published in unit.
func (rm *regMap) state(blocks [][]uint16, unit string) headState {
	var st headState
	if s := rm.status; s != nil {
		if w := rm.value(blocks, s.fieldRef); !math.IsNaN(w) {
			word := uint16(w)
			for bit := range 16 {
				if name, ok := s.bits[bit]; ok && word&(1<<bit) != 0 {
					st.flags = append(st.flags, name)
				}
			}
		}
	}
	for _, e := range rm.extras {
		v := rm.value(blocks, e.fieldRef)
		nv := mqtt.NamedValue{Name: e.cfg.Name, Value: finite(v)}
		switch e.cfg.Kind {
		case "head_temperature":
			k := v + 273.15
			if e.cfg.WarnAbove > 0 && k > e.cfg.WarnAbove && !slices.Contains(st.flags, "head_too_warm") {
				st.flags = append(st.flags, "head_too_warm")
			}
			if unit == "K" {
				nv.Value = finite(k)
			}
		case "setting":
			if math.IsNaN(v) || math.Abs(v-e.cfg.Expect) > e.cfg.Tolerance+1e-12 {
				st.flags = append(st.flags, "setting_mismatch")
			}
		}
		if nv.Value != nil {
			r := round(*nv.Value, 6)
			nv.Value = &r
		}
		st.extras = append(st.extras, nv)
	}
	return st
}
