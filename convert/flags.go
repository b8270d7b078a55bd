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
	// no temperature rests on that channel (with two channels: there is no
	// ratio temperature; with more, the published temperature is NaN when
	// its pair uses the channel or the fit is published).
	NoSignal
	// Saturated: a channel signal is at or above its saturation level, so
	// the channel cannot be trusted and no temperature rests on it (as for
	// NoSignal).
	Saturated
	// Nongrey: the spread of the pair temperatures (three or more
	// channels) is above its limit: the target is not grey, and every pair
	// temperature is biased by its own emissivity ratio.
	Nongrey
	// Obstructed: over the rolling window the signal fractions fell while
	// the ratio temperature held steady: a neutral loss in the sight path
	// (dirty window, grey smoke, partial fill of the field of view).
	Obstructed
	// SelectiveLoss: over the rolling window the ratio temperature moved
	// with ln f: a spectrally selective loss (steam, fine dust) biases it.
	SelectiveLoss
	// ReflectionSuspected: a signal fraction is well above 1: radiation
	// from hotter surroundings is reflected into the field of view.
	ReflectionSuspected
	// Held: the published temperature is the last valid one, held for a
	// bounded time while the signal is low.
	Held
)

// numFlags is the number of defined flags.
const numFlags = 10

// flagNames returns the names of the flags, in bit order.
func flagNames() [numFlags]string {
	return [numFlags]string{
		"low_signal", "below_range", "above_range", "no_signal", "saturated",
		"nongrey", "obstructed", "selective_loss", "reflection_suspected", "held",
	}
}

// Names returns the names of the set flags in bit order (see flagNames).
// Unknown bits are ignored. It returns nil when no flag is set.
func (f Flags) Names() []string { return f.AppendNames(nil) }

// AppendNames appends the names of the set flags, in bit order, to dst and
// returns the extended slice. It does not allocate when dst has room.
func (f Flags) AppendNames(dst []string) []string {
	for i, n := range flagNames() {
		if f&(1<<i) != 0 {
			dst = append(dst, n)
		}
	}
	return dst
}

// String returns the flag names joined by "|", or "ok" when none is set.
func (f Flags) String() string {
	var buf [numFlags]string
	n := f.AppendNames(buf[:0])
	if len(n) == 0 {
		return "ok"
	}
	return strings.Join(n, "|")
}
