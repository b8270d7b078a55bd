package alarms

import (
	"fmt"
	"math"
	"time"
)

// Sample is one processed reading of a head, as its alarms see it.
type Sample struct {
	// Time is when the reading was acquired; every timer runs on it.
	Time time.Time
	// Temperature is the processed temperature in K. NaN, ±Inf, zero and
	// negative values mean there is none.
	Temperature float64
	// Quality grades the reading.
	Quality Quality
	// Flags say what the measurement noticed.
	Flags Flags
	// Other is the temperature (K) of the other head of a Deviation pair;
	// NaN (or any value that is not a positive number) when there is
	// none or when that head's reading is bad.
	Other float64
}

// Event is one transition of an alarm: a change of its state or of its
// condition, or an operator's action.
//
// While an alarm is shelved or suppressed its condition is still followed:
// activations and clearings give events whose From and To are both that
// state, so the journal records them without disturbing the operator.
type Event struct {
	Time  time.Time
	Alarm string // the rule's name
	From  State
	To    State
	// Active is the alarm's condition after the transition.
	Active bool
	// Value is the last usable value compared with the setpoint:
	// temperature (K), rate (K/s, signed: negative when falling) or
	// deviation (K). NaN for kinds without a setpoint and before the first
	// usable sample; a JSON encoder must write it as null.
	Value    float64
	Priority Priority
	Message  string
	// By is the operator behind an action; empty for transitions the
	// alarm made itself.
	By string
	// Reason is one of the Reason constants.
	Reason string
}

// The reasons an Event gives.
const (
	ReasonActivated         = "activated"           // the condition became active (after its on-delay)
	ReasonCleared           = "cleared"             // the condition went away (after its off-delay)
	ReasonAcknowledged      = "acknowledged"        // the operator acknowledged (or reset a latched alarm)
	ReasonRealarm           = "realarm"             // an acknowledged alarm stood active for Realarm and is annunciated again
	ReasonShelved           = "shelved"             // the operator shelved the alarm (or moved its expiry)
	ReasonUnshelved         = "unshelved"           // the operator unshelved it
	ReasonShelveExpired     = "shelve_expired"      // the shelving ran out
	ReasonSuppressed        = "suppressed"          // suppression by design began
	ReasonUnsuppressed      = "unsuppressed"        // suppression by design ended
	ReasonOutOfService      = "out_of_service"      // the alarm was removed from service
	ReasonReturnedToService = "returned_to_service" // the alarm was returned to service
)

// ringSize is the number of (time, temperature) points a rate alarm keeps:
// points closer than Window/(ringSize−2) are thinned out, so one window
// always fits.
const ringSize = 32

// point is one temperature of a rate alarm's history.
type point struct {
	t int64 // see nanos
	v float64
}

// nanos returns t as nanoseconds since 1970 UTC, the alarms' inner clock:
// the wall-clock reading of t (a monotonic reading is not used), clamped
// to what an int64 holds (years 1678 to 2262).
func nanos(t time.Time) int64 {
	const maxSec = math.MaxInt64/int64(time.Second) - 1
	sec := t.Unix()
	switch {
	case sec > maxSec:
		return math.MaxInt64
	case sec < -maxSec:
		return math.MinInt64
	}
	return sec*int64(time.Second) + int64(t.Nanosecond())
}

// since returns a − b, saturated to the range of a Duration.
func since(a, b int64) time.Duration {
	d := a - b
	if (a >= b) != (d >= 0) { // overflowed
		if a >= b {
			return math.MaxInt64
		}
		return math.MinInt64
	}
	return time.Duration(d)
}

// Alarm is one rule's alarm: its state, its condition and the timers that
// turn samples into transitions. Its methods must not be called
// concurrently; the daemon keeps each head's alarms in one goroutine.
type Alarm struct {
	rule Rule

	state        State
	active       bool      // the condition, after deadband and delays
	unacked      bool      // annunciated and not yet acknowledged
	latched      bool      // latching alarm returned to normal, awaiting reset
	suppressed   bool      // suppressed by design
	idle         bool      // the process-idle part of the suppression
	oos          bool      // out of service
	shelvedUntil time.Time // zero unless shelved
	shelvedBy    string
	changed      time.Time // when the state or the condition last changed
	ackedAt      time.Time // when an active alarm was acknowledged (re-alarm)
	activations  uint64
	value        float64

	// The times above as nanos, for the hot path.
	isShelved bool
	shelvedNs int64
	ackedNs   int64

	// Delay timers. want is the condition as last observed on a usable
	// sample; while it differs from active a transition is pending and
	// acc is the time it has held, counted from mark. vouch says whether
	// the last observation was usable: only then does time count.
	want  bool
	vouch bool
	acc   time.Duration
	mark  int64

	// NoData: ref is the time of the last sample without FlagCommError
	// (or of the first call); commErrs counts such samples in a row.
	started  bool
	ref      int64
	commErrs int

	// Rate history, a ring of n points from head.
	ring *[ringSize]point
	head int
	n    int
}

// NewAlarm returns the alarm of rule r, in state Normal. An error wrapping
// ErrInvalidRule names the rule and the first field that cannot work.
func NewAlarm(r Rule) (*Alarm, error) {
	if err := r.validate(); err != nil {
		return nil, err
	}
	a := &Alarm{rule: r, value: math.NaN()}
	if r.Kind.rate() {
		a.ring = new([ringSize]point)
	}
	return a, nil
}

// Name returns the rule's name.
func (a *Alarm) Name() string { return a.rule.Name }

// Rule returns the alarm's rule.
func (a *Alarm) Rule() Rule { return a.rule }

// State returns the alarm's state.
func (a *Alarm) State() State { return a.state }

// Active reports whether the alarm's condition is active (after deadband
// and delays), whatever its state.
func (a *Alarm) Active() bool { return a.active }

// Status is what an alarm shows: its rule's description and its state.
type Status struct {
	Name     string
	Kind     Kind
	Priority Priority
	Message  string
	State    State
	Active   bool
	// Value is the last usable value compared with the setpoint (see
	// Event.Value); NaN when there is none.
	Value float64
	// Since is when the state or the condition last changed; zero before
	// the first change.
	Since        time.Time
	ShelvedUntil time.Time // zero unless shelved
	ShelvedBy    string
	// Activations counts the times the condition became active, shelved
	// and suppressed ones included.
	Activations uint64
}

// Status returns what the alarm shows now.
func (a *Alarm) Status() Status {
	return Status{
		Name: a.rule.Name, Kind: a.rule.Kind, Priority: a.rule.Priority, Message: a.rule.Message,
		State: a.state, Active: a.active, Value: a.value, Since: a.changed,
		ShelvedUntil: a.shelvedUntil, ShelvedBy: a.shelvedBy, Activations: a.activations,
	}
}

// Evaluate applies one sample and appends the transitions it causes to
// dst. It does not allocate when dst has room for them (at most three).
//
// A sample that says nothing of an alarm's condition (see the package
// documentation: bad quality or no temperature for a value alarm, a
// communication error for a flag alarm) neither activates nor clears it,
// and the delay timers do not count the time that follows it.
func (a *Alarm) Evaluate(s Sample, dst []Event) []Event {
	if a.oos {
		return dst
	}
	t, ns := s.Time, nanos(s.Time)
	a.start(ns)
	comm := s.Flags&FlagCommError != 0
	if a.rule.Kind == NoData {
		if comm {
			if a.commErrs < math.MaxInt {
				a.commErrs++
			}
		} else {
			a.commErrs = 0
			a.ref = ns
		}
	}
	supp := a.suppression(&s, comm)
	if supp && !a.suppressed {
		dst = a.setSuppressed(t, true, dst)
	}
	usable, cond, v := a.observe(&s, ns, comm)
	a.track(ns, usable, cond, v)
	if usable {
		dst = a.settle(t, true, dst)
	}
	if !supp && a.suppressed {
		dst = a.setSuppressed(t, false, dst)
	}
	return a.housekeep(t, ns, dst)
}

// Tick applies the passing of time with no sample: shelve expiry,
// re-alarm, the completion of an off-delay whose last sample was usable,
// and for NoData the detection of silence. Call it regularly (every
// second or every polling interval); it does not allocate when dst has
// room.
//
// An on-delay completes only on a sample that still shows the condition,
// so a single spike followed by silence raises nothing; an off-delay may
// complete on Tick, counting from the last usable sample that showed the
// condition gone.
func (a *Alarm) Tick(now time.Time, dst []Event) []Event {
	if a.oos {
		return dst
	}
	ns := nanos(now)
	a.start(ns)
	// For NoData, silence found at the tick is an observation; only a
	// sample shows that data came, so the tick cannot end the condition.
	if a.rule.Kind == NoData && a.stale(ns) {
		a.track(ns, true, true, math.NaN())
		dst = a.settle(now, true, dst)
	} else {
		a.advance(ns)
		if a.vouch && a.active && !a.want {
			dst = a.settle(now, false, dst)
		}
	}
	return a.housekeep(now, ns, dst)
}

// start sets the NoData reference at the first call.
func (a *Alarm) start(t int64) {
	if !a.started {
		a.started = true
		a.ref = t
	}
}

// stale reports whether a NoData alarm's data is missing at t.
func (a *Alarm) stale(t int64) bool {
	limit := time.Duration(a.rule.Periods) * a.rule.Period
	return a.commErrs >= a.rule.Periods || since(t, a.ref) >= limit
}

// usableTemp reports whether x is a temperature: finite and positive.
func usableTemp(x float64) bool { return x > 0 && !math.IsInf(x, 1) }

// observe reads the alarm's condition from s: whether s says anything of
// it, the condition (with the deadband taken from the alarm's current
// activity) and the value compared.
func (a *Alarm) observe(s *Sample, ns int64, comm bool) (usable, cond bool, v float64) {
	r := &a.rule
	valueOK := !comm && s.Quality < Bad && usableTemp(s.Temperature)
	switch r.Kind {
	case High, HighHigh:
		if !valueOK {
			return false, false, 0
		}
		return true, a.above(s.Temperature), s.Temperature
	case Low, LowLow:
		if !valueOK {
			return false, false, 0
		}
		return true, a.below(s.Temperature), s.Temperature
	case RateRise, RateFall:
		if !valueOK {
			return false, false, 0
		}
		rate, ok := a.rate(ns, s.Temperature)
		if !ok {
			return false, false, 0
		}
		if r.Kind == RateFall {
			return true, a.above(-rate), rate
		}
		return true, a.above(rate), rate
	case Deviation:
		if !valueOK || !usableTemp(s.Other) {
			return false, false, 0
		}
		d := math.Abs(s.Temperature - s.Other)
		return true, a.above(d), d
	case NoData:
		// A sample without FlagCommError is data; a failed poll shows
		// silence once it has lasted, and says nothing before.
		if !comm {
			return true, false, math.NaN()
		}
		if a.stale(ns) {
			return true, true, math.NaN()
		}
		return false, false, math.NaN()
	case LowSignal:
		return !comm, s.Flags&FlagLowSignal != 0, math.NaN()
	case Nongrey:
		return !comm, s.Flags&FlagNongrey != 0, math.NaN()
	case OverRange:
		return !comm, s.Flags&(FlagSaturated|FlagAboveRange) != 0, math.NaN()
	case BelowRange:
		return !comm, s.Flags&FlagBelowRange != 0, math.NaN()
	default: // BadQuality
		return true, s.Quality >= Bad, math.NaN()
	}
}

// above is the condition of a high-type alarm for value v: above the
// setpoint to activate, above setpoint − deadband to stay active.
func (a *Alarm) above(v float64) bool {
	if a.active {
		return v > a.rule.Setpoint-a.rule.Deadband
	}
	return v > a.rule.Setpoint
}

// below is the condition of a low-type alarm for value v.
func (a *Alarm) below(v float64) bool {
	if a.active {
		return v < a.rule.Setpoint+a.rule.Deadband
	}
	return v < a.rule.Setpoint
}

// rate returns the temperature's rate of change (K/s) over the rule's
// window ending at (t, v), and records the point:
//
//	rate = (v − v₀) / (t − t₀)
//
// where (t₀, v₀) is the oldest recorded point no more than Window before
// t. It reports false until the history spans at least half the window.
// A clock that steps back empties the history.
func (a *Alarm) rate(t int64, v float64) (float64, bool) {
	const mask = ringSize - 1
	w := a.rule.Window
	r := a.ring
	if a.n > 0 && t < r[(a.head+a.n-1)&mask].t {
		a.n = 0
	}
	for a.n > 0 && since(t, r[a.head].t) > w {
		a.head = (a.head + 1) & mask
		a.n--
	}
	rate, ok := 0.0, false
	if a.n > 0 {
		p := r[a.head]
		if span := since(t, p.t); span > 0 && span >= w/2 {
			rate, ok = (v-p.v)/(float64(span)/float64(time.Second)), true
		}
	}
	if a.n == 0 || since(t, r[(a.head+a.n-1)&mask].t) >= w/(ringSize-2) {
		if a.n == ringSize {
			a.head = (a.head + 1) & mask
			a.n--
		}
		r[(a.head+a.n)&mask] = point{t, v}
		a.n++
	}
	return rate, ok
}

// advance counts the time from the last mark to t toward a pending
// transition when the last observation vouches for it. A clock that steps
// back only moves the mark.
func (a *Alarm) advance(t int64) {
	if t < a.mark {
		a.mark = t
		return
	}
	if a.vouch && a.want != a.active {
		d := since(t, a.mark)
		if a.acc > math.MaxInt64-d {
			a.acc = math.MaxInt64
		} else {
			a.acc += d
		}
	}
	a.mark = t
}

// track records one observation at t.
func (a *Alarm) track(t int64, usable, cond bool, v float64) {
	a.advance(t)
	if !usable {
		a.vouch = false
		return
	}
	a.vouch = true
	a.value = v
	if cond != a.want {
		a.want = cond
		a.acc = 0
	}
}

// settle makes the pending transition whose delay has run out. An
// activation completes only when onOK (an observation confirms it).
func (a *Alarm) settle(t time.Time, onOK bool, dst []Event) []Event {
	if a.want == a.active {
		return dst
	}
	if a.want {
		if onOK && a.acc >= a.rule.OnDelay {
			return a.activate(t, dst)
		}
		return dst
	}
	if a.acc >= a.rule.OffDelay {
		return a.clear(t, dst)
	}
	return dst
}

// shelved reports whether the alarm is shelved.
func (a *Alarm) shelved() bool { return a.isShelved }

// annunciating reports whether a change of the condition reaches the
// operator (not out of service, shelved or suppressed).
func (a *Alarm) annunciating() bool { return !a.oos && !a.shelved() && !a.suppressed }

// derive returns the state the alarm's flags make.
func (a *Alarm) derive() State {
	switch {
	case a.oos:
		return OutOfService
	case a.shelved():
		return Shelved
	case a.suppressed:
		return SuppressedByDesign
	case a.active && a.unacked:
		return Unacknowledged
	case a.active:
		return Acknowledged
	case a.latched:
		return Latched
	case a.unacked:
		return ReturnedUnacknowledged
	}
	return Normal
}

// emit moves the alarm to the state its flags make and appends the event,
// when the state or the condition changed or always is set.
func (a *Alarm) emit(t time.Time, from State, wasActive bool, reason, by string, always bool, dst []Event) []Event {
	a.state = a.derive()
	changed := a.state != from || a.active != wasActive
	if changed {
		a.changed = t
	}
	if !changed && !always {
		return dst
	}
	return append(dst, Event{
		Time: t, Alarm: a.rule.Name, From: from, To: a.state, Active: a.active,
		Value: a.value, Priority: a.rule.Priority, Message: a.rule.Message,
		By: by, Reason: reason,
	})
}

// activate makes the condition active.
func (a *Alarm) activate(t time.Time, dst []Event) []Event {
	from := a.state
	a.active, a.acc = true, 0
	a.activations++
	if a.annunciating() {
		a.unacked, a.latched = true, false
	}
	return a.emit(t, from, false, ReasonActivated, "", true, dst)
}

// clear makes the condition inactive; a latching alarm that reaches the
// operator latches.
func (a *Alarm) clear(t time.Time, dst []Event) []Event {
	from := a.state
	a.active, a.acc = false, 0
	if a.annunciating() && a.rule.Latching {
		a.latched, a.unacked = true, false
	}
	return a.emit(t, from, true, ReasonCleared, "", true, dst)
}

// setSuppressed starts or ends suppression by design. Starting withdraws
// the alarm from the operator; ending annunciates it if it is active.
func (a *Alarm) setSuppressed(t time.Time, on bool, dst []Event) []Event {
	from := a.state
	a.suppressed = on
	if on {
		a.unacked, a.latched = false, false
		return a.emit(t, from, a.active, ReasonSuppressed, "", false, dst)
	}
	if a.annunciating() && a.active {
		a.unacked = true
	}
	return a.emit(t, from, a.active, ReasonUnsuppressed, "", false, dst)
}

// unshelve ends shelving; an active alarm is annunciated again.
func (a *Alarm) unshelve(t time.Time, reason, by string, dst []Event) []Event {
	from := a.state
	a.setShelve(time.Time{}, "")
	if a.annunciating() && a.active {
		a.unacked = true
	}
	return a.emit(t, from, a.active, reason, by, true, dst)
}

// housekeep makes the time-driven transitions due at t: shelve expiry
// and re-alarm.
func (a *Alarm) housekeep(t time.Time, ns int64, dst []Event) []Event {
	if a.isShelved && ns >= a.shelvedNs {
		dst = a.unshelve(t, ReasonShelveExpired, "", dst)
	}
	if a.rule.Realarm > 0 && a.state == Acknowledged && since(ns, a.ackedNs) >= a.rule.Realarm {
		from := a.state
		a.unacked = true
		dst = a.emit(t, from, a.active, ReasonRealarm, "", true, dst)
	}
	return dst
}

// opError reports a refused operator action.
func (a *Alarm) opError(op string, err error) error {
	return fmt.Errorf("alarm %q: %s in state %s: %w", a.rule.Name, op, a.state, err)
}

// Acknowledge records that operator by has seen the alarm: Unacknowledged
// becomes Acknowledged, ReturnedUnacknowledged becomes Normal, and a
// Latched alarm is reset to Normal. Time-driven transitions due at now
// come first (as Tick). In any other state it returns an error wrapping
// ErrNothingToAcknowledge, with dst holding those time-driven transitions.
func (a *Alarm) Acknowledge(now time.Time, by string, dst []Event) ([]Event, error) {
	dst = a.Tick(now, dst)
	if !a.state.Annunciated() {
		return dst, a.opError("acknowledge", ErrNothingToAcknowledge)
	}
	from := a.state
	a.unacked, a.latched = false, false
	if a.active {
		a.setAcked(now)
	}
	return a.emit(now, from, a.active, ReasonAcknowledged, by, true, dst), nil
}

// Shelve sets the alarm aside until until, on operator by's request: it is
// no longer annunciated (an unacknowledged or latched alarm is withdrawn),
// its condition is still followed, and at until (or on Unshelve) it is
// annunciated again if active. Shelving a shelved alarm moves the expiry.
// Time-driven transitions due at now come first (as Tick). It returns an
// error wrapping ErrShelveExpiry when until is not after now and
// ErrOutOfService when the alarm is out of service.
//
// ISA-18.2 wants shelving limited in time; the longest allowed shelving
// is the caller's to enforce.
func (a *Alarm) Shelve(now, until time.Time, by string, dst []Event) ([]Event, error) {
	if a.oos {
		return dst, a.opError("shelve", ErrOutOfService)
	}
	dst = a.Tick(now, dst)
	if !until.After(now) {
		return dst, a.opError("shelve", fmt.Errorf("until %s, now %s: %w",
			until.Format(time.RFC3339Nano), now.Format(time.RFC3339Nano), ErrShelveExpiry))
	}
	from := a.state
	a.setShelve(until, by)
	a.unacked, a.latched = false, false
	return a.emit(now, from, a.active, ReasonShelved, by, true, dst), nil
}

// Unshelve ends shelving on operator by's request; an active alarm is
// annunciated again (Unacknowledged). Time-driven transitions due at now
// come first (as Tick). It returns an error wrapping ErrNotShelved when
// the alarm is not shelved (its shelving may just have expired).
func (a *Alarm) Unshelve(now time.Time, by string, dst []Event) ([]Event, error) {
	dst = a.Tick(now, dst)
	if !a.shelved() {
		return dst, a.opError("unshelve", ErrNotShelved)
	}
	return a.unshelve(now, ReasonUnshelved, by, dst), nil
}

// SetOutOfService removes the alarm from service (on) or returns it (off)
// on operator by's request. Out of service, the alarm is not evaluated
// and its condition, acknowledgment, latch, shelving and timers are
// dropped; back in service it starts from Normal, so a condition that
// still holds activates again after its on-delay (and NoData counts its
// silence from now). It returns an error wrapping ErrOutOfService or
// ErrInService when the alarm is already where it is asked to go.
func (a *Alarm) SetOutOfService(now time.Time, on bool, by string, dst []Event) ([]Event, error) {
	if !on {
		if !a.oos {
			return dst, a.opError("return to service", ErrInService)
		}
		from := a.state
		a.oos = false
		a.started, a.ref, a.mark = true, nanos(now), nanos(now)
		return a.emit(now, from, false, ReasonReturnedToService, by, true, dst), nil
	}
	if a.oos {
		return dst, a.opError("remove from service", ErrOutOfService)
	}
	dst = a.Tick(now, dst)
	from, wasActive := a.state, a.active
	a.oos = true
	a.active, a.want, a.vouch, a.acc = false, false, false, 0
	a.unacked, a.latched, a.suppressed, a.idle = false, false, false, false
	a.setShelve(time.Time{}, "")
	a.commErrs, a.n, a.head = 0, 0, 0
	a.value = math.NaN()
	return a.emit(now, from, wasActive, ReasonOutOfService, by, true, dst), nil
}

// suppression decides whether the rule suppresses the alarm at sample s.
func (a *Alarm) suppression(s *Sample, comm bool) bool {
	sw := &a.rule.SuppressWhen
	if sw.Below == 0 && sw.Flags == 0 {
		return false
	}
	if comm {
		return a.suppressed
	}
	if sw.Below > 0 && s.Quality < Bad && usableTemp(s.Temperature) {
		if s.Temperature < sw.Below {
			a.idle = true
		} else if s.Temperature >= sw.Below+sw.Hysteresis {
			a.idle = false
		}
	}
	return a.idle || s.Flags&sw.Flags != 0
}

// setShelve sets the shelving expiry (zero: not shelved) and who shelved.
func (a *Alarm) setShelve(until time.Time, by string) {
	a.shelvedUntil, a.shelvedBy = until, by
	a.isShelved, a.shelvedNs = !until.IsZero(), nanos(until)
}

// setAcked records when an active alarm was acknowledged.
func (a *Alarm) setAcked(t time.Time) { a.ackedAt, a.ackedNs = t, nanos(t) }
