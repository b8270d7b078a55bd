package convert

import "strings"

// Flags are the quality flags a conversion raises; several may be set.
type Flags uint32

// The flags, in bit order.
const (
	// LowSignal: a channel's signal fraction S/S_bb(T) is below the
	// configured low-signal limit, so the temperature is noisy and the
	// target may be obstructed or out of the field of view.
	LowSignal Flags = 1 << iota
	// BelowRange: the ratio temperature is below the measuring range (or,
	// with Temperature NaN, below the solver bracket).
	BelowRange
	// AboveRange: the ratio temperature is above the measuring range (or,
	// with Temperature NaN, above the solver bracket).
	AboveRange
	// NoSignal: a channel signal is zero, negative, NaN or infinite, so
	// there is no ratio temperature.
	NoSignal
)

// Names returns the names of the set flags in bit order: "low_signal",
// "below_range", "above_range", "no_signal". Unknown bits are ignored. It
// returns nil when no flag is set.
func (f Flags) Names() []string { return f.AppendNames(nil) }

// AppendNames appends the names of the set flags, in bit order, to dst and
// returns the extended slice. It does not allocate when dst has room.
func (f Flags) AppendNames(dst []string) []string {
	for i, n := range [...]string{"low_signal", "below_range", "above_range", "no_signal"} {
		if f&(1<<i) != 0 {
			dst = append(dst, n)
		}
	}
	return dst
}

// String returns the flag names joined by "|", or "ok" when none is set.
func (f Flags) String() string {
	var buf [4]string
	n := f.AppendNames(buf[:0])
	if len(n) == 0 {
		return "ok"
	}
	return strings.Join(n, "|")
}
