package status

import (
	"math"
	"strconv"
)

// historySize is how many points a head's history holds: an hour at one
// point per second.
const historySize = 3600

// history is a ring of a head's recent readings, at most one point per
// second: a reading in the same second as the newest point replaces it,
// and a reading older than the newest point (out of order) is left out.
// Temperatures are in the head's unit, NaN where the reading had none.
type history struct {
	nch   int
	t     []int64 // unix milliseconds
	temp  []float32
	raw   []float32
	frac  []float32 // historySize × nch
	start int       // index of the oldest point
	n     int       // points held
}

// reset empties h for readings with nch channels.
func (h *history) reset(nch int) {
	*h = history{nch: nch}
}

func (h *history) add(ms int64, temp, raw float64, frac []float64) {
	if h.t == nil {
		h.t = make([]int64, historySize)
		h.temp = make([]float32, historySize)
		h.raw = make([]float32, historySize)
		h.frac = make([]float32, historySize*h.nch)
	}
	var i int
	switch {
	case h.n > 0 && ms < h.t[h.last()]:
		return
	case h.n > 0 && floorDiv(ms, 1000) == floorDiv(h.t[h.last()], 1000):
		i = h.last()
	case h.n < historySize:
		i = (h.start + h.n) % historySize
		h.n++
	default:
		i = h.start
		h.start = (h.start + 1) % historySize
	}
	h.t[i] = ms
	h.temp[i] = float32(temp)
	h.raw[i] = float32(raw)
	for c := 0; c < h.nch && c < len(frac); c++ {
		h.frac[i*h.nch+c] = float32(frac[c])
	}
}

func (h *history) last() int { return (h.start + h.n - 1) % historySize }

func floorDiv(a, b int64) int64 {
	q := a / b
	if a%b != 0 && a < 0 {
		q--
	}
	return q
}

// selectPoints returns the indices of the points newer than fromMS,
// oldest first, keeping the newest point of each step-millisecond bucket.
func (h *history) selectPoints(fromMS, stepMS int64) []int {
	var idx []int
	for k := 0; k < h.n; k++ {
		i := (h.start + k) % historySize
		if h.t[i] <= fromMS {
			continue
		}
		if len(idx) > 0 && stepMS > 1000 && floorDiv(h.t[idx[len(idx)-1]], stepMS) == floorDiv(h.t[i], stepMS) {
			idx[len(idx)-1] = i
			continue
		}
		idx = append(idx, i)
	}
	return idx
}

// appendJSON appends the points idx as JSON members (no braces):
// "t":[…],"temperature":[…] and, when all is true,
// "raw_temperature":[…],"signal_fraction":[[…],…] (one array per channel).
func (h *history) appendJSON(dst []byte, idx []int, all bool) []byte {
	dst = append(dst, `"t":[`...)
	for k, i := range idx {
		if k > 0 {
			dst = append(dst, ',')
		}
		dst = strconv.AppendInt(dst, h.t[i], 10)
	}
	dst = append(dst, `],"temperature":`...)
	dst = appendSeries(dst, idx, func(i int) float32 { return h.temp[i] })
	if all {
		dst = append(dst, `,"raw_temperature":`...)
		dst = appendSeries(dst, idx, func(i int) float32 { return h.raw[i] })
		dst = append(dst, `,"signal_fraction":[`...)
		for c := 0; c < h.nch; c++ {
			if c > 0 {
				dst = append(dst, ',')
			}
			dst = appendSeries(dst, idx, func(i int) float32 { return h.frac[i*h.nch+c] })
		}
		dst = append(dst, ']')
	}
	return dst
}

func appendSeries(dst []byte, idx []int, at func(int) float32) []byte {
	dst = append(dst, '[')
	for k, i := range idx {
		if k > 0 {
			dst = append(dst, ',')
		}
		dst = appendNumber(dst, float64(at(i)), 32)
	}
	return append(dst, ']')
}

// appendNumber writes f as a JSON number with the shortest digits that
// read back to the same float of the given size, or null when not finite.
func appendNumber(dst []byte, f float64, bits int) []byte {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return append(dst, "null"...)
	}
	return strconv.AppendFloat(dst, f, 'g', -1, bits)
}
