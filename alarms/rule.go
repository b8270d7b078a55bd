package alarms

import (
	"fmt"
	"math"
	"time"
)

// Rule configures one alarm of one head.
//
// Typical figures for a temperature alarm are a deadband of about 1 % of
// the measuring range and on- and off-delays of about 60 s (alarm
// management practice as ISA-18.2 / IEC 62682 give it; from memory, in the
// project's library notes). They are examples, not defaults: every field
// means what it holds.
type Rule struct {
	// Name identifies the alarm within its head; it is not empty.
	Name string
	// Kind is what the alarm watches.
	Kind Kind
	// Setpoint is the limit: a temperature in K for High, HighHigh, Low
	// and LowLow; a rate in K/s (positive, for RateFall the size of the
	// fall) for RateRise and RateFall; a difference in K for Deviation.
	// Other kinds have no setpoint and need 0.
	Setpoint float64
	// Deadband is how far the value must come back past the setpoint
	// before the condition clears, in the setpoint's unit: a high-type
	// alarm clears at or below Setpoint − Deadband, a low-type one at or
	// above Setpoint + Deadband. 0 for kinds without a setpoint.
	Deadband float64
	// OnDelay is how long the condition must hold before the alarm
	// becomes active; a spike shorter than it raises nothing.
	OnDelay time.Duration
	// OffDelay is how long the condition must stay away before an active
	// alarm clears; a dip shorter than it keeps the alarm active.
	OffDelay time.Duration
	// Priority ranks the alarm; it must be set.
	Priority Priority
	// Latching alarms stay annunciated (Latched) after the condition has
	// gone until the operator resets them with Acknowledge.
	Latching bool
	// Message is the text shown to the operator.
	Message string
	// Realarm, when positive, annunciates an alarm again when it has
	// stood active and acknowledged for this long. 0 turns it off.
	Realarm time.Duration
	// Window is the span over which RateRise and RateFall measure the
	// rate; 0 for other kinds.
	Window time.Duration
	// Periods and Period set NoData: the alarm's condition holds when no
	// sample without FlagCommError has come for Periods × Period (time
	// counted from the first call when none ever came), or when Periods
	// samples in a row carried FlagCommError; any sample without
	// FlagCommError ends it. Period is the head's polling interval. Both 0
	// for other kinds.
	Periods int
	Period  time.Duration
	// SuppressWhen withholds the alarm by design while the plant is in a
	// state where it means nothing. The zero value never suppresses.
	SuppressWhen Suppression
}

// Suppression says when a rule's alarm is suppressed by design.
//
// The alarm is suppressed while the process is idle (Below > 0 and the
// temperature is below Below) or while the sample carries any of Flags.
// Idleness has hysteresis: it begins when a usable temperature (quality
// not Bad) is below Below and ends when one is at or above Below +
// Hysteresis. A sample without a usable temperature keeps the last
// decision, so a sight path blocked while the process is hot does not
// pass for an idle process; a head that reads below range while the
// process is cold is best covered by adding FlagBelowRange to Flags.
// Samples carrying FlagCommError say nothing of the plant and keep the
// whole decision as it was.
type Suppression struct {
	// Below is the temperature (K) under which the process counts as
	// idle; 0 turns it off.
	Below float64
	// Hysteresis (K) is how far above Below the temperature must come
	// for the process to count as running again.
	Hysteresis float64
	// Flags suppress the alarm while the sample carries any of them
	// (FlagCommError is not allowed: it carries no measurement).
	Flags Flags
}

// ruleError reports a problem with a rule, naming the rule and field.
func ruleError(r *Rule, format string, args ...any) error {
	return fmt.Errorf("alarm rule %q (%s): %s: %w", r.Name, r.Kind, fmt.Sprintf(format, args...), ErrInvalidRule)
}

// finite reports whether x is neither NaN nor infinite.
func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// validate checks that r can work, naming the first field that cannot.
func (r *Rule) validate() error {
	if r.Name == "" {
		return fmt.Errorf("alarm rule (%s): name: empty: %w", r.Kind, ErrInvalidRule)
	}
	if !r.Kind.Valid() {
		return ruleError(r, "kind: %d is not a kind", uint8(r.Kind))
	}
	if !r.Priority.Valid() {
		return ruleError(r, "priority: not set (want low, medium, high or urgent)")
	}
	if !finite(r.Setpoint) {
		return ruleError(r, "setpoint: %v is not a number", r.Setpoint)
	}
	if !finite(r.Deadband) || r.Deadband < 0 {
		return ruleError(r, "deadband: %v is not a non-negative number", r.Deadband)
	}
	if r.Kind.value() {
		if r.Setpoint <= 0 {
			return ruleError(r, "setpoint: %g must be positive (%s)", r.Setpoint, r.setpointUnit())
		}
		if r.Kind != Low && r.Kind != LowLow && r.Deadband >= r.Setpoint {
			return ruleError(r, "deadband: %g is not below setpoint %g, so the alarm could never clear", r.Deadband, r.Setpoint)
		}
	} else {
		if r.Setpoint != 0 {
			return ruleError(r, "setpoint: %g given, but this kind has no setpoint", r.Setpoint)
		}
		if r.Deadband != 0 {
			return ruleError(r, "deadband: %g given, but this kind has no setpoint", r.Deadband)
		}
	}
	for _, d := range []struct {
		name string
		v    time.Duration
	}{{"on-delay", r.OnDelay}, {"off-delay", r.OffDelay}, {"re-alarm", r.Realarm}} {
		if d.v < 0 {
			return ruleError(r, "%s: %v is negative", d.name, d.v)
		}
	}
	if r.Kind.rate() {
		if r.Window <= 0 {
			return ruleError(r, "window: %v; a rate needs a positive window", r.Window)
		}
	} else if r.Window != 0 {
		return ruleError(r, "window: %v given, but only rate alarms have one", r.Window)
	}
	if r.Kind == NoData {
		if r.Periods < 1 {
			return ruleError(r, "periods: %d; want at least 1", r.Periods)
		}
		if r.Period <= 0 {
			return ruleError(r, "period: %v; want the polling interval, positive", r.Period)
		}
		if r.Period > time.Duration(math.MaxInt64)/time.Duration(r.Periods) {
			return ruleError(r, "periods × period: %d × %v overflows", r.Periods, r.Period)
		}
	} else if r.Periods != 0 || r.Period != 0 {
		return ruleError(r, "periods, period: given, but only no-data alarms have them")
	}
	sw := r.SuppressWhen
	if !finite(sw.Below) || sw.Below < 0 {
		return ruleError(r, "suppression below: %v is not a non-negative temperature", sw.Below)
	}
	if !finite(sw.Hysteresis) || sw.Hysteresis < 0 {
		return ruleError(r, "suppression hysteresis: %v is not a non-negative number", sw.Hysteresis)
	}
	if sw.Hysteresis != 0 && sw.Below == 0 {
		return ruleError(r, "suppression hysteresis: %g given without a temperature to suppress below", sw.Hysteresis)
	}
	if sw.Flags&^allFlags != 0 {
		return ruleError(r, "suppression flags: unknown bits %#x", uint16(sw.Flags&^allFlags))
	}
	if sw.Flags&FlagCommError != 0 {
		return ruleError(r, "suppression flags: comm_error carries no measurement and cannot suppress")
	}
	return nil
}

// setpointUnit names the unit of r's setpoint.
func (r *Rule) setpointUnit() string {
	if r.Kind.rate() {
		return "K/s"
	}
	return "K"
}
