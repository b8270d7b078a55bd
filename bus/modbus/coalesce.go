package modbus

import (
	"cmp"
	"fmt"
	"slices"
)

// Span is a run of consecutive registers of one table: the registers one
// field of a register map occupies, or a block that one request reads.
type Span struct {
	Table   Table
	Address uint16 // protocol (zero-based) address of the first register
	Count   uint16 // number of registers
}

// Span is the run of registers the field occupies in table.
func (f Field) Span(table Table) Span {
	return Span{Table: table, Address: f.Address, Count: f.Len()}
}

// end is one past the span's last address.
func (s Span) end() int { return int(s.Address) + int(s.Count) }

// Contains reports whether o lies wholly inside s (same table).
func (s Span) Contains(o Span) bool {
	return s.Table == o.Table && o.Address >= s.Address && o.end() <= s.end()
}

// Request is the request that reads the span from unit.
func (s Span) Request(unit uint8) Request {
	return Request{Unit: unit, Table: s.Table, Address: s.Address, Quantity: s.Count}
}

func (s Span) String() string {
	if s.Count == 0 {
		return fmt.Sprintf("%v registers at %d (none)", s.Table, s.Address)
	}
	return fmt.Sprintf("%v registers %d..%d", s.Table, s.Address, s.end()-1)
}

// DefaultCoalesceGap is the largest run of unused registers Coalesce reads
// to join two spans into one block. Reading a gap of g registers costs 2g
// characters on the wire; a separate transaction costs a request (8
// characters), an answer's framing (5), two t3.5 silences (7) and the
// device's turnaround: some 20 characters plus a turnaround, the price of
// about 10 registers (Modbus over Serial Line V1.02 frame layout and
// timing). So joining across 8 unused registers never loses, and it wins as
// soon as the device takes any time to answer. Devices that refuse to read
// registers outside their map (exception 02 on a gap) need
// CoalesceWithGap(spans, maxQty, 0).
const DefaultCoalesceGap = 8

// Coalesce is CoalesceWithGap with DefaultCoalesceGap.
func Coalesce(spans []Span, maxQty uint16) (blocks []Span, which []int, err error) {
	return CoalesceWithGap(spans, maxQty, DefaultCoalesceGap)
}

// CoalesceWithGap merges the spans of a register map into the fewest blocks
// that cover them, each of at most maxQty registers (1..125) in one table,
// where a block may also include runs of at most maxGap unused registers
// between spans. Blocks come out ordered by table (input, then holding) and
// address, and which[i] is the index of the block holding spans[i]. Every
// span lies wholly in one block (a value is never split across two reads),
// so the registers of each field are read at one instant.
//
// Method: per table, the spans sorted by address are packed greedily, each
// block extended by the next span while the block stays within maxQty and
// the gap to that span within maxGap. A run of spans that fits one block
// still fits after dropping spans from either end, so the greedy packing,
// whose every block reaches as far as any block starting there can, needs
// no more blocks than any other packing.
//
// It fails, naming the span by its index in spans, on an empty span, a span
// of an unknown table, a span past address 65535, a span longer than
// maxQty, or two spans sharing a register; and when maxQty is outside
// 1..125.
func CoalesceWithGap(spans []Span, maxQty, maxGap uint16) (blocks []Span, which []int, err error) {
	if maxQty < 1 || maxQty > MaxQuantity {
		return nil, nil, fmt.Errorf("coalesce: block size %d outside 1..%d", maxQty, MaxQuantity)
	}
	order := make([]int, len(spans))
	for i, s := range spans {
		order[i] = i
		switch {
		case s.Table != InputRegisters && s.Table != HoldingRegisters:
			return nil, nil, fmt.Errorf("coalesce: span %d: unknown register table %v", i, s.Table)
		case s.Count == 0:
			return nil, nil, fmt.Errorf("coalesce: span %d: no registers (%v address %d)", i, s.Table, s.Address)
		case s.end() > 1<<16:
			return nil, nil, fmt.Errorf("coalesce: span %d: %v registers %d..%d reach beyond address 65535",
				i, s.Table, s.Address, s.end()-1)
		case s.Count > maxQty:
			return nil, nil, fmt.Errorf("coalesce: span %d (%v): %d registers, more than the %d one read may ask",
				i, s, s.Count, maxQty)
		}
	}
	slices.SortStableFunc(order, func(a, b int) int {
		return cmp.Or(cmp.Compare(spans[a].Table, spans[b].Table), cmp.Compare(spans[a].Address, spans[b].Address))
	})
	which = make([]int, len(spans))
	last := -1 // index in spans of the span reaching furthest in the current block
	for _, i := range order {
		s := spans[i]
		if last >= 0 && spans[last].Table == s.Table && int(s.Address) < spans[last].end() {
			return nil, nil, fmt.Errorf("coalesce: span %d (%v) overlaps span %d (%v)", i, s, last, spans[last])
		}
		last = i
		if n := len(blocks); n > 0 {
			b := &blocks[n-1]
			if b.Table == s.Table && int(s.Address)-b.end() <= int(maxGap) && s.end()-int(b.Address) <= int(maxQty) {
				b.Count = uint16(s.end() - int(b.Address))
				which[i] = n - 1
				continue
			}
		}
		blocks = append(blocks, s)
		which[i] = len(blocks) - 1
	}
	return blocks, which, nil
}
