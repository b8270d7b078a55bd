package alarms

import (
	"errors"
	"fmt"
	"math"
	"strings"
	"testing"
	"time"
)

// t0 is the start of every timeline (any instant would do).
func t0() time.Time { return time.Date(2025, 3, 1, 6, 0, 0, 0, time.UTC) }

// at returns the instant sec seconds after t0.
func at(sec float64) time.Time { return t0().Add(time.Duration(sec * float64(time.Second))) }

// The operations of a timeline step.
const (
	opSample   = ""
	opTick     = "tick"
	opAck      = "ack"
	opShelve   = "shelve"
	opUnshelve = "unshelve"
	opOOS      = "oos"
	opInSvc    = "in_service"
)

// step is one moment of a timeline: an operation at a time, and the state
// and events it must give.
type step struct {
	at    float64 // seconds after t0
	op    string
	T     float64 // sample temperature (K); 0 = none
	q     Quality
	f     Flags
	other float64 // other head's temperature (K); 0 = none
	until float64 // shelve expiry, seconds after t0
	state State   // state after the step
	ev    string  // events, "reason from>to" joined by "; "
	err   error   // wanted error, compared with errors.Is
}

// apply runs one step on a and returns the events and error.
func apply(a *Alarm, s step) ([]Event, error) {
	now := at(s.at)
	switch s.op {
	case opSample:
		return a.Evaluate(Sample{Time: now, Temperature: s.T, Quality: s.q, Flags: s.f, Other: s.other}, nil), nil
	case opTick:
		return a.Tick(now, nil), nil
	case opAck:
		return a.Acknowledge(now, "op1", nil)
	case opShelve:
		return a.Shelve(now, at(s.until), "op1", nil)
	case opUnshelve:
		return a.Unshelve(now, "op1", nil)
	case opOOS:
		return a.SetOutOfService(now, true, "tech", nil)
	case opInSvc:
		return a.SetOutOfService(now, false, "tech", nil)
	}
	panic("unknown op " + s.op)
}

// format writes events as "reason from>to" joined by "; ".
func format(evs []Event) string {
	parts := make([]string, len(evs))
	for i, e := range evs {
		parts[i] = fmt.Sprintf("%s %s>%s", e.Reason, e.From, e.To)
	}
	return strings.Join(parts, "; ")
}

// checkInvariants fails when a's fields contradict each other.
func checkInvariants(t testing.TB, a *Alarm, evs []Event) {
	t.Helper()
	if !a.state.Valid() || a.state != a.derive() {
		t.Fatalf("alarm %q: state %v, facts make %v", a.rule.Name, a.state, a.derive())
	}
	if a.latched && (a.active || a.unacked) {
		t.Fatalf("alarm %q: latched yet active=%v unacked=%v", a.rule.Name, a.active, a.unacked)
	}
	if a.oos && (a.active || a.unacked || a.latched || a.shelved() || a.suppressed) {
		t.Fatalf("alarm %q: out of service with other facts set", a.rule.Name)
	}
	if (a.unacked || a.latched) && !a.annunciating() {
		t.Fatalf("alarm %q: awaits acknowledgment while withheld (%v)", a.rule.Name, a.state)
	}
	for i, e := range evs {
		if !e.From.Valid() || !e.To.Valid() || e.Alarm != a.rule.Name || e.Priority != a.rule.Priority || e.Reason == "" {
			t.Fatalf("alarm %q: event %d malformed: %+v", a.rule.Name, i, e)
		}
		if i > 0 && e.From != evs[i-1].To {
			t.Fatalf("alarm %q: event %d from %v, previous to %v", a.rule.Name, i, e.From, evs[i-1].To)
		}
	}
	if n := len(evs); n > 0 && (evs[n-1].To != a.state || evs[n-1].Active != a.active) {
		t.Fatalf("alarm %q: last event to %v active %v; alarm %v active %v", a.rule.Name, evs[n-1].To, evs[n-1].Active, a.state, a.active)
	}
}

// runTimeline applies steps to a new alarm of r, checking each.
func runTimeline(t *testing.T, r Rule, steps []step) *Alarm {
	t.Helper()
	a, err := NewAlarm(r)
	if err != nil {
		t.Fatalf("NewAlarm: %v", err)
	}
	for i, s := range steps {
		before := a.state
		evs, err := apply(a, s)
		if s.err != nil {
			if !errors.Is(err, s.err) {
				t.Fatalf("step %d (t=%gs %q): error %v, want %v", i, s.at, s.op, err, s.err)
			}
		} else if err != nil {
			t.Fatalf("step %d (t=%gs %q): %v", i, s.at, s.op, err)
		}
		if got := format(evs); got != s.ev {
			t.Fatalf("step %d (t=%gs %q T=%g q=%v f=%v): events %q, want %q", i, s.at, s.op, s.T, s.q, s.f, got, s.ev)
		}
		if a.State() != s.state {
			t.Fatalf("step %d (t=%gs %q): state %v (was %v), want %v", i, s.at, s.op, a.State(), before, s.state)
		}
		checkInvariants(t, a, evs)
	}
	return a
}

// highRule is a high-temperature alarm at 1500 K with a 15 K deadband
// (1 % of a 1500 K span, the typical figure: memory, library notes).
func highRule() Rule {
	return Rule{Name: "mould_high", Kind: High, Setpoint: 1500, Deadband: 15, Priority: PriorityHigh, Message: "strand too hot"}
}

func TestStateTransitions(t *testing.T) {
	latching := highRule()
	latching.Latching = true
	delayed := highRule()
	delayed.OnDelay = 5 * time.Second
	realarm := highRule()
	realarm.Realarm = 300 * time.Second
	lowSignal := Rule{Name: "weak", Kind: LowSignal, Priority: PriorityLow,
		SuppressWhen: Suppression{Below: 1000, Hysteresis: 50}}
	blind := Rule{Name: "blind", Kind: BadQuality, Priority: PriorityMedium,
		SuppressWhen: Suppression{Flags: FlagBelowRange}}

	const (
		N  = Normal
		U  = Unacknowledged
		A  = Acknowledged
		R  = ReturnedUnacknowledged
		L  = Latched
		S  = Shelved
		SD = SuppressedByDesign
		O  = OutOfService
	)
	// The paths are ISA-18.2's state transitions as OPC UA Part 9 reads
	// them (3.1 definitions, B.1.5): acknowledge while active, return to
	// normal unacknowledged, latching, shelving, suppression by design,
	// out of service, re-alarm.
	cases := []struct {
		name  string
		rule  Rule
		steps []step
	}{
		{"acknowledged then cleared", highRule(), []step{
			{at: 0, T: 1400, state: N},
			{at: 1, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 2, op: opAck, state: A, ev: "acknowledged unacknowledged>acknowledged"},
			{at: 3, T: 1490, state: A},
			{at: 4, T: 1480, state: N, ev: "cleared acknowledged>normal"},
			{at: 5, op: opAck, state: N, err: ErrNothingToAcknowledge},
		}},
		{"returned unacknowledged", highRule(), []step{
			{at: 0, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 1, T: 1480, state: R, ev: "cleared unacknowledged>rtn_unacknowledged"},
			{at: 2, T: 1510, state: U, ev: "activated rtn_unacknowledged>unacknowledged"},
			{at: 3, T: 1480, state: R, ev: "cleared unacknowledged>rtn_unacknowledged"},
			{at: 4, op: opAck, state: N, ev: "acknowledged rtn_unacknowledged>normal"},
			{at: 5, op: opAck, state: N, err: ErrNothingToAcknowledge},
		}},
		{"acknowledge twice", highRule(), []step{
			{at: 0, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 1, op: opAck, state: A, ev: "acknowledged unacknowledged>acknowledged"},
			{at: 2, op: opAck, state: A, err: ErrNothingToAcknowledge},
		}},
		// OPC UA Part 9 3.1.13 (from ISA-18.2): a latching alarm "remains in
		// alarm state after the process condition has returned to normal
		// and requires an Operator reset".
		{"latched", latching, []step{
			{at: 0, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 1, T: 1480, state: L, ev: "cleared unacknowledged>latched"},
			{at: 2, T: 1400, state: L},
			{at: 3, op: opTick, state: L},
			{at: 4, op: opAck, state: N, ev: "acknowledged latched>normal"},
			{at: 5, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 6, op: opAck, state: A, ev: "acknowledged unacknowledged>acknowledged"},
			{at: 7, T: 1480, state: L, ev: "cleared acknowledged>latched"},
			{at: 8, T: 1510, state: U, ev: "activated latched>unacknowledged"},
			{at: 9, T: 1480, state: L, ev: "cleared unacknowledged>latched"},
			{at: 10, op: opAck, state: N, ev: "acknowledged latched>normal"},
		}},
		{"shelve, unshelve, expiry", highRule(), []step{
			{at: 0, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 1, op: opShelve, until: 100, state: S, ev: "shelved unacknowledged>shelved"},
			{at: 2, T: 1480, state: S, ev: "cleared shelved>shelved"},
			{at: 3, T: 1510, state: S, ev: "activated shelved>shelved"},
			{at: 4, op: opAck, state: S, err: ErrNothingToAcknowledge},
			{at: 5, op: opUnshelve, state: U, ev: "unshelved shelved>unacknowledged"},
			{at: 6, op: opAck, state: A, ev: "acknowledged unacknowledged>acknowledged"},
			{at: 7, op: opShelve, until: 60, state: S, ev: "shelved acknowledged>shelved"},
			{at: 8, op: opShelve, until: 30, state: S, ev: "shelved shelved>shelved"},
			{at: 9, T: 1480, state: S, ev: "cleared shelved>shelved"},
			{at: 29.999, op: opTick, state: S},
			{at: 30, op: opTick, state: N, ev: "shelve_expired shelved>normal"},
			{at: 31, op: opUnshelve, state: N, err: ErrNotShelved},
			{at: 32, op: opShelve, until: 32, state: N, err: ErrShelveExpiry},
			{at: 33, op: opShelve, until: 20, state: N, err: ErrShelveExpiry},
		}},
		{"shelve expires on a sample, still active", highRule(), []step{
			{at: 0, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 1, op: opShelve, until: 10, state: S, ev: "shelved unacknowledged>shelved"},
			{at: 10, T: 1510, state: U, ev: "shelve_expired shelved>unacknowledged"},
		}},
		{"shelve ends when the condition clears on the same sample", highRule(), []step{
			{at: 0, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 1, op: opShelve, until: 10, state: S, ev: "shelved unacknowledged>shelved"},
			{at: 10, T: 1400, state: N, ev: "cleared shelved>shelved; shelve_expired shelved>normal"},
		}},
		{"shelving withdraws a latch", latching, []step{
			{at: 0, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 1, T: 1480, state: L, ev: "cleared unacknowledged>latched"},
			{at: 2, op: opShelve, until: 10, state: S, ev: "shelved latched>shelved"},
			{at: 3, op: opUnshelve, state: N, ev: "unshelved shelved>normal"},
		}},
		{"suppressed while the process is idle", lowSignal, []step{
			{at: 0, T: 1200, state: N},
			{at: 1, T: 1200, f: FlagLowSignal, state: U, ev: "activated normal>unacknowledged"},
			{at: 2, T: 990, f: FlagLowSignal, state: SD, ev: "suppressed unacknowledged>suppressed"},
			{at: 3, q: Bad, f: FlagLowSignal, state: SD},
			{at: 4, T: 990, state: SD, ev: "cleared suppressed>suppressed"},
			{at: 5, T: 1020, f: FlagLowSignal, state: SD, ev: "activated suppressed>suppressed"},
			{at: 6, T: 1060, f: FlagLowSignal, state: U, ev: "unsuppressed suppressed>unacknowledged"},
			{at: 7, q: Bad, f: FlagCommError, state: U},
			{at: 8, op: opAck, state: A, ev: "acknowledged unacknowledged>acknowledged"},
			{at: 9, T: 900, state: SD, ev: "suppressed acknowledged>suppressed; cleared suppressed>suppressed"},
			{at: 10, op: opAck, state: SD, err: ErrNothingToAcknowledge},
			{at: 11, T: 1100, state: N, ev: "unsuppressed suppressed>normal"},
		}},
		// Suppression starts before the condition is judged and ends after
		// it, so the sample that starts (ends) it annunciates nothing.
		{"suppressed by a flag", blind, []step{
			{at: 0, q: Bad, f: FlagBelowRange, state: SD, ev: "suppressed normal>suppressed; activated suppressed>suppressed"},
			{at: 1, T: 1200, state: N, ev: "cleared suppressed>suppressed; unsuppressed suppressed>normal"},
			{at: 2, q: Bad, state: U, ev: "activated normal>unacknowledged"},
			{at: 3, q: Bad, f: FlagBelowRange, state: SD, ev: "suppressed unacknowledged>suppressed"},
			{at: 4, q: Bad, state: U, ev: "unsuppressed suppressed>unacknowledged"},
			{at: 5, op: opShelve, until: 100, state: S, ev: "shelved unacknowledged>shelved"},
			{at: 6, q: Bad, f: FlagBelowRange, state: S}, // suppressed under the shelving: no change shown
			{at: 7, q: Bad, state: S},
			{at: 8, op: opUnshelve, state: U, ev: "unshelved shelved>unacknowledged"},
		}},
		{"out of service", delayed, []step{
			{at: 0, T: 1510, state: N},
			{at: 5, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 6, op: opOOS, state: O, ev: "out_of_service unacknowledged>out_of_service"},
			{at: 7, T: 1510, state: O},
			{at: 8, T: 1400, state: O},
			{at: 9, op: opTick, state: O},
			{at: 10, op: opAck, state: O, err: ErrNothingToAcknowledge},
			{at: 11, op: opShelve, until: 100, state: O, err: ErrOutOfService},
			{at: 11, op: opUnshelve, state: O, err: ErrNotShelved},
			{at: 12, op: opOOS, state: O, err: ErrOutOfService},
			{at: 13, op: opInSvc, state: N, ev: "returned_to_service out_of_service>normal"},
			{at: 13.5, op: opInSvc, state: N, err: ErrInService},
			{at: 14, T: 1510, state: N},
			{at: 18.9, T: 1510, state: N},
			{at: 19, T: 1510, state: U, ev: "activated normal>unacknowledged"},
		}},
		{"shelved alarm out of service", highRule(), []step{
			{at: 0, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 1, op: opShelve, until: 100, state: S, ev: "shelved unacknowledged>shelved"},
			{at: 2, op: opOOS, state: O, ev: "out_of_service shelved>out_of_service"},
			{at: 200, op: opTick, state: O},
			{at: 201, op: opInSvc, state: N, ev: "returned_to_service out_of_service>normal"},
		}},
		// OPC UA Part 9 B.1.5: after ReAlarmTime the alarm "goes back to an
		// Unacknowledged state, as if it had just occurred". Counted here
		// from the acknowledgment.
		{"re-alarm", realarm, []step{
			{at: 0, T: 1510, state: U, ev: "activated normal>unacknowledged"},
			{at: 10, op: opAck, state: A, ev: "acknowledged unacknowledged>acknowledged"},
			{at: 309.9, op: opTick, state: A},
			{at: 310, op: opTick, state: U, ev: "realarm acknowledged>unacknowledged"},
			{at: 320, op: opAck, state: A, ev: "acknowledged unacknowledged>acknowledged"},
			{at: 619, T: 1510, state: A},
			{at: 620, T: 1510, state: U, ev: "realarm acknowledged>unacknowledged"},
			{at: 621, T: 1480, state: R, ev: "cleared unacknowledged>rtn_unacknowledged"},
			{at: 2000, op: opTick, state: R},
		}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) { runTimeline(t, c.rule, c.steps) })
	}
}

// countReason returns how many events give reason.
func countReason(evs []Event, reason string) int {
	n := 0
	for _, e := range evs {
		if e.Reason == reason {
			n++
		}
	}
	return n
}

// OPC UA Part 9 B.1.5: with a deadband, "the process value is jumping up
// and down around the limit, but the alarm just remains in the same active
// or acknowledged state".
func TestDeadbandActivatesOnce(t *testing.T) {
	a, err := NewAlarm(highRule())
	if err != nil {
		t.Fatal(err)
	}
	var evs []Event
	for i := range 200 {
		// Oscillates 1486..1514 around the 1500 K limit, inside the 15 K
		// deadband below it.
		T := 1500 + 14*math.Sin(float64(i)*0.7)
		evs = a.Evaluate(Sample{Time: at(float64(i)), Temperature: T}, evs)
	}
	if n := countReason(evs, ReasonActivated); n != 1 || len(evs) != 1 {
		t.Fatalf("events %q; want one activation", format(evs))
	}
	evs = a.Evaluate(Sample{Time: at(200), Temperature: 1485}, evs[:0])
	if format(evs) != "cleared unacknowledged>rtn_unacknowledged" {
		t.Fatalf("at setpoint − deadband: events %q, want cleared", format(evs))
	}
	// Coming back up to the setpoint (not above) does not activate.
	evs = a.Evaluate(Sample{Time: at(201), Temperature: 1500}, evs[:0])
	if len(evs) != 0 {
		t.Fatalf("at the setpoint: events %q, want none", format(evs))
	}

	low := Rule{Name: "cold", Kind: Low, Setpoint: 1000, Deadband: 10, Priority: PriorityLow}
	runTimeline(t, low, []step{
		{at: 0, T: 999, state: Unacknowledged, ev: "activated normal>unacknowledged"},
		{at: 1, T: 1009, state: Unacknowledged},
		{at: 2, T: 995, state: Unacknowledged},
		{at: 3, T: 1010, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
		{at: 4, T: 1000, state: ReturnedUnacknowledged},
	})
}

// OPC UA Part 9 B.1.5: with an OnDelay "the momentary spike will not
// generate an alarm, since the value has to be above the alarm threshold
// for the duration of OnDelay"; the OffDelay "will keep a Value in alarm
// even if it drops below a limit, but only very briefly". 60 s is the
// typical delay (memory, library notes).
func TestDelays(t *testing.T) {
	on := highRule()
	on.OnDelay = 60 * time.Second
	runTimeline(t, on, []step{
		{at: 0, T: 1600, state: Normal},
		{at: 30, T: 1600, state: Normal},
		{at: 31, T: 1400, state: Normal},
		{at: 40, T: 1600, state: Normal},
		{at: 70, T: 1495, state: Normal}, // inside the deadband: below the limit, restarts
		{at: 80, T: 1600, state: Normal},
		{at: 139.9, T: 1600, state: Normal},
		{at: 140, T: 1600, state: Unacknowledged, ev: "activated normal>unacknowledged"},
		{at: 141, T: 1400, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
		// A spike seen once, then only ticks: no confirmation, no alarm.
		{at: 200, T: 1600, state: ReturnedUnacknowledged},
		{at: 300, op: opTick, state: ReturnedUnacknowledged},
		{at: 301, T: 1400, state: ReturnedUnacknowledged},
	})

	off := highRule()
	off.OffDelay = 30 * time.Second
	runTimeline(t, off, []step{
		{at: 0, T: 1600, state: Unacknowledged, ev: "activated normal>unacknowledged"},
		{at: 10, T: 1480, state: Unacknowledged},
		{at: 20, T: 1600, state: Unacknowledged},
		{at: 21, T: 1480, state: Unacknowledged},
		{at: 40, T: 1490, state: Unacknowledged}, // inside the deadband: still active, restarts
		{at: 41, T: 1480, state: Unacknowledged},
		{at: 70.9, T: 1480, state: Unacknowledged},
		{at: 71, T: 1480, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
		{at: 80, T: 1600, state: Unacknowledged, ev: "activated rtn_unacknowledged>unacknowledged"},
		{at: 90, T: 1480, state: Unacknowledged},
		{at: 119, op: opTick, state: Unacknowledged},
		{at: 120, op: opTick, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
	})
}

// A value alarm neither activates nor clears on a sample that says nothing
// of its condition, and its timers pause over such samples.
func TestQualityInterplay(t *testing.T) {
	r := highRule()
	r.OnDelay = 10 * time.Second
	r.OffDelay = 10 * time.Second
	runTimeline(t, r, []step{
		{at: 0, T: 1600, state: Normal},                // counting from 0
		{at: 1, T: 1600, q: Bad, state: Normal},        // 1 s counted, then paused
		{at: 5, T: 1600, q: Bad, state: Normal},        // paused
		{at: 20, T: 1600, state: Normal},               // resumes: 1 s
		{at: 28, T: 1600, q: Uncertain, state: Normal}, // uncertain counts: 9 s
		{at: 29, T: 1600, state: Unacknowledged, ev: "activated normal>unacknowledged"},
		{at: 30, T: 1400, q: Bad, state: Unacknowledged},
		{at: 31, state: Unacknowledged},                            // no temperature
		{at: 32, T: 1400, f: FlagCommError, state: Unacknowledged}, // no answer
		{at: 60, op: opTick, state: Unacknowledged},
		{at: 61, T: 1400, state: Unacknowledged}, // off-delay starts
		{at: 62, q: Bad, state: Unacknowledged},  // 1 s counted, then paused
		{at: 100, op: opTick, state: Unacknowledged},
		{at: 101, T: 1400, state: Unacknowledged}, // resumes: 1 s
		{at: 109.9, op: opTick, state: Unacknowledged},
		{at: 110, op: opTick, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
	})

	// The blind-protection alarm: raised when quality stays bad for its
	// on-delay, whatever the flags (communication loss included).
	blind := Rule{Name: "blind", Kind: BadQuality, Priority: PriorityHigh, OnDelay: 5 * time.Second}
	runTimeline(t, blind, []step{
		{at: 0, q: Bad, f: FlagLowSignal, state: Normal},
		{at: 3, q: Bad, state: Normal},
		{at: 4, T: 1500, state: Normal},
		{at: 5, q: Bad, f: FlagCommError, state: Normal},
		{at: 9.9, q: Bad, state: Normal},
		{at: 10, q: Bad, state: Unacknowledged, ev: "activated normal>unacknowledged"},
		{at: 11, T: 1500, q: Uncertain, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
	})
}

func TestFlagKinds(t *testing.T) {
	over := Rule{Name: "over", Kind: OverRange, Priority: PriorityMedium}
	runTimeline(t, over, []step{
		{at: 0, T: 1500, state: Normal},
		{at: 1, q: Bad, f: FlagSaturated, state: Unacknowledged, ev: "activated normal>unacknowledged"},
		{at: 2, q: Bad, f: FlagAboveRange, state: Unacknowledged},
		{at: 3, q: Bad, f: FlagCommError, state: Unacknowledged}, // says nothing
		{at: 4, T: 1500, f: FlagNongrey, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
	})
	for _, c := range []struct {
		kind Kind
		flag Flags
	}{{LowSignal, FlagLowSignal}, {Nongrey, FlagNongrey}, {BelowRange, FlagBelowRange}} {
		r := Rule{Name: c.kind.String(), Kind: c.kind, Priority: PriorityLow}
		runTimeline(t, r, []step{
			{at: 0, T: 1500, f: allFlags &^ c.flag &^ FlagCommError, state: Normal},
			{at: 1, T: 1500, f: c.flag, state: Unacknowledged, ev: "activated normal>unacknowledged"},
			{at: 2, f: FlagCommError, state: Unacknowledged},
			{at: 3, T: 1500, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
		})
	}
}

func TestRate(t *testing.T) {
	r := Rule{Name: "heating", Kind: RateRise, Setpoint: 5, Deadband: 1, Window: 10 * time.Second, Priority: PriorityMedium}
	a, err := NewAlarm(r)
	if err != nil {
		t.Fatal(err)
	}
	// 2 K/s for 10 s, then 8 K/s to 1100 K, then steady. The rate is the
	// change over the 10 s window: at 16 s (1068 − 1012)/10 = 5.6 K/s > 5
	// activates; after the rise stops at 20 s, at 25 s (1100 − 1060)/10 =
	// 4.0 K/s ≤ 5 − 1 clears (hand arithmetic).
	temp := func(sec int) float64 {
		switch {
		case sec <= 10:
			return 1000 + 2*float64(sec)
		case sec <= 20:
			return 1020 + 8*float64(sec-10)
		}
		return 1100
	}
	for sec := 0; sec <= 30; sec++ {
		evs := a.Evaluate(Sample{Time: at(float64(sec)), Temperature: temp(sec)}, nil)
		want := ""
		switch sec {
		case 16:
			want = "activated normal>unacknowledged"
			if v := evs[0].Value; math.Abs(v-5.6) > 1e-9 {
				t.Errorf("rate at 16 s: %v K/s, want 5.6", v)
			}
		case 25:
			want = "cleared unacknowledged>rtn_unacknowledged"
			if v := evs[0].Value; math.Abs(v-4.0) > 1e-9 {
				t.Errorf("rate at 25 s: %v K/s, want 4.0", v)
			}
		}
		if got := format(evs); got != want {
			t.Fatalf("t=%d s: events %q, want %q", sec, got, want)
		}
		if sec < 5 && !math.IsNaN(a.Status().Value) {
			t.Fatalf("t=%d s: a rate %v before the history spans half the window", sec, a.Status().Value)
		}
	}

	fall := Rule{Name: "quench", Kind: RateFall, Setpoint: 20, Deadband: 5, Window: 2 * time.Second, Priority: PriorityHigh}
	f, err := NewAlarm(fall)
	if err != nil {
		t.Fatal(err)
	}
	// Samples every 10 ms, more than the ring keeps (it thins them to one
	// per 2 s/30): falling 30 K/s from 1 s on activates once the window
	// shows more than 20 K/s, and over a full window on the line the rate
	// is −30 K/s.
	var evs []Event
	for i := 0; i <= 600; i++ {
		sec := float64(i) / 100
		T := 1500.0
		if sec > 1 {
			T = 1500 - 30*(sec-1)
		}
		evs = f.Evaluate(Sample{Time: at(sec), Temperature: T}, evs)
	}
	if len(evs) != 1 || evs[0].Reason != ReasonActivated {
		t.Fatalf("fall: events %q, want one activation", format(evs))
	}
	if v := evs[0].Value; v > -20 || v < -30-1e-9 {
		t.Errorf("fall rate at activation %v K/s, want in [-30, -20)", v)
	}
	if v := f.Status().Value; math.Abs(v+30) > 1e-6 {
		t.Errorf("fall rate %v K/s over a full window of a 30 K/s fall", v)
	}
	// A clock that steps back empties the history: no rate until it spans
	// half the window again.
	evs = f.Evaluate(Sample{Time: at(0), Temperature: 1200}, evs[:0])
	if len(evs) != 0 || !f.Active() {
		t.Fatalf("after a clock step back: events %q, active %v", format(evs), f.Active())
	}
	if f.n != 1 {
		t.Fatalf("after a clock step back: %d points kept, want 1", f.n)
	}
}

func TestDeviation(t *testing.T) {
	r := Rule{Name: "heads_disagree", Kind: Deviation, Setpoint: 20, Deadband: 5, Priority: PriorityMedium}
	runTimeline(t, r, []step{
		{at: 0, T: 1500, other: 1510, state: Normal},
		{at: 1, T: 1500, other: 1525, state: Unacknowledged, ev: "activated normal>unacknowledged"},
		{at: 2, T: 1500, other: 1484, state: Unacknowledged}, // 16 K > 20 − 5
		{at: 3, T: 1500, state: Unacknowledged},              // other head missing
		{at: 4, T: 1500, other: math.NaN(), state: Unacknowledged},
		{at: 5, T: 1500, other: 1530, q: Bad, state: Unacknowledged},
		{at: 6, T: 1500, other: 1515, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
	})
}

func TestNoData(t *testing.T) {
	r := Rule{Name: "silent", Kind: NoData, Periods: 3, Period: time.Second, Priority: PriorityHigh}
	runTimeline(t, r, []step{
		{at: 0, T: 1500, state: Normal},
		{at: 1, op: opTick, state: Normal},
		{at: 2.9, op: opTick, state: Normal},
		{at: 3, op: opTick, state: Unacknowledged, ev: "activated normal>unacknowledged"},
		{at: 4, q: Bad, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"}, // data, if bad
		{at: 5, q: Bad, f: FlagCommError, state: ReturnedUnacknowledged},
		{at: 6, q: Bad, f: FlagCommError, state: ReturnedUnacknowledged},
		{at: 6.5, op: opTick, state: ReturnedUnacknowledged},
		{at: 7, q: Bad, f: FlagCommError, state: Unacknowledged, ev: "activated rtn_unacknowledged>unacknowledged"},
		{at: 8, T: 1500, state: ReturnedUnacknowledged, ev: "cleared unacknowledged>rtn_unacknowledged"},
	})
	// With no sample ever, silence counts from the first call; the
	// on-delay adds to Periods × Period.
	r.OnDelay = 2 * time.Second
	runTimeline(t, r, []step{
		{at: 100, op: opTick, state: Normal},
		{at: 103, op: opTick, state: Normal},
		{at: 104, op: opTick, state: Normal},
		{at: 105, op: opTick, state: Unacknowledged, ev: "activated normal>unacknowledged"},
	})
}

// The constructor refuses rules that cannot work, naming the field.
func TestNewAlarmErrors(t *testing.T) {
	ok := highRule()
	mod := func(f func(r *Rule)) Rule { r := ok; f(&r); return r }
	cases := []struct {
		rule Rule
		want string
	}{
		{mod(func(r *Rule) { r.Name = "" }), "name: empty"},
		{mod(func(r *Rule) { r.Kind = 0 }), "kind: 0 is not a kind"},
		{mod(func(r *Rule) { r.Kind = 99 }), "kind: 99 is not a kind"},
		{mod(func(r *Rule) { r.Priority = 0 }), "priority: not set"},
		{mod(func(r *Rule) { r.Priority = 5 }), "priority: not set"},
		{mod(func(r *Rule) { r.Setpoint = math.NaN() }), "setpoint: NaN is not a number"},
		{mod(func(r *Rule) { r.Setpoint = math.Inf(1) }), "setpoint: +Inf is not a number"},
		{mod(func(r *Rule) { r.Setpoint = -5 }), "setpoint: -5 must be positive (K)"},
		{mod(func(r *Rule) { r.Deadband = -1 }), "deadband: -1 is not a non-negative number"},
		{mod(func(r *Rule) { r.Deadband = math.NaN() }), "deadband: NaN"},
		{mod(func(r *Rule) { r.Deadband = 1500 }), "deadband: 1500 is not below setpoint 1500"},
		{mod(func(r *Rule) { r.OnDelay = -time.Second }), "on-delay: -1s is negative"},
		{mod(func(r *Rule) { r.OffDelay = -time.Second }), "off-delay: -1s is negative"},
		{mod(func(r *Rule) { r.Realarm = -time.Second }), "re-alarm: -1s is negative"},
		{mod(func(r *Rule) { r.Window = time.Second }), "window: 1s given, but only rate alarms have one"},
		{mod(func(r *Rule) { r.Periods = 3 }), "periods, period: given"},
		{mod(func(r *Rule) { r.Kind = RateRise; r.Setpoint = 5; r.Deadband = 1 }), "window: 0s; a rate needs a positive window"},
		{mod(func(r *Rule) { r.Kind = RateFall; r.Setpoint = -5; r.Deadband = 0; r.Window = time.Second }), "setpoint: -5 must be positive (K/s)"},
		{mod(func(r *Rule) { r.Kind = Deviation; r.Setpoint = 10; r.Deadband = 10 }), "deadband: 10 is not below setpoint 10"},
		{mod(func(r *Rule) { r.Kind = NoData }), "setpoint: 1500 given, but this kind has no setpoint"},
		{mod(func(r *Rule) { r.Kind = NoData; r.Setpoint = 0 }), "deadband: 15 given"},
		{mod(func(r *Rule) { r.Kind = NoData; r.Setpoint, r.Deadband = 0, 0; r.Period = time.Second }), "periods: 0; want at least 1"},
		{mod(func(r *Rule) { r.Kind = NoData; r.Setpoint, r.Deadband = 0, 0; r.Periods = 3 }), "period: 0s; want the polling interval"},
		{mod(func(r *Rule) {
			r.Kind = NoData
			r.Setpoint, r.Deadband = 0, 0
			r.Periods, r.Period = math.MaxInt, time.Hour
		}), "overflows"},
		{mod(func(r *Rule) { r.SuppressWhen.Below = -1 }), "suppression below: -1"},
		{mod(func(r *Rule) { r.SuppressWhen.Below = math.Inf(1) }), "suppression below: +Inf"},
		{mod(func(r *Rule) { r.SuppressWhen.Hysteresis = 5 }), "hysteresis: 5 given without a temperature"},
		{mod(func(r *Rule) { r.SuppressWhen.Below = 900; r.SuppressWhen.Hysteresis = math.NaN() }), "hysteresis: NaN"},
		{mod(func(r *Rule) { r.SuppressWhen.Flags = 1 << 12 }), "suppression flags: unknown bits 0x1000"},
		{mod(func(r *Rule) { r.SuppressWhen.Flags = FlagCommError }), "comm_error carries no measurement"},
	}
	for _, c := range cases {
		_, err := NewAlarm(c.rule)
		if err == nil || !errors.Is(err, ErrInvalidRule) || !strings.Contains(err.Error(), c.want) {
			t.Errorf("rule %+v: error %v, want one containing %q and wrapping ErrInvalidRule", c.rule, err, c.want)
		}
	}
	if _, err := NewAlarm(mod(func(r *Rule) { r.Kind = Low; r.Deadband = 2000 })); err != nil {
		t.Errorf("a low alarm's deadband may exceed its setpoint: %v", err)
	}
	if _, err := NewAlarm(mod(func(r *Rule) { r.Name = "" })); err == nil || !strings.Contains(err.Error(), "alarm rule (high)") {
		t.Errorf("unnamed rule: %v", err)
	}
}

// Operator errors name the alarm, the action and the state.
func TestOperatorErrorText(t *testing.T) {
	a, err := NewAlarm(highRule())
	if err != nil {
		t.Fatal(err)
	}
	_, err = a.Acknowledge(at(0), "op1", nil)
	want := `alarm "mould_high": acknowledge in state normal: nothing to acknowledge`
	if err == nil || err.Error() != want {
		t.Fatalf("error %q, want %q", err, want)
	}
	_, err = a.Shelve(at(10), at(5), "op1", nil)
	want = `alarm "mould_high": shelve in state normal: until 2025-03-01T06:00:05Z, now 2025-03-01T06:00:10Z: shelve expiry not after now`
	if err == nil || err.Error() != want {
		t.Fatalf("error %q, want %q", err, want)
	}
}

func TestEventFields(t *testing.T) {
	a, err := NewAlarm(highRule())
	if err != nil {
		t.Fatal(err)
	}
	evs := a.Evaluate(Sample{Time: at(1), Temperature: 1512.5}, nil)
	want := Event{Time: at(1), Alarm: "mould_high", From: Normal, To: Unacknowledged, Active: true,
		Value: 1512.5, Priority: PriorityHigh, Message: "strand too hot", Reason: ReasonActivated}
	if len(evs) != 1 || evs[0] != want {
		t.Fatalf("events %+v, want [%+v]", evs, want)
	}
	evs, err = a.Acknowledge(at(2), "op7", evs[:0])
	if err != nil || len(evs) != 1 || evs[0].By != "op7" || evs[0].Time != at(2) || evs[0].Value != 1512.5 {
		t.Fatalf("acknowledge: %+v, %v", evs, err)
	}
	st := a.Status()
	if st.State != Acknowledged || !st.Active || st.Since != at(2) || st.Activations != 1 || st.Kind != High || st.Name != "mould_high" {
		t.Fatalf("status %+v", st)
	}
	if _, err := a.Shelve(at(3), at(60), "op7", nil); err != nil {
		t.Fatal(err)
	}
	if st := a.Status(); st.ShelvedUntil != at(60) || st.ShelvedBy != "op7" {
		t.Fatalf("shelved status %+v", st)
	}
	flag, err := NewAlarm(Rule{Name: "weak", Kind: LowSignal, Priority: PriorityLow})
	if err != nil {
		t.Fatal(err)
	}
	evs = flag.Evaluate(Sample{Time: at(1), Temperature: 1500, Flags: FlagLowSignal}, nil)
	if len(evs) != 1 || !math.IsNaN(evs[0].Value) {
		t.Fatalf("flag alarm event value %+v, want NaN", evs)
	}
}

// Evaluate and Tick allocate nothing when dst has room.
func TestNoAllocations(t *testing.T) {
	s, err := NewSet(benchRules())
	if err != nil {
		t.Fatal(err)
	}
	dst := make([]Event, 0, 64)
	i := 0
	allocs := testing.AllocsPerRun(1000, func() {
		dst = s.Evaluate(benchSample(i), dst[:0])
		dst = s.Tick(at(float64(i)/10+0.05), dst)
		i++
	})
	if allocs != 0 {
		t.Fatalf("%v allocations per Evaluate+Tick, want 0", allocs)
	}
}

// Times far apart or out of int64 nanoseconds neither overflow nor panic.
func TestClockExtremes(t *testing.T) {
	if d := since(math.MaxInt64, -1); d != math.MaxInt64 {
		t.Errorf("since(max, -1) = %v", d)
	}
	if d := since(math.MinInt64, 1); d != math.MinInt64 {
		t.Errorf("since(min, 1) = %v", d)
	}
	if n := nanos(time.Date(3000, 1, 1, 0, 0, 0, 0, time.UTC)); n != math.MaxInt64 {
		t.Errorf("nanos(3000) = %d", n)
	}
	if n := nanos(time.Time{}); n != math.MinInt64 {
		t.Errorf("nanos(zero time) = %d", n)
	}
	r := highRule()
	r.OnDelay = time.Hour
	runTimeline(t, r, []step{
		{at: 0, T: 1600, state: Normal},
		{at: -9e9, T: 1600, state: Normal}, // the clock steps back 285 years
		{at: 7e9, T: 1600, state: Unacknowledged, ev: "activated normal>unacknowledged"},
	})
	r.OnDelay = math.MaxInt64
	a, err := NewAlarm(r)
	if err != nil {
		t.Fatal(err)
	}
	for _, sec := range []float64{-5e9, 4e9, 9e9} { // the sum of the spans overflows
		a.Evaluate(Sample{Time: at(sec), Temperature: 1600}, nil)
	}
	if !a.Active() {
		t.Errorf("a condition held for centuries did not activate")
	}
	// A window too short to thin (59 ns: points 1 ns apart are kept): the
	// ring fills and drops its oldest.
	rr := Rule{Name: "fast", Kind: RateRise, Setpoint: 1, Window: 59, Priority: PriorityLow}
	b, err := NewAlarm(rr)
	if err != nil {
		t.Fatal(err)
	}
	for i := range 100 {
		b.Evaluate(Sample{Time: t0().Add(time.Duration(i)), Temperature: 1000}, nil)
		if b.n > ringSize {
			t.Fatalf("ring holds %d", b.n)
		}
	}
}
