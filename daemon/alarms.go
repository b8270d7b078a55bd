package daemon

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"sync"
	"time"

	"glowgate/alarms"
	"glowgate/bus/mqtt"
	"glowgate/daemon/config"
)

// headAlarms are one head's alarms. The head's line goroutine evaluates
// them on each reading; the alarm ticker and operator commands reach them
// too, hence the lock.
type headAlarms struct {
	mu     sync.Mutex
	set    *alarms.Set
	other  map[string]string // alarm name -> the other head of a deviation
	events []alarms.Event    // scratch
	// states holds the retained state last published of each alarm (by
	// name), sent again on every connection to a broker: a broker that
	// restarted without persistence has lost it.
	states map[string][]byte
}

// newHeadAlarms builds a head's alarms, carried over from prev (the same
// head's alarms before a reload) when there is one, else restored from
// saved states.
func newHeadAlarms(h config.Head, saved []alarms.Saved, prev *headAlarms) (*headAlarms, error) {
	if len(h.Alarms) == 0 {
		return nil, nil
	}
	rules := make([]alarms.Rule, len(h.Alarms))
	other := map[string]string{}
	for i, r := range h.Alarms {
		rule, err := r.Rule(h.Period)
		if err != nil {
			return nil, fmt.Errorf("alarm %s: %w", r.Name, err)
		}
		rules[i] = rule
		if r.OtherHead != "" {
			other[r.Name] = r.OtherHead
		}
	}
	ha := &headAlarms{other: other}
	var err error
	if prev != nil {
		prev.mu.Lock()
		ha.set, err = alarms.CarrySet(rules, prev.set)
		for name, p := range prev.states {
			if ha.set != nil && ha.set.Alarm(name) != nil {
				if ha.states == nil {
					ha.states = map[string][]byte{}
				}
				ha.states[name] = p
			}
		}
		prev.mu.Unlock()
	} else {
		// Saved states of alarms that are gone are ignored.
		ha.set, err = alarms.RestoreSet(rules, saved)
	}
	if err != nil {
		// A saved state that no longer fits its rule (its kind changed,
		// say): the head's alarms start afresh.
		ha.set, err = alarms.NewSet(rules)
	}
	if err != nil {
		return nil, err
	}
	return ha, nil
}

// sample is what the alarms see of a reading: the processed temperature
// in kelvin, the quality and the flags.
func sample(r *mqtt.Reading, unit string, other float64) alarms.Sample {
	s := alarms.Sample{Time: r.Time, Temperature: math.NaN(), Other: other}
	if r.Temperature != nil {
		s.Temperature = kelvin(*r.Temperature, unit)
	}
	switch r.Quality {
	case "uncertain":
		s.Quality = alarms.Uncertain
	case "bad":
		s.Quality = alarms.Bad
	}
	for _, f := range r.Flags {
		switch f {
		case "low_signal":
			s.Flags |= alarms.FlagLowSignal
		case "nongrey":
			s.Flags |= alarms.FlagNongrey
		case "saturated", "detector_saturated":
			s.Flags |= alarms.FlagSaturated
		case "above_range":
			s.Flags |= alarms.FlagAboveRange
		case "below_range":
			s.Flags |= alarms.FlagBelowRange
		case "comm_error":
			s.Flags |= alarms.FlagCommError
		}
	}
	return s
}

func kelvin(v float64, unit string) float64 {
	if unit == "degC" {
		return v + 273.15
	}
	return v
}

// alarmEvent is the payload of an alarm transition on <root>/<gateway>/events.
type alarmEvent struct {
	Type     string   `json:"type"` // "alarm"
	Gateway  string   `json:"gateway"`
	Head     string   `json:"head"`
	Alarm    string   `json:"alarm"`
	Seq      uint64   `json:"seq"`
	Time     string   `json:"time"`
	From     string   `json:"from"`
	To       string   `json:"to"`
	Active   bool     `json:"active"`
	Value    *float64 `json:"value"`
	Priority string   `json:"priority"`
	Message  string   `json:"message,omitempty"`
	By       string   `json:"by,omitempty"`
	Reason   string   `json:"reason"`
	// Chattering: the alarm activated three or more times within the
	// last minute (the usual figure; common practice, no source).
	Chattering bool `json:"chattering,omitempty"`
	// Flood: more than ten annunciations in the last ten minutes at this
	// gateway (ISA-18.2's flood figure, per operator).
	Flood bool `json:"flood,omitempty"`
}

// alarmState is the retained payload of <root>/<gateway>/<head>/alarm/<alarm>.
type alarmState struct {
	Gateway      string   `json:"gateway"`
	Head         string   `json:"head"`
	Alarm        string   `json:"alarm"`
	Seq          uint64   `json:"seq"`
	State        string   `json:"state"`
	Active       bool     `json:"active"`
	Priority     string   `json:"priority"`
	Message      string   `json:"message,omitempty"`
	Value        *float64 `json:"value"`
	Since        string   `json:"since,omitempty"`
	ShelvedUntil string   `json:"shelved_until,omitempty"`
	Time         string   `json:"time"`
}

// evaluate runs a head's alarms on one reading and publishes what
// changed.
func (d *Daemon) evaluate(h *head, r *mqtt.Reading) {
	ha := h.alarms
	if ha == nil {
		return
	}
	other := math.NaN()
	for _, name := range ha.other {
		other = d.latestKelvin(name)
		break
	}
	ha.mu.Lock()
	ha.events = ha.set.Evaluate(sample(r, h.unit, other), ha.events[:0])
	changed := d.announce(h, ha)
	ha.mu.Unlock()
	if changed {
		d.feedAlarms()
	}
}

// latestKelvin is a head's latest processed temperature in kelvin, NaN
// when it has none or it is not good.
func (d *Daemon) latestKelvin(name string) float64 {
	d.mu.Lock()
	defer d.mu.Unlock()
	r, ok := d.latest[name]
	if !ok || r.Temperature == nil || r.Quality == "bad" {
		return math.NaN()
	}
	return kelvin(*r.Temperature, r.Unit)
}

// tickAlarms runs the time-driven transitions of every head's alarms
// (shelving expiry, re-alarm, no data).
func (d *Daemon) tickAlarms(now time.Time) {
	d.mu.Lock()
	heads := d.heads
	d.mu.Unlock()
	for _, h := range heads {
		if ha := h.alarms; ha != nil {
			ha.mu.Lock()
			ha.events = ha.set.Tick(now, ha.events[:0])
			changed := d.announce(h, ha)
			ha.mu.Unlock()
			if changed {
				d.feedAlarms()
			}
		}
	}
}

// announce publishes the events in ha.events and the new retained states
// of the alarms they concern, and saves the states; it reports whether
// there were any. ha.mu is held.
func (d *Daemon) announce(h *head, ha *headAlarms) bool {
	if len(ha.events) == 0 {
		return false
	}
	cfg := d.config()
	topics := mqttTopics(cfg)
	for _, e := range ha.events {
		key := h.cfg.Name + "/" + e.Alarm
		d.floodMu.Lock()
		fe := e
		fe.Alarm = key
		d.flood.Observe(fe)
		chattering, flooding := d.flood.Chattering(key, e.Time), d.flood.Flooding(e.Time)
		d.floodMu.Unlock()
		ev := alarmEvent{
			Chattering: chattering, Flood: flooding,
			Type: "alarm", Gateway: cfg.Gateway, Head: h.cfg.Name, Alarm: e.Alarm,
			Time: e.Time.UTC().Format(mqtt.TimeLayout), From: e.From.String(), To: e.To.String(),
			Active: e.Active, Value: h.valueOf(e.Value, e.Alarm), Priority: e.Priority.String(),
			Message: e.Message, By: e.By, Reason: e.Reason,
		}
		d.append(mqtt.KindEvent, topics.Events(), false, func(seq uint64) []byte {
			ev.Seq = seq
			b, _ := json.Marshal(ev)
			return b
		})
		if a := ha.set.Alarm(e.Alarm); a != nil {
			d.publishAlarmState(h, a, e.Time)
		}
	}
	d.saveAlarms(h, ha)
	return true
}

// valueOf expresses an alarm's value for publishing: temperatures in the
// reading's unit, rates and differences as they are.
func (h *head) valueOf(v float64, alarm string) *float64 {
	for _, r := range h.cfg.Alarms {
		if r.Name == alarm {
			switch r.Kind {
			case "high", "high_high", "low", "low_low":
				return h.temperature(v)
			}
		}
	}
	return finite(v)
}

// publishAlarmState publishes an alarm's retained state. The head's alarm
// lock is held.
func (d *Daemon) publishAlarmState(h *head, a *alarms.Alarm, now time.Time) {
	cfg := d.config()
	st := a.Status()
	p := alarmState{
		Gateway: cfg.Gateway, Head: h.cfg.Name, Alarm: st.Name, State: st.State.String(), Active: st.Active,
		Priority: st.Priority.String(), Message: st.Message, Value: h.valueOf(st.Value, st.Name),
		Time: now.UTC().Format(mqtt.TimeLayout),
	}
	if !st.Since.IsZero() {
		p.Since = st.Since.UTC().Format(mqtt.TimeLayout)
	}
	if !st.ShelvedUntil.IsZero() {
		p.ShelvedUntil = st.ShelvedUntil.UTC().Format(mqtt.TimeLayout)
	}
	var payload []byte
	d.append(mqtt.KindState, mqttTopics(cfg).Alarm(h.cfg.Name, st.Name), true, func(seq uint64) []byte {
		p.Seq = seq
		payload, _ = json.Marshal(p)
		return payload
	})
	if ha := h.alarms; ha != nil && payload != nil {
		if ha.states == nil {
			ha.states = map[string][]byte{}
		}
		ha.states[st.Name] = payload
	}
}

// alarmStateMessages are the retained states last published of every
// alarm, to send again on a new connection.
func (d *Daemon) alarmStateMessages(heads []*head, topics mqtt.Topics) []mqtt.Message {
	var msgs []mqtt.Message
	eachAlarm(heads, func(h *head, ha *headAlarms, a *alarms.Alarm) {
		if p := ha.states[a.Name()]; p != nil {
			msgs = append(msgs, mqtt.Message{Topic: topics.Alarm(h.cfg.Name, a.Name()), Payload: p, Retain: true})
		}
	})
	return msgs
}

// append sends an event or state through the durable outbox when there
// is one (never dropped), else through the publisher's queue.
func (d *Daemon) append(kind mqtt.EntryKind, topic string, retain bool, payload func(seq uint64) []byte) {
	d.mu.Lock()
	ob, pub := d.outbox, d.pub
	d.mu.Unlock()
	if ob != nil {
		if _, err := ob.Append(kind, topic, retain, payload); err != nil {
			d.log.Error("outbox append", "topic", topic, "err", err)
		}
		return
	}
	if pub != nil {
		pub.Publish(mqtt.Message{Topic: topic, Payload: payload(d.seq.Add(1)), Retain: retain})
	}
}

// alarmsFile is where alarm states are kept between runs.
func (d *Daemon) alarmsFile() string {
	dir := d.config().StateDir
	if d.opts.StateDir != "" {
		dir = d.opts.StateDir
	}
	if dir == "" {
		return ""
	}
	return filepath.Join(dir, "alarms.json")
}

// saveAlarms records ha's states, whose lock is held, and writes every
// head's recorded states to the state directory, atomically (a new file
// renamed over the old one).
func (d *Daemon) saveAlarms(h *head, ha *headAlarms) {
	d.mu.Lock()
	d.savedAlarms[h.cfg.Name] = ha.set.Snapshot(nil)
	b, err := json.Marshal(d.savedAlarms)
	d.mu.Unlock()
	path := d.alarmsFile()
	if path == "" {
		return
	}
	if err == nil {
		tmp := path + ".new"
		if err = os.WriteFile(tmp, b, 0o600); err == nil {
			err = os.Rename(tmp, path)
		}
	}
	if err != nil {
		d.log.Error("saving alarm states", "file", path, "err", err)
	}
}

// loadAlarms reads the saved alarm states; none when there are none.
func (d *Daemon) loadAlarms() map[string][]alarms.Saved {
	path := d.alarmsFile()
	if path == "" {
		return nil
	}
	b, err := os.ReadFile(path)
	if errors.Is(err, os.ErrNotExist) {
		return nil
	}
	var all map[string][]alarms.Saved
	if err == nil {
		err = json.Unmarshal(b, &all)
	}
	if err != nil {
		d.log.Error("alarm states not restored", "file", path, "err", err)
		return nil
	}
	return all
}

// alarmAction carries out an operator's acknowledge, shelve or unshelve.
func (d *Daemon) alarmAction(action, headName, alarm, by string, until time.Time) error {
	d.mu.Lock()
	var h *head
	for _, x := range d.heads {
		if x.cfg.Name == headName {
			h = x
		}
	}
	d.mu.Unlock()
	if h == nil || h.alarms == nil {
		return fmt.Errorf("no head %q with alarms", headName)
	}
	ha := h.alarms
	ha.mu.Lock()
	changed := false
	defer func() {
		ha.mu.Unlock()
		if changed {
			d.feedAlarms()
		}
	}()
	a := ha.set.Alarm(alarm)
	if a == nil {
		return fmt.Errorf("head %s has no alarm %q", headName, alarm)
	}
	now := d.now()
	var err error
	switch action {
	case "acknowledge":
		ha.events, err = a.Acknowledge(now, by, ha.events[:0])
	case "shelve":
		ha.events, err = a.Shelve(now, until, by, ha.events[:0])
	case "unshelve":
		ha.events, err = a.Unshelve(now, by, ha.events[:0])
	default:
		return fmt.Errorf("unknown alarm action %q", action)
	}
	if err != nil {
		return err
	}
	changed = d.announce(h, ha)
	return nil
}

// publishAllAlarmStates publishes every alarm's retained state (at start
// and on a republish command).
func (d *Daemon) publishAllAlarmStates() {
	d.mu.Lock()
	heads := d.heads
	d.mu.Unlock()
	now := d.now()
	eachAlarm(heads, func(h *head, _ *headAlarms, a *alarms.Alarm) { d.publishAlarmState(h, a, now) })
}

// eachAlarm calls f for every alarm of heads, in order, with its head's
// alarm lock held.
func eachAlarm(heads []*head, f func(h *head, ha *headAlarms, a *alarms.Alarm)) {
	for _, h := range heads {
		ha := h.alarms
		if ha == nil {
			continue
		}
		ha.mu.Lock()
		for i := range ha.set.Len() {
			f(h, ha, ha.set.At(i))
		}
		ha.mu.Unlock()
	}
}

// alarmLoad is the gateway's alarm load at now: annunciations within the
// last ten minutes, and the alarms ("head/alarm") that chatter.
func (d *Daemon) alarmLoad(now time.Time) (annunciations int, chattering []string) {
	d.floodMu.Lock()
	defer d.floodMu.Unlock()
	return d.flood.Annunciations(now), d.flood.AppendChattering(now, nil)
}
