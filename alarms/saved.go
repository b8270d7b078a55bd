package alarms

import (
	"fmt"
	"math"
	"time"
)

// Saved is what an alarm keeps across a restart: its state and the facts
// behind it, not its timers. It is a plain value that encoding/json
// writes and reads as it is (names for the state, RFC 3339 times).
type Saved struct {
	Name           string    `json:"name"`
	State          State     `json:"state"`
	Active         bool      `json:"active"`
	Unacknowledged bool      `json:"unacknowledged,omitempty"`
	Latched        bool      `json:"latched,omitempty"`
	Suppressed     bool      `json:"suppressed,omitempty"`
	Idle           bool      `json:"idle,omitempty"`
	OutOfService   bool      `json:"out_of_service,omitempty"`
	ShelvedUntil   time.Time `json:"shelved_until,omitzero"`
	ShelvedBy      string    `json:"shelved_by,omitempty"`
	Since          time.Time `json:"since,omitzero"`
	AcknowledgedAt time.Time `json:"acknowledged_at,omitzero"`
	Activations    uint64    `json:"activations"`
}

// Snapshot returns what Restore needs to bring the alarm back after a
// restart.
func (a *Alarm) Snapshot() Saved {
	return Saved{
		Name: a.rule.Name, State: a.state, Active: a.active, Unacknowledged: a.unacked,
		Latched: a.latched, Suppressed: a.suppressed, Idle: a.idle, OutOfService: a.oos,
		ShelvedUntil: a.shelvedUntil, ShelvedBy: a.shelvedBy, Since: a.changed,
		AcknowledgedAt: a.ackedAt, Activations: a.activations,
	}
}

// Restore returns the alarm of rule r in the state s saved, emitting
// nothing: an alarm that was annunciated stays annunciated without being
// announced again, and an active one stays active until samples show its
// condition gone for its off-delay (which then gives a "cleared" event),
// so a restart neither re-annunciates nor silently clears. The delay
// timers, the rate history and the NoData silence start afresh; a shelving
// that expired meanwhile ends at the first Evaluate or Tick, and a
// re-alarm that fell due meanwhile comes then too.
//
// The rule may have changed since s was saved, but not its name. A latched
// state saved under a latching rule that no longer latches becomes
// ReturnedUnacknowledged (it still awaits the operator). An error wraps
// ErrInvalidRule for a rule that cannot work and ErrInvalidSaved for a
// saved state no alarm can be in.
func Restore(r Rule, s Saved) (*Alarm, error) {
	a, err := NewAlarm(r)
	if err != nil {
		return nil, err
	}
	bad := func(format string, args ...any) error {
		return fmt.Errorf("alarm %q: restore: %s: %w", r.Name, fmt.Sprintf(format, args...), ErrInvalidSaved)
	}
	if s.Name != r.Name {
		return nil, bad("saved state belongs to alarm %q", s.Name)
	}
	if !s.State.Valid() {
		return nil, bad("state %d is not a state", uint8(s.State))
	}
	if s.OutOfService && (s.Active || s.Unacknowledged || s.Latched || s.Suppressed || s.Idle || !s.ShelvedUntil.IsZero()) {
		return nil, bad("out of service, yet active, annunciated, suppressed or shelved")
	}
	if s.Latched && (s.Active || s.Unacknowledged) {
		return nil, bad("latched, yet active or unacknowledged")
	}
	if s.ShelvedUntil.IsZero() && s.ShelvedBy != "" {
		return nil, bad("shelved by %q without an expiry", s.ShelvedBy)
	}
	a.active, a.unacked, a.latched = s.Active, s.Unacknowledged, s.Latched
	a.suppressed, a.oos = s.Suppressed, s.OutOfService
	a.idle = s.Idle && r.SuppressWhen.Below > 0
	a.setShelve(s.ShelvedUntil, s.ShelvedBy)
	a.setAcked(s.AcknowledgedAt)
	a.changed, a.activations = s.Since, s.Activations
	if got := a.derive(); got != s.State {
		return nil, bad("state %s does not match its facts, which make %s", s.State, got)
	}
	if s.State == Acknowledged && s.AcknowledgedAt.IsZero() {
		return nil, bad("acknowledged without the time of acknowledgment")
	}
	if a.latched && !r.Latching {
		a.latched, a.unacked = false, true
	}
	a.state = a.derive()
	a.want = a.active
	a.value = math.NaN()
	return a, nil
}
