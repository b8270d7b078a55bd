package alarms

import (
	"fmt"
	"strings"
)

// Priority ranks an alarm for the operator's attention. Four levels, the
// number alarm management practice usually settles on; ISA-18.2 advises a
// mix of roughly 80 % low, 15 % medium and 5 % high (memory, as recorded in
// the project's library notes), with urgent kept for the few alarms whose
// response cannot wait.
type Priority uint8

// The priorities, lowest first. The zero Priority is not a priority: a
// Rule must name one.
const (
	PriorityLow Priority = iota + 1
	PriorityMedium
	PriorityHigh
	PriorityUrgent
)

// priorityNames returns the priorities' names, indexed by Priority.
func priorityNames() [5]string { return [5]string{"", "low", "medium", "high", "urgent"} }

// Valid reports whether p is one of the four priorities.
func (p Priority) Valid() bool { return p >= PriorityLow && p <= PriorityUrgent }

// String returns "low", "medium", "high" or "urgent", or "priority(N)" for
// an invalid value.
func (p Priority) String() string {
	if p.Valid() {
		return priorityNames()[p]
	}
	return fmt.Sprintf("priority(%d)", uint8(p))
}

// MarshalText encodes p by its name; an invalid p is an error.
func (p Priority) MarshalText() ([]byte, error) {
	if !p.Valid() {
		return nil, fmt.Errorf("alarm priority %d: not a priority", uint8(p))
	}
	return []byte(priorityNames()[p]), nil
}

// UnmarshalText decodes a name written by MarshalText.
func (p *Priority) UnmarshalText(b []byte) error {
	v, err := ParsePriority(string(b))
	if err != nil {
		return err
	}
	*p = v
	return nil
}

// ParsePriority returns the priority named s ("low", "medium", "high",
// "urgent"; case does not matter).
func ParsePriority(s string) (Priority, error) {
	for p := PriorityLow; p <= PriorityUrgent; p++ {
		if strings.EqualFold(s, priorityNames()[p]) {
			return p, nil
		}
	}
	return 0, fmt.Errorf("alarm priority %q: want low, medium, high or urgent", s)
}

// Kind is what a Rule watches.
type Kind uint8

// The kinds. The zero Kind is not a kind: a Rule must name one.
const (
	// High: the processed temperature is above Setpoint (K). It clears at
	// or below Setpoint − Deadband.
	High Kind = iota + 1
	// HighHigh: as High, for a second, higher limit.
	HighHigh
	// Low: the processed temperature is below Setpoint (K). It clears at
	// or above Setpoint + Deadband.
	Low
	// LowLow: as Low, for a second, lower limit.
	LowLow
	// RateRise: the temperature rises faster than Setpoint (K/s) over
	// Window. It clears at or below Setpoint − Deadband.
	RateRise
	// RateFall: the temperature falls faster than Setpoint (K/s, a
	// positive number) over Window. It clears when the fall rate is at or
	// below Setpoint − Deadband.
	RateFall
	// Deviation: two heads on the same target disagree: |T − Other| is
	// above Setpoint (K). It clears at or below Setpoint − Deadband.
	Deviation
	// NoData: no sample without FlagCommError has come for Periods ×
	// Period, or Periods samples in a row carried FlagCommError.
	NoData
	// LowSignal: the sample carries FlagLowSignal.
	LowSignal
	// Nongrey: the sample carries FlagNongrey.
	Nongrey
	// OverRange: the sample carries FlagSaturated or FlagAboveRange.
	OverRange
	// BelowRange: the sample carries FlagBelowRange. Configure it only
	// where the process should be hot whenever the head looks (or
	// suppress it while the process is idle), since a cold target always
	// reads below range.
	BelowRange
	// BadQuality: the sample's quality is Bad, so the temperature alarms
	// of the head are blind.
	BadQuality
)

const numKinds = int(BadQuality)

// kindNames returns the kinds' names, indexed by Kind.
func kindNames() [numKinds + 1]string {
	return [numKinds + 1]string{"", "high", "high_high", "low", "low_low", "rate_rise",
		"rate_fall", "deviation", "no_data", "low_signal", "nongrey", "over_range",
		"below_range", "bad_quality"}
}

// Valid reports whether k is one of the kinds.
func (k Kind) Valid() bool { return k >= High && int(k) <= numKinds }

// String returns the kind's name ("high", "high_high", "low", "low_low",
// "rate_rise", "rate_fall", "deviation", "no_data", "low_signal",
// "nongrey", "over_range", "below_range", "bad_quality"), or "kind(N)".
func (k Kind) String() string {
	if k.Valid() {
		return kindNames()[k]
	}
	return fmt.Sprintf("kind(%d)", uint8(k))
}

// MarshalText encodes k by its name; an invalid k is an error.
func (k Kind) MarshalText() ([]byte, error) {
	if !k.Valid() {
		return nil, fmt.Errorf("alarm kind %d: not a kind", uint8(k))
	}
	return []byte(kindNames()[k]), nil
}

// UnmarshalText decodes a name written by MarshalText.
func (k *Kind) UnmarshalText(b []byte) error {
	v, err := ParseKind(string(b))
	if err != nil {
		return err
	}
	*k = v
	return nil
}

// ParseKind returns the kind named s (see Kind.String; case does not
// matter).
func ParseKind(s string) (Kind, error) {
	for k := High; int(k) <= numKinds; k++ {
		if strings.EqualFold(s, kindNames()[k]) {
			return k, nil
		}
	}
	names := kindNames()
	return 0, fmt.Errorf("alarm kind %q: want one of %s", s, strings.Join(names[1:], ", "))
}

// value reports whether k compares a number with a setpoint.
func (k Kind) value() bool { return k >= High && k <= Deviation }

// rate reports whether k is RateRise or RateFall.
func (k Kind) rate() bool { return k == RateRise || k == RateFall }

// State is an alarm's state as ISA-18.2 / IEC 62682 name them (read through
// OPC UA Part 9, B.1.5 and 3.1, in the project's library notes).
type State uint8

// The states.
const (
	// Normal: the condition is absent and nothing awaits the operator.
	Normal State = iota
	// Unacknowledged: the alarm is active and the operator has not
	// acknowledged it.
	Unacknowledged
	// Acknowledged: the alarm is active and acknowledged.
	Acknowledged
	// ReturnedUnacknowledged: the condition has gone but the operator has
	// not acknowledged the alarm.
	ReturnedUnacknowledged
	// Latched: a latching alarm whose condition has gone; it stays
	// annunciated until the operator resets it (Acknowledge).
	Latched
	// Shelved: the operator has set the alarm aside until a time.
	Shelved
	// SuppressedByDesign: the alarm is withheld by its rule while the
	// plant is in a state where it means nothing (see Suppression).
	SuppressedByDesign
	// OutOfService: the alarm is removed from service (maintenance) and
	// not evaluated.
	OutOfService
)

const numStates = int(OutOfService) + 1

// stateNames returns the states' names, indexed by State.
func stateNames() [numStates]string {
	return [numStates]string{"normal", "unacknowledged", "acknowledged",
		"rtn_unacknowledged", "latched", "shelved", "suppressed", "out_of_service"}
}

// Valid reports whether s is one of the states.
func (s State) Valid() bool { return int(s) < numStates }

// String returns "normal", "unacknowledged", "acknowledged",
// "rtn_unacknowledged", "latched", "shelved", "suppressed" or
// "out_of_service", or "state(N)" for an invalid value.
func (s State) String() string {
	if s.Valid() {
		return stateNames()[s]
	}
	return fmt.Sprintf("state(%d)", uint8(s))
}

// MarshalText encodes s by its name; an invalid s is an error.
func (s State) MarshalText() ([]byte, error) {
	if !s.Valid() {
		return nil, fmt.Errorf("alarm state %d: not a state", uint8(s))
	}
	return []byte(stateNames()[s]), nil
}

// UnmarshalText decodes a name written by MarshalText.
func (s *State) UnmarshalText(b []byte) error {
	v, err := ParseState(string(b))
	if err != nil {
		return err
	}
	*s = v
	return nil
}

// ParseState returns the state named str (see State.String).
func ParseState(str string) (State, error) {
	names := stateNames()
	for i, n := range names {
		if str == n {
			return State(i), nil
		}
	}
	return 0, fmt.Errorf("alarm state %q: want one of %s", str, strings.Join(names[:], ", "))
}

// Annunciated reports whether s asks for the operator's attention
// (Unacknowledged, ReturnedUnacknowledged or Latched).
func (s State) Annunciated() bool {
	return s == Unacknowledged || s == ReturnedUnacknowledged || s == Latched
}

// Quality grades a sample, as OPC UA status codes do (Good 0, Uncertain
// 0x40000000, Bad 0x80000000: OPC UA StatusCode.csv, in the project's
// library notes).
type Quality uint8

// The qualities. The zero Quality is Good. Values above Bad are taken as
// Bad.
const (
	Good Quality = iota
	Uncertain
	Bad
)

// String returns "good", "uncertain" or "bad" ("bad" for any value above
// Bad, which is how the alarms treat it).
func (q Quality) String() string {
	switch q {
	case Good:
		return "good"
	case Uncertain:
		return "uncertain"
	}
	return "bad"
}

// ParseQuality returns the quality named s ("good", "uncertain", "bad").
func ParseQuality(s string) (Quality, error) {
	switch s {
	case "good":
		return Good, nil
	case "uncertain":
		return Uncertain, nil
	case "bad":
		return Bad, nil
	}
	return Bad, fmt.Errorf("quality %q: want good, uncertain or bad", s)
}

// Flags are what the measurement says of a sample; several may be set.
type Flags uint16

// The flags, in bit order.
const (
	// FlagLowSignal: a channel signal is too weak for a trustworthy
	// temperature (obstructed sight path, target out of view).
	FlagLowSignal Flags = 1 << iota
	// FlagNongrey: the target is not grey, so the ratio temperature is
	// biased.
	FlagNongrey
	// FlagSaturated: a channel is saturated.
	FlagSaturated
	// FlagAboveRange: the temperature is above the measuring range.
	FlagAboveRange
	// FlagBelowRange: the temperature is below the measuring range.
	FlagBelowRange
	// FlagCommError: the head did not answer; the sample carries no
	// measurement.
	FlagCommError
)

const numFlags = 6

// allFlags is the union of the defined flags.
const allFlags Flags = 1<<numFlags - 1

// flagNames returns the flags' names, in bit order.
func flagNames() [numFlags]string {
	return [numFlags]string{"low_signal", "nongrey", "saturated",
		"above_range", "below_range", "comm_error"}
}

// String returns the set flags' names joined by "|" in bit order, "ok"
// when none is set. Unknown bits are ignored.
func (f Flags) String() string {
	var b strings.Builder
	for i, n := range flagNames() {
		if f&(1<<i) != 0 {
			if b.Len() > 0 {
				b.WriteByte('|')
			}
			b.WriteString(n)
		}
	}
	if b.Len() == 0 {
		return "ok"
	}
	return b.String()
}

// ParseFlag returns the flag named s ("low_signal", "nongrey",
// "saturated", "above_range", "below_range", "comm_error").
func ParseFlag(s string) (Flags, error) {
	names := flagNames()
	for i, n := range names {
		if s == n {
			return 1 << i, nil
		}
	}
	return 0, fmt.Errorf("flag %q: want one of %s", s, strings.Join(names[:], ", "))
}
