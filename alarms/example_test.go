package alarms_test

import (
	"encoding/json"
	"fmt"
	"time"

	"glowgate/alarms"
)

// A high-temperature alarm with a deadband and an on-delay: a short spike
// raises nothing, a lasting excursion does, and the alarm clears once the
// temperature is back below the setpoint minus the deadband.
func Example() {
	a, err := alarms.NewAlarm(alarms.Rule{
		Name: "mould_high", Kind: alarms.High, Priority: alarms.PriorityHigh,
		Setpoint: 1823.15, Deadband: 15, OnDelay: 10 * time.Second,
		Message: "strand surface too hot",
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	t0 := time.Date(2025, 3, 1, 6, 0, 0, 0, time.UTC)
	temps := []float64{1800, 1830, 1800, 1830, 1830, 1830, 1815, 1805}
	var evs []alarms.Event
	for i, T := range temps {
		evs = a.Evaluate(alarms.Sample{Time: t0.Add(time.Duration(i) * 5 * time.Second), Temperature: T}, evs[:0])
		for _, e := range evs {
			fmt.Printf("%s %s: %s -> %s at %.2f K\n", e.Time.Format("15:04:05"), e.Reason, e.From, e.To, e.Value)
		}
	}
	evs, _ = a.Acknowledge(t0.Add(time.Minute), "shift-lead", evs[:0])
	fmt.Printf("%s %s by %s: %s -> %s\n", evs[0].Time.Format("15:04:05"), evs[0].Reason, evs[0].By, evs[0].From, evs[0].To)
	// Output:
	// 06:00:25 activated: normal -> unacknowledged at 1830.00 K
	// 06:00:35 cleared: unacknowledged -> rtn_unacknowledged at 1805.00 K
	// 06:01:00 acknowledged by shift-lead: rtn_unacknowledged -> normal
}

// Flood counts annunciations across the alarms one operator watches.
func ExampleFlood() {
	var f alarms.Flood
	t0 := time.Date(2025, 3, 1, 6, 0, 0, 0, time.UTC)
	for i := range 12 {
		f.Observe(alarms.Event{
			Time: t0.Add(time.Duration(i) * 40 * time.Second), Alarm: fmt.Sprintf("head%d/high", i%4),
			From: alarms.Normal, To: alarms.Unacknowledged, Active: true, Reason: alarms.ReasonActivated,
		})
	}
	now := t0.Add(440 * time.Second)
	fmt.Println("annunciations in 10 min:", f.Annunciations(now), "flood:", f.Flooding(now))
	fmt.Println("chattering:", f.AppendChattering(now, nil))
	// Output:
	// annunciations in 10 min: 12 flood: true
	// chattering: []
}

// Snapshot and Restore carry an alarm across a restart without announcing
// it again.
func ExampleRestore() {
	rule := alarms.Rule{Name: "blind", Kind: alarms.BadQuality, Priority: alarms.PriorityHigh}
	a, _ := alarms.NewAlarm(rule)
	t0 := time.Date(2025, 3, 1, 6, 0, 0, 0, time.UTC)
	a.Evaluate(alarms.Sample{Time: t0, Quality: alarms.Bad}, nil)

	saved, _ := json.Marshal(a.Snapshot())
	fmt.Println(string(saved))

	var s alarms.Saved
	if err := json.Unmarshal(saved, &s); err != nil {
		fmt.Println(err)
		return
	}
	b, err := alarms.Restore(rule, s)
	if err != nil {
		fmt.Println(err)
		return
	}
	evs := b.Evaluate(alarms.Sample{Time: t0.Add(time.Hour), Quality: alarms.Bad}, nil)
	fmt.Println(b.State(), len(evs), "events")
	// Output:
	// {"name":"blind","state":"unacknowledged","active":true,"unacknowledged":true,"since":"2025-03-01T06:00:00Z","activations":1}
	// unacknowledged 0 events
}
