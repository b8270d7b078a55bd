package alarms

import (
	"slices"
	"time"
)

// Figures for alarm floods and chattering alarms.
const (
	// FloodLimit and FloodWindow: more than FloodLimit annunciations in
	// FloodWindow for one operator is an alarm flood (ISA-18.2 / IEC
	// 62682, as recorded in the project's library notes).
	FloodLimit  = 10
	FloodWindow = 10 * time.Minute
	// ChatterCount and ChatterWindow: an alarm annunciated by its
	// condition ChatterCount times or more within ChatterWindow is
	// chattering (common practice, no source).
	ChatterCount  = 3
	ChatterWindow = time.Minute
)

// Flood counts the annunciations reaching one operator, to tell an alarm
// flood and chattering alarms. An annunciation is an Event that makes an
// alarm Unacknowledged from any other state: an activation, a re-alarm, or
// an active alarm coming back from shelving or suppression. Chattering
// counts activations only. Shelved and suppressed activations reach no
// operator and count for neither.
//
// Flood keys alarms by Event.Alarm, so the names of the alarms one Flood
// watches must differ: across heads, set Event.Alarm to "head/alarm" (or
// similar) before Observe. The zero Flood is ready to use. Its methods
// must not be called concurrently.
type Flood struct {
	recent []time.Time            // annunciations, at most FloodWindow older than latest
	byName map[string][]time.Time // activations per alarm, at most ChatterWindow older than latest
	latest time.Time
}

// Observe counts e if it is an annunciation. Events may come in any
// order; each is counted at its own time.
func (f *Flood) Observe(e Event) {
	if e.To != Unacknowledged || e.From == Unacknowledged {
		return
	}
	if e.Time.After(f.latest) {
		f.latest = e.Time
	}
	f.recent = prune(append(f.recent, e.Time), f.latest, FloodWindow)
	if e.Reason != ReasonActivated {
		return
	}
	if f.byName == nil {
		f.byName = make(map[string][]time.Time)
	}
	f.byName[e.Alarm] = prune(append(f.byName[e.Alarm], e.Time), f.latest, ChatterWindow)
	for name, ts := range f.byName {
		if ts = prune(ts, f.latest, ChatterWindow); len(ts) == 0 {
			delete(f.byName, name)
		} else {
			f.byName[name] = ts
		}
	}
}

// prune drops the times at least window before latest, in place.
func prune(ts []time.Time, latest time.Time, window time.Duration) []time.Time {
	return slices.DeleteFunc(ts, func(t time.Time) bool { return latest.Sub(t) >= window })
}

// count returns how many of ts fall in (now − window, now].
func count(ts []time.Time, now time.Time, window time.Duration) int {
	n := 0
	for _, t := range ts {
		if d := now.Sub(t); d >= 0 && d < window {
			n++
		}
	}
	return n
}

// Annunciations returns the number of annunciations in the FloodWindow
// ending at now (later than now − FloodWindow, not after now).
func (f *Flood) Annunciations(now time.Time) int { return count(f.recent, now, FloodWindow) }

// Flooding reports whether more than FloodLimit annunciations fell in the
// FloodWindow ending at now.
func (f *Flood) Flooding(now time.Time) bool { return f.Annunciations(now) > FloodLimit }

// Activations returns the number of annunciated activations of alarm in
// the ChatterWindow ending at now.
func (f *Flood) Activations(alarm string, now time.Time) int {
	return count(f.byName[alarm], now, ChatterWindow)
}

// Chattering reports whether alarm was annunciated by its condition at
// least ChatterCount times in the ChatterWindow ending at now.
func (f *Flood) Chattering(alarm string, now time.Time) bool {
	return f.Activations(alarm, now) >= ChatterCount
}

// AppendChattering appends the names of the chattering alarms at now to
// dst, sorted, and returns the extended slice.
func (f *Flood) AppendChattering(now time.Time, dst []string) []string {
	start := len(dst)
	for name, ts := range f.byName {
		if count(ts, now, ChatterWindow) >= ChatterCount {
			dst = append(dst, name)
		}
	}
	slices.Sort(dst[start:])
	return dst
}
