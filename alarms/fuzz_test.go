package alarms

import (
	"math"
	"testing"
	"time"
)

// fuzzRules are one rule of every kind, with short delays, latching,
// re-alarm and suppression, so short fuzzed timelines reach every state.
func fuzzRules() []Rule {
	sec := time.Second
	return []Rule{
		{Name: "high", Kind: High, Setpoint: 1500, Deadband: 15, OnDelay: 2 * sec, OffDelay: sec, Priority: PriorityHigh, Realarm: 5 * sec},
		{Name: "high_high", Kind: HighHigh, Setpoint: 1600, Deadband: 10, Priority: PriorityUrgent, Latching: true},
		{Name: "low", Kind: Low, Setpoint: 1000, Deadband: 20, OffDelay: 3 * sec, Priority: PriorityLow, SuppressWhen: Suppression{Below: 950, Hysteresis: 20}},
		{Name: "low_low", Kind: LowLow, Setpoint: 950, Priority: PriorityMedium},
		{Name: "rise", Kind: RateRise, Setpoint: 20, Deadband: 5, Window: 4 * sec, Priority: PriorityMedium, Latching: true},
		{Name: "fall", Kind: RateFall, Setpoint: 20, Deadband: 5, Window: 3 * sec, OnDelay: sec, Priority: PriorityMedium},
		{Name: "deviation", Kind: Deviation, Setpoint: 30, Deadband: 10, Priority: PriorityMedium, SuppressWhen: Suppression{Flags: FlagSaturated | FlagAboveRange}},
		{Name: "no_data", Kind: NoData, Periods: 3, Period: sec, OnDelay: sec, Priority: PriorityHigh, Realarm: 7 * sec},
		{Name: "low_signal", Kind: LowSignal, Priority: PriorityLow, SuppressWhen: Suppression{Below: 1100}},
		{Name: "nongrey", Kind: Nongrey, Priority: PriorityLow, OffDelay: 2 * sec},
		{Name: "over_range", Kind: OverRange, Priority: PriorityMedium},
		{Name: "below_range", Kind: BelowRange, Priority: PriorityLow, SuppressWhen: Suppression{Below: 1000, Hysteresis: 100}},
		{Name: "blind", Kind: BadQuality, OnDelay: 2 * sec, Priority: PriorityHigh, Latching: true, SuppressWhen: Suppression{Flags: FlagBelowRange}},
	}
}

// fuzzTemp maps a byte to a temperature, special values included.
func fuzzTemp(b byte) float64 {
	switch b {
	case 0:
		return math.NaN()
	case 1:
		return math.Inf(1)
	case 2:
		return math.Inf(-1)
	case 3:
		return -1
	case 4:
		return math.MaxFloat64
	case 5:
		return math.SmallestNonzeroFloat64
	}
	return 850 + 4*float64(b)
}

// FuzzEvaluate drives a set of every kind with arbitrary samples, ticks,
// operator actions and restarts, in arbitrary time steps (backward too):
// nothing panics, every alarm's state agrees with its facts, events chain,
// and every alarm restores from its snapshot unchanged.
func FuzzEvaluate(f *testing.F) {
	f.Add([]byte{0, 4, 200, 0, 0, 4, 200, 0, 0, 40, 10, 0, 3, 40, 0, 0, 4, 1, 0, 0})
	f.Add([]byte{0, 4, 180, 1, 1, 4, 0, 2, 2, 4, 255, 0x43, 5, 4, 3, 20, 6, 4, 3, 0, 7, 4, 1, 0})
	f.Add([]byte{0, 4, 120, 0x10, 0, 0xFC, 120, 0x80, 3, 100, 0, 0, 7, 2, 0xFF, 0, 7, 2, 4, 0})
	f.Add([]byte{0, 4, 200, 0, 5, 4, 0, 100, 0, 127, 200, 0, 3, 127, 0, 0, 0, 127, 200, 0, 3, 0x80, 0, 0, 0, 4, 200, 0})
	f.Fuzz(func(t *testing.T, data []byte) {
		rules := fuzzRules()
		s, err := NewSet(rules)
		if err != nil {
			t.Fatal(err)
		}
		now := at(0)
		var evs []Event
		for len(data) >= 4 {
			op, dt, x, y := data[0], data[1], data[2], data[3]
			data = data[4:]
			switch int8(dt) {
			case 127: // the clock leaps a century (and past int64 nanoseconds, in time)
				now = now.AddDate(100, 0, 0)
			case -128:
				now = now.AddDate(-100, 0, 0)
			default:
				now = now.Add(time.Duration(int8(dt)) * 250 * time.Millisecond)
			}
			a := s.At(int(x) % s.Len())
			evs = evs[:0]
			var perAlarm *Alarm
			switch op % 8 {
			case 0, 1, 2:
				smp := Sample{Time: now, Temperature: fuzzTemp(x), Quality: Quality(y & 3), Flags: Flags(y >> 2), Other: fuzzTemp(x ^ y)}
				evs = s.Evaluate(smp, evs)
			case 3:
				evs = s.Tick(now, evs)
			case 4:
				evs, _ = a.Acknowledge(now, "op", evs)
				perAlarm = a
			case 5:
				evs, _ = a.Shelve(now, now.Add(time.Duration(int8(y))*time.Second), "op", evs)
				perAlarm = a
			case 6:
				evs, _ = a.Unshelve(now, "op", evs)
				perAlarm = a
			case 7:
				if y&1 == 0 {
					evs, _ = a.SetOutOfService(now, y&2 == 0, "op", evs)
					perAlarm = a
				} else {
					s, err = RestoreSet(rules, s.Snapshot(nil))
					if err != nil {
						t.Fatalf("restore the set: %v", err)
					}
				}
			}
			if perAlarm != nil {
				checkInvariants(t, perAlarm, evs)
			} else {
				checkSetEvents(t, s, evs)
			}
			for i := range s.Len() {
				a := s.At(i)
				checkInvariants(t, a, nil)
				b, err := Restore(a.Rule(), a.Snapshot())
				if err != nil {
					t.Fatalf("restore %q from %+v: %v", a.Name(), a.Snapshot(), err)
				}
				if b.Snapshot() != a.Snapshot() {
					t.Fatalf("restore %q: %+v, saved %+v", a.Name(), b.Snapshot(), a.Snapshot())
				}
			}
		}
	})
}

// checkSetEvents checks the events of a set's Evaluate or Tick: each
// alarm's events chain and end in its state.
func checkSetEvents(t *testing.T, s *Set, evs []Event) {
	t.Helper()
	for i := range s.Len() {
		a := s.At(i)
		var own []Event
		for _, e := range evs {
			if e.Alarm == a.Name() {
				own = append(own, e)
			}
		}
		checkInvariants(t, a, own)
		if len(own) > 3 {
			t.Fatalf("alarm %q: %d events from one call, want at most 3: %q", a.Name(), len(own), format(own))
		}
	}
}
