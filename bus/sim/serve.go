package sim

import (
	"errors"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"slices"
	"sync"
	"time"

	"glowgate/bus/modbus"
)

// Modbus function and exception codes the heads use (Modbus Application
// Protocol V1.1b3, sections 6.3, 6.4 and 7).
const (
	fcReadHolding = 0x03
	fcReadInput   = 0x04

	excIllegalFunction  = 0x01
	excIllegalAddress   = 0x02
	excIllegalValue     = 0x03
	excDeviceFailure    = 0x04
	excGatewayNoRespond = 0x0B
)

// servedHead is a head with its serving state, shared by the TCP and the RTU
// server.
type servedHead struct {
	head   Head
	fields []placedField
	ends   [2]uint32 // per table: one past the last register of any field; 0 = table not served
	logger *slog.Logger

	mu      sync.Mutex // guards everything below
	rng     *rand.Rand
	signals []float64
	scratch [2]uint16
	encode  rateLimit
	faults  []faultState
}

// copyHead returns h with every slice it holds copied, so later changes to the
// caller's head do not reach a server.
func copyHead(h Head) Head {
	h.Channels = slices.Clone(h.Channels)
	h.Temperature.Segments = slices.Clone(h.Temperature.Segments)
	h.Transmission.Segments = slices.Clone(h.Transmission.Segments)
	if h.Status != nil {
		st := *h.Status
		st.Bits = slices.Clone(st.Bits)
		if st.Table != nil {
			t := *st.Table
			st.Table = &t
		}
		h.Status = &st
	}
	h.Extras = slices.Clone(h.Extras)
	for i := range h.Extras {
		e := &h.Extras[i]
		e.Value.Segments = slices.Clone(e.Value.Segments)
		if e.Table != nil {
			t := *e.Table
			e.Table = &t
		}
	}
	h.Faults = slices.Clone(h.Faults)
	return h
}

// servedHeads validates and copies heads for a server named by where,
// refusing duplicate unit ids and whatever check refuses.
func servedHeads(heads []Head, logger *slog.Logger, check func(h *Head) error) (map[uint8]*servedHead, []int, error) {
	served := make(map[uint8]*servedHead, len(heads))
	var units []int
	var errs []error
	byUnit := make(map[uint8]int, len(heads))
	for i := range heads {
		h := copyHead(heads[i])
		if err := h.Validate(); err != nil {
			errs = append(errs, fmt.Errorf("heads[%d]: %w", i, err))
			continue
		}
		if check != nil {
			if err := check(&h); err != nil {
				errs = append(errs, fmt.Errorf("heads[%d]: head %q (unit %d): %w", i, h.Name, h.Unit, err))
				continue
			}
		}
		if j, dup := byUnit[h.Unit]; dup {
			errs = append(errs, fmt.Errorf("heads[%d]: head %q: unit id %d already used by heads[%d] %q",
				i, h.Name, h.Unit, j, heads[j].Name))
			continue
		}
		byUnit[h.Unit] = i
		sh := &servedHead{
			head:    h,
			fields:  h.placedFields(),
			logger:  logger.With("head", h.Name, "unit", h.Unit),
			rng:     h.NewRand(),
			signals: make([]float64, len(h.Channels)),
			faults:  make([]faultState, len(h.Faults)),
		}
		for _, p := range sh.fields {
			sh.ends[p.table] = max(sh.ends[p.table], uint32(p.field.Address)+uint32(p.field.Len()))
		}
		served[h.Unit] = sh
		units = append(units, int(h.Unit))
	}
	return served, units, errors.Join(errs...)
}

// decide returns the fault that applies to a request arriving at elapsed
// scenario time, counting the request in every fault whose window is open,
// and logs when a fault's window opens or closes (as requests reveal it).
func (h *servedHead) decide(elapsed time.Duration) hit {
	if len(h.head.Faults) == 0 {
		return hit{}
	}
	h.mu.Lock()
	defer h.mu.Unlock()
	var out hit
	for i, f := range h.head.Faults {
		st := &h.faults[i]
		active := inWindow(f.At, f.For, f.Period, elapsed)
		if active != st.active {
			st.active = active
			if active {
				h.logger.Info("simulated fault active", "fault", i, "kind", f.Kind.String(), "elapsed", elapsed)
			} else {
				h.logger.Info("simulated fault over", "fault", i, "kind", f.Kind.String(), "elapsed", elapsed)
			}
		}
		if !active {
			continue
		}
		st.seen++
		if out.kind == 0 && (f.Every <= 1 || st.seen%uint64(f.Every) == 0) {
			out = hit{kind: f.Kind, code: f.Code, delay: f.Delay}
		}
	}
	return out
}

// answer appends to dst the response PDU (function code and data) to the
// request PDU req addressed to h, at now, elapsed scenario time:
//
//   - 03/04 (read holding/input registers) with 4 data bytes and a quantity
//     of 1..125: the registers, else exception 03 (illegal data value);
//   - a table the head serves no field in, or a range past its last field's
//     register: exception 02 (illegal data address); registers between fields
//     read as 0;
//   - a value its field cannot encode (integer overflow, NaN): exception 04
//     (server device failure) and a rate-limited warning;
//   - any other function: exception 01 (illegal function).
func (h *servedHead) answer(dst, req []byte, now time.Time, elapsed time.Duration) []byte {
	fc := req[0]
	var table modbus.Table
	switch fc {
	case fcReadHolding:
		table = modbus.HoldingRegisters
	case fcReadInput:
		table = modbus.InputRegisters
	default:
		return append(dst, fc|0x80, excIllegalFunction)
	}
	if len(req) != 5 {
		return append(dst, fc|0x80, excIllegalValue)
	}
	addr := uint16(req[1])<<8 | uint16(req[2])
	qty := uint16(req[3])<<8 | uint16(req[4])
	if qty < 1 || qty > modbus.MaxQuantity {
		return append(dst, fc|0x80, excIllegalValue)
	}
	end := h.ends[table]
	if end == 0 || uint32(addr)+uint32(qty) > end {
		return append(dst, fc|0x80, excIllegalAddress)
	}
	n := len(dst)
	dst = append(dst, fc, byte(2*qty))
	dst = append(dst, make([]byte, 2*int(qty))...)
	if !h.fill(dst[n+2:], table, addr, qty, now, elapsed) {
		return append(dst[:n], fc|0x80, excDeviceFailure)
	}
	return dst
}

// fill writes registers addr..addr+qty−1 of table, big-endian, into out, and
// reports false when a value cannot be encoded.
func (h *servedHead) fill(out []byte, table modbus.Table, addr, qty uint16, now time.Time, elapsed time.Duration) bool {
	h.mu.Lock()
	defer h.mu.Unlock()
	sig := h.head.Signals(elapsed, h.rng, h.signals)
	for _, p := range h.fields {
		f := p.field
		n := f.Len()
		if p.table != table || !overlap(addr, qty, f.Address, n) {
			continue
		}
		var v float64
		switch p.kind {
		case channelField:
			v = sig[p.index]
		case statusField:
			v = float64(h.head.Status.Word(elapsed))
		case extraField:
			v = h.head.Extras[p.index].Value.At(elapsed)
		}
		block := h.scratch[:n]
		clear(block)
		if err := f.Encode(v, block, f.Address); err != nil {
			if ok, skipped := h.encode.allow(now); ok {
				h.logger.Warn("value cannot be encoded into its register field; answering exception 0x04",
					"field", p.what, "value", v, "elapsed", elapsed, "err", err, "suppressed", skipped)
			}
			return false
		}
		lo := max(uint32(addr), uint32(f.Address))
		hi := min(uint32(addr)+uint32(qty), uint32(f.Address)+uint32(n))
		for r := lo; r < hi; r++ {
			w := block[r-uint32(f.Address)]
			i := 2 * (r - uint32(addr))
			out[i], out[i+1] = byte(w>>8), byte(w)
		}
	}
	return true
}

// rateLimit lets one event through per logEvery and counts the rest.
type rateLimit struct {
	mu         sync.Mutex
	last       time.Time
	suppressed int
}

// allow reports whether an event at now may be logged, and how many events were
// held back since the last one that was.
func (r *rateLimit) allow(now time.Time) (ok bool, suppressed int) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if !r.last.IsZero() && now.Sub(r.last) < logEvery {
		r.suppressed++
		return false, 0
	}
	r.last, suppressed, r.suppressed = now, r.suppressed, 0
	return true, suppressed
}
