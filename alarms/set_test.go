package alarms

import (
	"errors"
	"strings"
	"testing"
)

func TestSet(t *testing.T) {
	rules := []Rule{
		highRule(),
		{Name: "mould_high_high", Kind: HighHigh, Setpoint: 1550, Deadband: 15, Priority: PriorityUrgent},
		{Name: "blind", Kind: BadQuality, Priority: PriorityHigh},
	}
	s, err := NewSet(rules)
	if err != nil {
		t.Fatal(err)
	}
	if s.Len() != 3 || s.At(1).Name() != "mould_high_high" || s.Alarm("blind").Rule().Kind != BadQuality || s.Alarm("none") != nil {
		t.Fatalf("set contents wrong")
	}
	evs := s.Evaluate(Sample{Time: at(0), Temperature: 1600}, nil)
	want := "activated normal>unacknowledged; activated normal>unacknowledged"
	if format(evs) != want || evs[0].Alarm != "mould_high" || evs[1].Alarm != "mould_high_high" {
		t.Fatalf("events %q (%v, %v), want %q in rule order", format(evs), evs[0].Alarm, evs[1].Alarm, want)
	}
	if evs := s.Tick(at(1), nil); len(evs) != 0 {
		t.Fatalf("tick: %q", format(evs))
	}
	if _, err := s.Alarm("mould_high").Acknowledge(at(2), "op1", nil); err != nil {
		t.Fatal(err)
	}
	saved := s.Snapshot(nil)
	if len(saved) != 3 || saved[0].State != Acknowledged || saved[1].State != Unacknowledged {
		t.Fatalf("snapshot %+v", saved)
	}
	// A rule removed, one added, one kept: the kept one keeps its state,
	// the removed one's entry is ignored, the new one starts normal.
	rules2 := []Rule{rules[1], {Name: "silent", Kind: NoData, Periods: 3, Period: 1e9, Priority: PriorityHigh}}
	s2, err := RestoreSet(rules2, saved)
	if err != nil {
		t.Fatal(err)
	}
	if s2.Alarm("mould_high_high").State() != Unacknowledged || s2.Alarm("silent").State() != Normal || s2.Alarm("mould_high") != nil {
		t.Fatalf("restored set wrong: %+v", s2.Snapshot(nil))
	}
}

func TestSetErrors(t *testing.T) {
	_, err := NewSet([]Rule{highRule(), {Name: "x", Kind: High, Setpoint: 1, Priority: PriorityLow}, highRule()})
	if !errors.Is(err, ErrInvalidRule) || !strings.Contains(err.Error(), `rule 3: alarm rule "mould_high": name already used by rule 1`) {
		t.Errorf("duplicate name: %v", err)
	}
	bad := highRule()
	bad.Name = "other"
	bad.Deadband = -1
	_, err = NewSet([]Rule{highRule(), bad})
	if !errors.Is(err, ErrInvalidRule) || !strings.Contains(err.Error(), `rule 2: alarm rule "other" (high): deadband`) {
		t.Errorf("invalid rule: %v", err)
	}
	_, err = RestoreSet([]Rule{highRule()}, []Saved{{Name: "mould_high", State: Latched}})
	if !errors.Is(err, ErrInvalidSaved) || !strings.Contains(err.Error(), "rule 1:") {
		t.Errorf("invalid saved: %v", err)
	}
	if s, err := NewSet(nil); err != nil || s.Len() != 0 || len(s.Evaluate(Sample{Time: at(0)}, nil)) != 0 {
		t.Errorf("empty set: %v", err)
	}
}
