package sim

import (
	"fmt"
	"math"
	"time"
)

// SegmentKind says how a profile segment moves the value.
type SegmentKind uint8

const (
	// Hold keeps the current value for the segment's Duration; Value is ignored.
	Hold SegmentKind = iota
	// Ramp changes the value linearly from the current value to Value over Duration.
	// A ramp of zero Duration behaves as a Step.
	Ramp
	// Step jumps to Value at the segment's start. It takes no time: its Duration is
	// ignored by At and rejected by Validate unless zero.
	Step
)

// String returns "hold", "ramp" or "step".
func (k SegmentKind) String() string {
	switch k {
	case Hold:
		return "hold"
	case Ramp:
		return "ramp"
	case Step:
		return "step"
	}
	return fmt.Sprintf("SegmentKind(%d)", uint8(k))
}

// Segment is one piece of a Profile.
type Segment struct {
	Kind     SegmentKind
	Value    float64       // target value of a Ramp or Step, in the profile's unit
	Duration time.Duration // length of a Hold or Ramp; zero for a Step
}

// length is the time the segment occupies on the profile's time axis. Negative
// durations count as zero, and so does any duration on a Step.
func (s Segment) length() time.Duration {
	if s.Kind == Step || s.Duration < 0 {
		return 0
	}
	return s.Duration
}

// Profile is a scripted quantity over time: it begins at Start at elapsed time
// zero and runs through Segments in order. A profile has no unit of its own; a
// Head uses one in kelvin for the target temperature and one as a fraction 0..1
// for the sight-path transmission.
//
// The value is right-continuous: at the instant a Step (or a zero-length Ramp)
// begins, the profile already has the new value; at the instant where a Ramp ends
// it has reached the ramp's Value exactly. After the last segment the value holds,
// unless Repeat is set, in which case the whole profile starts again from Start.
// A repeating profile whose segments take no time at all holds its end value.
type Profile struct {
	Start    float64
	Repeat   bool
	Segments []Segment
}

// Constant returns a profile that holds v for ever.
func Constant(v float64) Profile { return Profile{Start: v} }

// Duration is the total length of one pass through the segments, saturating at
// the largest time.Duration.
func (p Profile) Duration() time.Duration {
	var total time.Duration
	for _, s := range p.Segments {
		d := s.length()
		if total > math.MaxInt64-d {
			return math.MaxInt64
		}
		total += d
	}
	return total
}

// At returns the profile's value at elapsed time since its start. Negative
// elapsed times give the value at zero.
//
// Within a Ramp from v0 to v1 of length D, at offset u (0 ≤ u ≤ D):
//
//	v(u) = v0 + (v1 − v0)·u/D
//
// Time is kept in integer nanoseconds, so repetition is exact: a repeating
// profile of total length P has the same value at e and at e + n·P.
func (p Profile) At(elapsed time.Duration) float64 {
	if elapsed < 0 {
		elapsed = 0
	}
	if p.Repeat {
		if total := p.Duration(); total > 0 {
			elapsed %= total
		}
	}
	v := p.Start
	for _, s := range p.Segments {
		d := s.length()
		switch s.Kind {
		case Step:
			v = s.Value
			continue
		case Ramp:
			if d == 0 {
				v = s.Value
				continue
			}
			if elapsed < d {
				return v + (s.Value-v)*(float64(elapsed)/float64(d))
			}
			v = s.Value
		default: // Hold, and any unknown kind, keeps the value
			if elapsed < d {
				return v
			}
		}
		elapsed -= d
	}
	return v
}

// Validate reports the first thing wrong with the profile: a non-finite start or
// segment value, an unknown segment kind, a negative duration, a Step with a
// duration, or segments whose total length overflows time.Duration. Limits of
// the quantity itself (kelvin above zero, a fraction within 0..1) are the
// caller's to check, with Bounds.
func (p Profile) Validate() error {
	if math.IsNaN(p.Start) || math.IsInf(p.Start, 0) {
		return fmt.Errorf("start: value %v is not finite", p.Start)
	}
	var total time.Duration
	for i, s := range p.Segments {
		switch s.Kind {
		case Hold, Ramp, Step:
		default:
			return fmt.Errorf("segments[%d]: unknown kind %d", i, uint8(s.Kind))
		}
		if s.Kind != Hold && (math.IsNaN(s.Value) || math.IsInf(s.Value, 0)) {
			return fmt.Errorf("segments[%d]: %s value %v is not finite", i, s.Kind, s.Value)
		}
		if s.Duration < 0 {
			return fmt.Errorf("segments[%d]: %s duration %v is negative", i, s.Kind, s.Duration)
		}
		if s.Kind == Step && s.Duration != 0 {
			return fmt.Errorf("segments[%d]: step takes no duration (got %v); follow it with a hold", i, s.Duration)
		}
		if total > math.MaxInt64-s.Duration {
			return fmt.Errorf("segments[%d]: total duration overflows", i)
		}
		total += s.Duration
	}
	return nil
}

// Bounds returns the smallest and largest values the profile takes. The value
// only moves linearly between its start and its segment values, so these are the
// extremes of Start and the Ramp and Step values.
func (p Profile) Bounds() (lo, hi float64) {
	lo, hi = p.Start, p.Start
	for _, s := range p.Segments {
		if s.Kind != Ramp && s.Kind != Step {
			continue
		}
		lo, hi = math.Min(lo, s.Value), math.Max(hi, s.Value)
	}
	return lo, hi
}
