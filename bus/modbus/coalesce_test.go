package modbus_test

import (
	"fmt"
	"math/rand/v2"
	"slices"
	"testing"

	"glowgate/bus/modbus"
)

func in(addr, n uint16) modbus.Span {
	return modbus.Span{Table: modbus.InputRegisters, Address: addr, Count: n}
}

func hold(addr, n uint16) modbus.Span {
	return modbus.Span{Table: modbus.HoldingRegisters, Address: addr, Count: n}
}

func ExampleCoalesce() {
	// A head's register map: four float32 signals, a uint16 status word
	// and a holding-register setting, in no particular order.
	fields := []modbus.Span{
		modbus.Field{Address: 100, Type: modbus.Float32}.Span(modbus.InputRegisters),
		modbus.Field{Address: 0, Type: modbus.Float32}.Span(modbus.InputRegisters),
		modbus.Field{Address: 2, Type: modbus.Float32}.Span(modbus.InputRegisters),
		modbus.Field{Address: 12, Type: modbus.Uint16}.Span(modbus.InputRegisters),
		modbus.Field{Address: 4, Type: modbus.Float32}.Span(modbus.InputRegisters),
		modbus.Field{Address: 5, Type: modbus.Uint16}.Span(modbus.HoldingRegisters),
	}
	blocks, which, err := modbus.Coalesce(fields, modbus.MaxQuantity)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, b := range blocks {
		fmt.Println(b.Request(3))
	}
	fmt.Println("field i is in block which[i]:", which)
	// Output:
	// read input registers unit=3 addr=0 qty=13
	// read input registers unit=3 addr=100 qty=2
	// read holding registers unit=3 addr=5 qty=1
	// field i is in block which[i]: [1 0 0 0 0 2]
}

func TestCoalesce(t *testing.T) {
	cases := []struct {
		name        string
		spans       []modbus.Span
		maxQty, gap uint16
		want        []modbus.Span
	}{
		{"none", nil, 125, 8, nil},
		{"gap of 8 joins", []modbus.Span{in(0, 2), in(10, 1)}, 125, 8, []modbus.Span{in(0, 11)}},
		{"gap of 9 splits", []modbus.Span{in(0, 2), in(11, 1)}, 125, 8, []modbus.Span{in(0, 2), in(11, 1)}},
		{"adjacent join without gaps", []modbus.Span{in(2, 2), in(0, 2)}, 125, 0, []modbus.Span{in(0, 4)}},
		{"tables stay apart", []modbus.Span{hold(0, 1), in(0, 1), in(1, 1), hold(1, 1)}, 125, 8,
			[]modbus.Span{in(0, 2), hold(0, 2)}},
		{"125 at most", consecutive(130, 1), 125, 0, []modbus.Span{in(0, 125), in(125, 5)}},
		// 63 float32 values in 126 registers: the 63rd would straddle the
		// 125-register limit, so it starts the second block whole.
		{"fields are not split", consecutive(63, 2), 125, 0, []modbus.Span{in(0, 124), in(124, 2)}},
		{"smaller blocks", []modbus.Span{in(0, 2), in(2, 2), in(4, 2)}, 4, 8, []modbus.Span{in(0, 4), in(4, 2)}},
		{"top of the address space", []modbus.Span{in(65534, 2), in(65530, 1)}, 125, 8, []modbus.Span{in(65530, 6)}},
	}
	for _, c := range cases {
		got, which, err := modbus.CoalesceWithGap(c.spans, c.maxQty, c.gap)
		if err != nil || !slices.Equal(got, c.want) {
			t.Errorf("%s: Coalesce = %v, %v; want %v", c.name, got, err, c.want)
		}
		checkCover(t, c.spans, got, which, c.maxQty)
	}
}

// consecutive is n spans of length l one after the other from input 0.
func consecutive(n int, l uint16) []modbus.Span {
	s := make([]modbus.Span, n)
	for i := range s {
		s[i] = in(uint16(i)*l, l)
	}
	return s
}

func TestCoalesceRefuses(t *testing.T) {
	cases := []struct {
		spans  []modbus.Span
		maxQty uint16
		want   string
	}{
		{[]modbus.Span{in(0, 2), in(10, 2), in(1, 2)}, 125,
			"coalesce: span 2 (input registers 1..2) overlaps span 0 (input registers 0..1)"},
		{[]modbus.Span{hold(7, 1), hold(7, 1)}, 125,
			"coalesce: span 1 (holding registers 7..7) overlaps span 0 (holding registers 7..7)"},
		{[]modbus.Span{in(0, 10), in(2, 2)}, 125,
			"coalesce: span 1 (input registers 2..3) overlaps span 0 (input registers 0..9)"},
		{[]modbus.Span{in(0, 1), in(5, 0)}, 125, "coalesce: span 1: no registers (input address 5)"},
		{[]modbus.Span{{Table: 7, Count: 1}}, 125, "coalesce: span 0: unknown register table Table(7)"},
		{[]modbus.Span{in(65535, 2)}, 125, "coalesce: span 0: input registers 65535..65536 reach beyond address 65535"},
		{[]modbus.Span{in(0, 4)}, 3, "coalesce: span 0 (input registers 0..3): 4 registers, more than the 3 one read may ask"},
		{nil, 0, "coalesce: block size 0 outside 1..125"},
		{nil, 126, "coalesce: block size 126 outside 1..125"},
	}
	for _, c := range cases {
		got, _, err := modbus.Coalesce(c.spans, c.maxQty)
		if err == nil || err.Error() != c.want {
			t.Errorf("Coalesce(%v, %d) = %v, %v; want error %q", c.spans, c.maxQty, got, err, c.want)
		}
	}
}

// Against an exhaustive search: on random register maps the greedy packing
// needs as few blocks as the best partition of the sorted spans into
// feasible runs (dynamic programming), and its blocks cover every span
// once, within the limits.
func TestCoalesceIsMinimal(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for trial := range 2000 {
		maxQty := uint16(1 + rng.IntN(20))
		gap := uint16(rng.IntN(6))
		var spans []modbus.Span
		addr := 0
		for range rng.IntN(12) {
			addr += rng.IntN(8)
			l := 1 + rng.IntN(min(int(maxQty), 3))
			spans = append(spans, in(uint16(addr), uint16(l)))
			addr += l
		}
		rng.Shuffle(len(spans), func(i, j int) { spans[i], spans[j] = spans[j], spans[i] })
		blocks, which, err := modbus.CoalesceWithGap(spans, maxQty, gap)
		if err != nil {
			t.Fatalf("trial %d: %v", trial, err)
		}
		checkCover(t, spans, blocks, which, maxQty)
		if best := fewestBlocks(spans, maxQty, gap); len(blocks) != best {
			t.Fatalf("trial %d: %d blocks for %v (max %d, gap %d), best is %d: %v",
				trial, len(blocks), spans, maxQty, gap, best, blocks)
		}
	}
}

// checkCover checks that every span lies in exactly one block, the one
// which names, and that blocks keep to maxQty and their order.
func checkCover(t *testing.T, spans, blocks []modbus.Span, which []int, maxQty uint16) {
	t.Helper()
	for i, b := range blocks {
		if b.Count < 1 || b.Count > maxQty {
			t.Fatalf("block %v longer than %d", b, maxQty)
		}
		if i > 0 && (b.Table < blocks[i-1].Table || b.Table == blocks[i-1].Table && b.Address <= blocks[i-1].Address) {
			t.Fatalf("blocks out of order: %v", blocks)
		}
	}
	if len(which) != len(spans) {
		t.Fatalf("%d block indices for %d spans", len(which), len(spans))
	}
	for i, s := range spans {
		n := 0
		for _, b := range blocks {
			if b.Contains(s) {
				n++
			}
		}
		if n != 1 || which[i] < 0 || which[i] >= len(blocks) || !blocks[which[i]].Contains(s) {
			t.Fatalf("span %v in %d blocks of %v, which = %v", s, n, blocks, which)
		}
	}
}

// fewestBlocks: f[j] = min over i ≤ j of f[i] + 1 where spans i..j (sorted)
// fit one block.
func fewestBlocks(spans []modbus.Span, maxQty, gap uint16) int {
	s := slices.Clone(spans)
	slices.SortFunc(s, func(a, b modbus.Span) int { return int(a.Address) - int(b.Address) })
	f := make([]int, len(s)+1)
	for j := 1; j <= len(s); j++ {
		f[j] = 1 << 30
		for i := j - 1; i >= 0; i-- {
			ok := int(s[j-1].Address)+int(s[j-1].Count)-int(s[i].Address) <= int(maxQty)
			for k := i + 1; k < j && ok; k++ {
				ok = int(s[k].Address)-int(s[k-1].Address)-int(s[k-1].Count) <= int(gap)
			}
			if ok {
				f[j] = min(f[j], f[i]+1)
			}
		}
	}
	return f[len(s)]
}

// Coalesce never panics, and what it accepts it covers.
func FuzzCoalesce(f *testing.F) {
	f.Add([]byte{0, 0, 0, 2, 0, 0, 10, 1}, uint16(125), uint16(8))
	f.Add([]byte{1, 255, 255, 2}, uint16(3), uint16(0))
	f.Fuzz(func(t *testing.T, data []byte, maxQty, gap uint16) {
		var spans []modbus.Span
		for i := 0; i+4 <= len(data); i += 4 {
			spans = append(spans, modbus.Span{Table: modbus.Table(data[i] % 3),
				Address: uint16(data[i+1])<<8 | uint16(data[i+2]), Count: uint16(data[i+3] % 130)})
		}
		blocks, which, err := modbus.CoalesceWithGap(spans, maxQty, gap)
		if err == nil {
			checkCover(t, spans, blocks, which, maxQty)
		}
	})
}
