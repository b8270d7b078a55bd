package alarms

import (
	"encoding/json"
	"errors"
	"strings"
	"testing"
	"time"
)

// roundTrip saves a, passes the Saved through JSON and restores it under r.
func roundTrip(t *testing.T, a *Alarm, r Rule) *Alarm {
	t.Helper()
	b, err := json.Marshal(a.Snapshot())
	if err != nil {
		t.Fatalf("encode: %v", err)
	}
	var s Saved
	if err := json.Unmarshal(b, &s); err != nil {
		t.Fatalf("decode %s: %v", b, err)
	}
	if s != a.Snapshot() {
		t.Fatalf("JSON round trip changed the saved state:\n got %+v\nwant %+v", s, a.Snapshot())
	}
	b2, err := Restore(r, s)
	if err != nil {
		t.Fatalf("restore %s: %v", b, err)
	}
	return b2
}

// A restart neither re-annunciates an alarm nor silently clears it.
func TestRestoreNoReannunciationNoSilentClear(t *testing.T) {
	r := highRule()
	r.OffDelay = 30 * time.Second
	a, err := NewAlarm(r)
	if err != nil {
		t.Fatal(err)
	}
	if evs := a.Evaluate(Sample{Time: at(0), Temperature: 1600}, nil); len(evs) != 1 {
		t.Fatalf("activation: %q", format(evs))
	}
	b := roundTrip(t, a, r)
	if b.State() != Unacknowledged || !b.Active() {
		t.Fatalf("restored %v active %v, want unacknowledged and active", b.State(), b.Active())
	}
	// Still hot after the restart: nothing to announce.
	if evs := b.Evaluate(Sample{Time: at(100), Temperature: 1600}, nil); len(evs) != 0 {
		t.Fatalf("first sample after restore: events %q, want none", format(evs))
	}
	// Cooled: cleared only after the off-delay, and loudly.
	if evs := b.Evaluate(Sample{Time: at(101), Temperature: 1400}, nil); len(evs) != 0 {
		t.Fatalf("cool sample: events %q, want none before the off-delay", format(evs))
	}
	if evs := b.Tick(at(131), nil); format(evs) != "cleared unacknowledged>rtn_unacknowledged" {
		t.Fatalf("after the off-delay: events %q, want cleared", format(evs))
	}

	// Restored active but the process went cold meanwhile: the first
	// usable sample starts the off-delay; a bad sample says nothing.
	c := roundTrip(t, a, r)
	if evs := c.Evaluate(Sample{Time: at(200), Quality: Bad}, nil); len(evs) != 0 {
		t.Fatalf("bad sample after restore: events %q", format(evs))
	}
	if evs := c.Tick(at(1000), nil); len(evs) != 0 || !c.Active() {
		t.Fatalf("tick after a bad sample: events %q active %v; want no silent clear", format(evs), c.Active())
	}
}

// Every state survives a restore, with its facts.
func TestRestoreEveryState(t *testing.T) {
	latching := highRule()
	latching.Latching = true
	latching.Realarm = time.Minute
	idle := Rule{Name: "weak", Kind: LowSignal, Priority: PriorityLow, SuppressWhen: Suppression{Below: 1000, Hysteresis: 50}}
	cases := []struct {
		name  string
		rule  Rule
		steps []step
		want  State
	}{
		{"normal", latching, nil, Normal},
		{"unacknowledged", latching, []step{{at: 0, T: 1600}}, Unacknowledged},
		{"acknowledged", latching, []step{{at: 0, T: 1600}, {at: 1, op: opAck}}, Acknowledged},
		{"rtn_unacknowledged", highRule(), []step{{at: 0, T: 1600}, {at: 1, T: 1400}}, ReturnedUnacknowledged},
		{"latched", latching, []step{{at: 0, T: 1600}, {at: 1, T: 1400}}, Latched},
		{"shelved", latching, []step{{at: 0, T: 1600}, {at: 1, op: opShelve, until: 3600}}, Shelved},
		{"suppressed", idle, []step{{at: 0, T: 900, f: FlagLowSignal}}, SuppressedByDesign},
		{"out_of_service", latching, []step{{at: 0, T: 1600}, {at: 1, op: opOOS}}, OutOfService},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			a, err := NewAlarm(c.rule)
			if err != nil {
				t.Fatal(err)
			}
			for _, s := range c.steps {
				if _, err := apply(a, s); err != nil {
					t.Fatal(err)
				}
			}
			if a.State() != c.want {
				t.Fatalf("built %v, want %v", a.State(), c.want)
			}
			b := roundTrip(t, a, c.rule)
			if b.Snapshot() != a.Snapshot() {
				t.Fatalf("restored %+v, saved %+v", b.Snapshot(), a.Snapshot())
			}
			checkInvariants(t, b, nil)
		})
	}
}

func TestRestoreAfterDowntime(t *testing.T) {
	r := highRule()
	r.Realarm = 10 * time.Minute
	a, err := NewAlarm(r)
	if err != nil {
		t.Fatal(err)
	}
	a.Evaluate(Sample{Time: at(0), Temperature: 1600}, nil)
	if _, err := a.Shelve(at(1), at(60), "op1", nil); err != nil {
		t.Fatal(err)
	}
	// The shelving ran out while the daemon was down: it ends, announced,
	// at the first call.
	b := roundTrip(t, a, r)
	if evs := b.Tick(at(3600), nil); format(evs) != "shelve_expired shelved>unacknowledged" {
		t.Fatalf("events %q, want the shelving to expire", format(evs))
	}
	// An acknowledged alarm whose re-alarm fell due meanwhile.
	if _, err := b.Acknowledge(at(3601), "op1", nil); err != nil {
		t.Fatal(err)
	}
	c := roundTrip(t, b, r)
	if evs := c.Evaluate(Sample{Time: at(7200), Temperature: 1600}, nil); format(evs) != "realarm acknowledged>unacknowledged" {
		t.Fatalf("events %q, want the re-alarm", format(evs))
	}
	// A latch saved under a rule that no longer latches still awaits the
	// operator.
	l := highRule()
	l.Latching = true
	d, err := NewAlarm(l)
	if err != nil {
		t.Fatal(err)
	}
	d.Evaluate(Sample{Time: at(0), Temperature: 1600}, nil)
	d.Evaluate(Sample{Time: at(1), Temperature: 1400}, nil)
	e := roundTrip(t, d, highRule())
	if e.State() != ReturnedUnacknowledged {
		t.Fatalf("latched under a non-latching rule restored as %v, want rtn_unacknowledged", e.State())
	}
}

func TestRestoreErrors(t *testing.T) {
	r := highRule()
	ok := Saved{Name: r.Name, State: Unacknowledged, Active: true, Unacknowledged: true}
	if _, err := Restore(r, ok); err != nil {
		t.Fatalf("valid saved state: %v", err)
	}
	mod := func(f func(s *Saved)) Saved { s := ok; f(&s); return s }
	cases := []struct {
		saved Saved
		want  string
	}{
		{mod(func(s *Saved) { s.Name = "other" }), `saved state belongs to alarm "other"`},
		{mod(func(s *Saved) { s.State = 42 }), "state 42 is not a state"},
		{mod(func(s *Saved) { s.State = Normal }), "state normal does not match its facts, which make unacknowledged"},
		{mod(func(s *Saved) { s.OutOfService = true; s.State = OutOfService }), "out of service, yet active"},
		{mod(func(s *Saved) { s.Latched = true }), "latched, yet active or unacknowledged"},
		{mod(func(s *Saved) { s.ShelvedBy = "op1" }), `shelved by "op1" without an expiry`},
		{mod(func(s *Saved) { s.Unacknowledged = false; s.State = Acknowledged }), "acknowledged without the time of acknowledgment"},
	}
	for _, c := range cases {
		_, err := Restore(r, c.saved)
		if err == nil || !errors.Is(err, ErrInvalidSaved) || !strings.Contains(err.Error(), c.want) {
			t.Errorf("saved %+v: error %v, want one containing %q and wrapping ErrInvalidSaved", c.saved, err, c.want)
		}
	}
	bad := r
	bad.Priority = 0
	if _, err := Restore(bad, ok); !errors.Is(err, ErrInvalidRule) {
		t.Errorf("invalid rule: error %v, want ErrInvalidRule", err)
	}
	var s Saved
	if err := json.Unmarshal([]byte(`{"name":"mould_high","state":"alarming"}`), &s); err == nil {
		t.Errorf("unknown state name decoded without error")
	}
}

// The saved form is readable JSON with the state's name.
func TestSavedJSON(t *testing.T) {
	a, err := NewAlarm(highRule())
	if err != nil {
		t.Fatal(err)
	}
	a.Evaluate(Sample{Time: at(0), Temperature: 1600}, nil)
	b, err := json.Marshal(a.Snapshot())
	if err != nil {
		t.Fatal(err)
	}
	want := `{"name":"mould_high","state":"unacknowledged","active":true,"unacknowledged":true,"since":"2025-03-01T06:00:00Z","activations":1}`
	if string(b) != want {
		t.Fatalf("JSON %s\nwant %s", b, want)
	}
}

// A NoData alarm restored active stays active until data comes: the
// silence counted afresh after a restart is no evidence that data came.
func TestRestoreNoData(t *testing.T) {
	r := Rule{Name: "silent", Kind: NoData, Periods: 3, Period: time.Second, Priority: PriorityHigh}
	a, err := NewAlarm(r)
	if err != nil {
		t.Fatal(err)
	}
	a.Evaluate(Sample{Time: at(0), Temperature: 1500}, nil)
	if evs := a.Tick(at(3), nil); format(evs) != "activated normal>unacknowledged" {
		t.Fatalf("events %q", format(evs))
	}
	// The first call after the restart is a failed poll.
	c := roundTrip(t, a, r)
	if evs := c.Evaluate(Sample{Time: at(50), Quality: Bad, Flags: FlagCommError}, nil); len(evs) != 0 || c.State() != Unacknowledged {
		t.Fatalf("failed poll first after restore: events %q, state %v", format(evs), c.State())
	}
	b := roundTrip(t, a, r)
	for _, sec := range []float64{100, 101, 102.5, 110} {
		if evs := b.Tick(at(sec), nil); len(evs) != 0 {
			t.Fatalf("tick at %g s after restore: events %q, want none", sec, format(evs))
		}
	}
	if evs := b.Evaluate(Sample{Time: at(111), Quality: Bad, Flags: FlagCommError}, nil); len(evs) != 0 {
		t.Fatalf("comm error after restore: events %q", format(evs))
	}
	if evs := b.Evaluate(Sample{Time: at(112), Temperature: 1500}, nil); format(evs) != "cleared unacknowledged>rtn_unacknowledged" {
		t.Fatalf("data after restore: events %q, want cleared", format(evs))
	}
}

// A reloaded configuration carries its alarms over: an unchanged rule's
// alarm goes on where it was (its on-delay is not restarted, its rate
// history is kept), a changed rule's alarm is restored from its state
// (its delays start again), a new rule's alarm starts normal, and the old
// set is left as it was.
func TestCarrySet(t *testing.T) {
	high := highRule()
	high.OnDelay = 10 * time.Second
	rise := Rule{Name: "heating", Kind: RateRise, Setpoint: 5, Deadband: 1, Window: 10 * time.Second, Priority: PriorityMedium}
	old, err := NewSet([]Rule{high, rise})
	if err != nil {
		t.Fatal(err)
	}
	// Hot from 0 s and heating at 10 K/s: the high alarm's on-delay is
	// under way, the rate alarm has its history.
	for sec := 0; sec <= 6; sec++ {
		if evs := old.Evaluate(Sample{Time: at(float64(sec)), Temperature: 1600 + 10*float64(sec)}, nil); sec < 5 && len(evs) != 0 {
			t.Fatalf("t=%d s: %q", sec, format(evs))
		}
	}
	if old.Alarm("heating").State() != Unacknowledged {
		t.Fatalf("rate alarm %v before the reload, want active", old.Alarm("heating").State())
	}

	changed := high
	changed.Message = "strand much too hot"
	fresh := Rule{Name: "cold", Kind: Low, Setpoint: 900, Deadband: 10, Priority: PriorityLow}
	for _, c := range []struct {
		name  string
		rules []Rule
		// when the high alarm activates, counting from 0 s
		want float64
	}{
		{"unchanged", []Rule{high, rise, fresh}, 10},
		{"changed", []Rule{changed, rise, fresh}, 17},
	} {
		t.Run(c.name, func(t *testing.T) {
			s, err := CarrySet(c.rules, old)
			if err != nil {
				t.Fatal(err)
			}
			if st := s.Alarm("heating").State(); st != Unacknowledged {
				t.Errorf("rate alarm carried over as %v", st)
			}
			if st := s.Alarm("cold").State(); st != Normal {
				t.Errorf("new alarm %v, want normal", st)
			}
			for sec := 7.0; sec <= 20; sec++ {
				evs := s.Evaluate(Sample{Time: at(sec), Temperature: 1700}, nil)
				activated := strings.Contains(format(evs), "activated normal>unacknowledged")
				if activated != (sec == c.want) {
					t.Fatalf("t=%g s: events %q; want the high alarm's activation at %g s", sec, format(evs), c.want)
				}
			}
		})
	}
	if st := old.Alarm(high.Name).State(); st != Normal {
		t.Errorf("old set's high alarm %v after carrying, want it left normal", st)
	}
}
