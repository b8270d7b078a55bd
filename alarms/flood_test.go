package alarms

import (
	"slices"
	"testing"
	"time"
)

// annunciation returns an activation event of alarm at sec.
func annunciation(alarm string, sec float64) Event {
	return Event{Time: at(sec), Alarm: alarm, From: Normal, To: Unacknowledged, Active: true, Reason: ReasonActivated}
}

// ISA-18.2 / IEC 62682: more than 10 alarms in 10 minutes for one
// operator is a flood (library notes).
func TestFloodCount(t *testing.T) {
	var f Flood
	for i := range 10 {
		f.Observe(annunciation("a"+string(rune('0'+i)), float64(i*50)))
	}
	if n := f.Annunciations(at(450)); n != 10 || f.Flooding(at(450)) {
		t.Fatalf("10 annunciations in 450 s: count %d flooding %v; want 10, false", n, f.Flooding(at(450)))
	}
	f.Observe(annunciation("b", 590))
	if n := f.Annunciations(at(590)); n != 11 || !f.Flooding(at(590)) {
		t.Fatalf("11 in 590 s: count %d flooding %v; want 11, true", n, f.Flooding(at(590)))
	}
	// The first annunciation (at 0 s) leaves the window at 600 s.
	if n := f.Annunciations(at(599.999)); n != 11 {
		t.Fatalf("at 599.999 s: %d, want 11", n)
	}
	if n := f.Annunciations(at(600)); n != 10 || f.Flooding(at(600)) {
		t.Fatalf("at 600 s: %d, want 10 and no flood", n)
	}
	// Not annunciations: acknowledgment, clearing, shelved activations.
	f.Observe(Event{Time: at(591), Alarm: "b", From: Unacknowledged, To: Acknowledged, Reason: ReasonAcknowledged})
	f.Observe(Event{Time: at(592), Alarm: "b", From: Acknowledged, To: Normal, Reason: ReasonCleared})
	f.Observe(Event{Time: at(593), Alarm: "c", From: Shelved, To: Shelved, Active: true, Reason: ReasonActivated})
	if n := f.Annunciations(at(593)); n != 11 {
		t.Fatalf("after non-annunciations: %d, want 11", n)
	}
	// A re-alarm is an annunciation (but no activation).
	f.Observe(Event{Time: at(594), Alarm: "b", From: Acknowledged, To: Unacknowledged, Active: true, Reason: ReasonRealarm})
	if n, m := f.Annunciations(at(594)), f.Activations("b", at(594)); n != 12 || m != 1 {
		t.Fatalf("after a re-alarm: %d annunciations, %d activations of b; want 12, 1", n, m)
	}
	// Old entries are dropped as time moves on.
	f.Observe(annunciation("d", 5000))
	if len(f.recent) != 1 || len(f.byName) != 1 {
		t.Fatalf("after 5000 s: %d kept, %d alarms; want 1, 1", len(f.recent), len(f.byName))
	}
}

// Three activations of one alarm within a minute make it chattering
// (common practice, no source).
func TestChattering(t *testing.T) {
	var f Flood
	f.Observe(annunciation("x", 0))
	f.Observe(annunciation("x", 30))
	f.Observe(annunciation("y", 31))
	if f.Chattering("x", at(30)) || f.Activations("x", at(30)) != 2 {
		t.Fatalf("two activations: chattering")
	}
	f.Observe(annunciation("x", 59))
	if !f.Chattering("x", at(59)) || f.Chattering("y", at(59)) {
		t.Fatalf("three activations within a minute: not chattering")
	}
	if got := f.AppendChattering(at(59), []string{"keep"}); !slices.Equal(got, []string{"keep", "x"}) {
		t.Fatalf("AppendChattering %q", got)
	}
	if f.Chattering("x", at(60)) || f.Activations("x", at(60)) != 2 {
		t.Fatalf("a minute after the first: still chattering")
	}
	if f.Chattering("x", at(20)) {
		t.Fatalf("before the third: chattering")
	}
}

// A real chattering alarm: no deadband, no delays, a noisy signal across
// the limit. The deadband and an on-delay cure it.
func TestChatteringFromAlarm(t *testing.T) {
	noisy := func(i int) float64 { return 1500 + 3*float64(i%2*2-1) }
	count := func(r Rule) (activations int, chattering bool) {
		a, err := NewAlarm(r)
		if err != nil {
			t.Fatal(err)
		}
		var f Flood
		for i := range 60 {
			for _, e := range a.Evaluate(Sample{Time: at(float64(i)), Temperature: noisy(i)}, nil) {
				f.Observe(e)
			}
		}
		return f.Activations(r.Name, at(59)), f.Chattering(r.Name, at(59))
	}
	bare := Rule{Name: "bare", Kind: High, Setpoint: 1500, Priority: PriorityLow}
	if n, c := count(bare); n != 30 || !c {
		t.Fatalf("no deadband: %d activations, chattering %v; want 30, true", n, c)
	}
	banded := bare
	banded.Deadband = 15
	if n, c := count(banded); n != 1 || c {
		t.Fatalf("deadband: %d activations, chattering %v; want 1, false", n, c)
	}
	delayed := bare
	delayed.OnDelay = 5 * time.Second
	if n, c := count(delayed); n != 0 || c {
		t.Fatalf("on-delay: %d activations, chattering %v; want 0, false", n, c)
	}
}
