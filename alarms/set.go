package alarms

import (
	"fmt"
	"time"
)

// Set is the alarms of one head, evaluated together on each of its
// samples. Its methods must not be called concurrently.
type Set struct {
	alarms []Alarm
}

// NewSet returns the alarms of rules, in the rules' order, all Normal. An
// error wraps ErrInvalidRule for a rule that cannot work or a name used
// twice.
func NewSet(rules []Rule) (*Set, error) {
	return RestoreSet(rules, nil)
}

// RestoreSet returns the alarms of rules, each restored from the entry of
// saved with its name (see Restore) or new when there is none. Entries
// whose rule is gone are ignored: compare names to retire them.
func RestoreSet(rules []Rule, saved []Saved) (*Set, error) {
	s := &Set{alarms: make([]Alarm, len(rules))}
	seen := make(map[string]int, len(rules))
	for i, r := range rules {
		if j, ok := seen[r.Name]; ok {
			return nil, fmt.Errorf("rule %d: alarm rule %q: name already used by rule %d: %w", i+1, r.Name, j+1, ErrInvalidRule)
		}
		seen[r.Name] = i
		var a *Alarm
		var err error
		if k := savedIndex(saved, r.Name); k >= 0 {
			a, err = Restore(r, saved[k])
		} else {
			a, err = NewAlarm(r)
		}
		if err != nil {
			return nil, fmt.Errorf("rule %d: %w", i+1, err)
		}
		s.alarms[i] = *a
	}
	return s, nil
}

// CarrySet returns the alarms of rules as RestoreSet does from old's
// snapshot, except that an alarm whose rule is unchanged in old is taken
// over whole: its pending delays, rate history and no-data clock go on,
// so that reloading a configuration neither restarts an on-delay nor
// blinds a rate alarm. A nil old gives new alarms. old is left as it was.
func CarrySet(rules []Rule, old *Set) (*Set, error) {
	var saved []Saved
	if old != nil {
		saved = old.Snapshot(nil)
	}
	s, err := RestoreSet(rules, saved)
	if err != nil || old == nil {
		return s, err
	}
	for i := range s.alarms {
		a := old.Alarm(s.alarms[i].rule.Name)
		if a == nil || a.rule != s.alarms[i].rule {
			continue
		}
		s.alarms[i] = *a
		if a.ring != nil {
			ring := *a.ring
			s.alarms[i].ring = &ring
		}
	}
	return s, nil
}

// savedIndex returns the index of the entry of saved named name, or -1.
func savedIndex(saved []Saved, name string) int {
	for i := range saved {
		if saved[i].Name == name {
			return i
		}
	}
	return -1
}

// Len returns the number of alarms.
func (s *Set) Len() int { return len(s.alarms) }

// At returns the i-th alarm, in the rules' order; it panics when i is out
// of range, as indexing does.
func (s *Set) At(i int) *Alarm { return &s.alarms[i] }

// Alarm returns the alarm named name, or nil when there is none.
func (s *Set) Alarm(name string) *Alarm {
	for i := range s.alarms {
		if s.alarms[i].rule.Name == name {
			return &s.alarms[i]
		}
	}
	return nil
}

// Evaluate applies one sample to every alarm (see Alarm.Evaluate) and
// appends their transitions to dst in the rules' order. It does not
// allocate when dst has room.
func (s *Set) Evaluate(smp Sample, dst []Event) []Event {
	for i := range s.alarms {
		dst = s.alarms[i].Evaluate(smp, dst)
	}
	return dst
}

// Tick applies the passing of time to every alarm (see Alarm.Tick).
func (s *Set) Tick(now time.Time, dst []Event) []Event {
	for i := range s.alarms {
		dst = s.alarms[i].Tick(now, dst)
	}
	return dst
}

// Snapshot appends every alarm's Saved to dst, in the rules' order.
func (s *Set) Snapshot(dst []Saved) []Saved {
	for i := range s.alarms {
		dst = append(dst, s.alarms[i].Snapshot())
	}
	return dst
}
