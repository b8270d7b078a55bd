package mqtt_test

import (
	"encoding/json"
	"fmt"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
)

// openOutbox opens an outbox in dir, closed in t's cleanup.
func openOutbox(t testing.TB, dir string) *mqtt.Outbox {
	t.Helper()
	ob, err := mqtt.OpenOutbox(dir, mqtt.OutboxOptions{GapTopic: tp.Events(), Gateway: tp.Gateway})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = ob.Close() })
	return ob
}

// arrival is the first arrival of one sequence number at a collector.
type arrival struct {
	seq      uint64
	topic    string
	replayed bool
	at       time.Time
}

// collector gathers what subscribers receive, by gateway sequence number.
type collector struct {
	mu      sync.Mutex
	first   map[uint64]arrival
	copies  int       // arrivals beyond the first
	arrived []arrival // first arrivals, in order
	changed chan struct{}
}

// collectSeqs reads every subscriber into one collector until t ends.
// Messages without a sequence number (states) are ignored.
func collectSeqs(t *testing.T, subs ...*mqtttest.Subscriber) *collector {
	c := &collector{first: make(map[uint64]arrival), changed: make(chan struct{}, 1)}
	done := make(chan struct{})
	var wg sync.WaitGroup
	for _, s := range subs {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for {
				select {
				case <-done:
					return
				case m := <-s.C:
					c.add(m)
				}
			}
		}()
	}
	t.Cleanup(func() {
		close(done)
		wg.Wait()
	})
	return c
}

func (c *collector) add(m mqtttest.Message) {
	var p struct {
		Seq      uint64
		Replayed bool
	}
	if json.Unmarshal(m.Payload, &p) != nil || p.Seq == 0 {
		return
	}
	c.mu.Lock()
	if _, ok := c.first[p.Seq]; ok {
		c.copies++
	} else {
		a := arrival{seq: p.Seq, topic: m.Topic, replayed: p.Replayed, at: time.Now()}
		c.first[p.Seq] = a
		c.arrived = append(c.arrived, a)
	}
	c.mu.Unlock()
	select {
	case c.changed <- struct{}{}:
	default:
	}
}

// maxSeq is the largest sequence number arrived.
func (c *collector) maxSeq() uint64 {
	c.mu.Lock()
	defer c.mu.Unlock()
	var m uint64
	for s := range c.first {
		m = max(m, s)
	}
	return m
}

// waitFor waits until cond holds over the first arrivals, failing after
// wait with what describe says.
func (c *collector) waitFor(t *testing.T, what string, cond func(first map[uint64]arrival) bool) {
	t.Helper()
	deadline := time.NewTimer(wait)
	defer deadline.Stop()
	for {
		c.mu.Lock()
		ok := cond(c.first)
		c.mu.Unlock()
		if ok {
			return
		}
		select {
		case <-c.changed:
		case <-deadline.C:
			t.Fatalf("%s: not within %v", what, wait)
		}
	}
}

// waitAll waits until every sequence number from 1 to last has arrived.
func (c *collector) waitAll(t *testing.T, last uint64) {
	t.Helper()
	deadline := time.NewTimer(wait)
	defer deadline.Stop()
	for {
		c.mu.Lock()
		var missing []uint64
		for s := uint64(1); s <= last; s++ {
			if _, ok := c.first[s]; !ok {
				missing = append(missing, s)
			}
		}
		c.mu.Unlock()
		if len(missing) == 0 {
			return
		}
		select {
		case <-c.changed:
		case <-deadline.C:
			t.Fatalf("%d of %d sequence numbers missing after %v, first %v", len(missing), last, wait, missing[:min(20, len(missing))])
		}
	}
}

// checkOrder checks, per reading topic, that first arrivals come in
// sequence order within the live part and within the replayed part (the
// backlog drains beside live readings, so the two interleave).
func (c *collector) checkOrder(t *testing.T) {
	t.Helper()
	c.mu.Lock()
	defer c.mu.Unlock()
	type key struct {
		topic    string
		replayed bool
	}
	last := make(map[key]uint64)
	for _, a := range c.arrived {
		if a.topic == tp.Events() {
			continue // events carry no replayed flag: live and backlog events interleave
		}
		k := key{a.topic, a.replayed}
		if a.seq < last[k] {
			t.Errorf("%s replayed=%v: seq %d arrived after %d", a.topic, a.replayed, a.seq, last[k])
		}
		last[k] = a.seq
	}
}

// seqSet is a set of sequence numbers, safe for concurrent use.
type seqSet struct {
	mu sync.Mutex
	m  map[uint64]bool
}

func (s *seqSet) add(seq uint64) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.m == nil {
		s.m = make(map[uint64]bool)
	}
	s.m[seq] = true
}

func (s *seqSet) all() []uint64 {
	s.mu.Lock()
	defer s.mu.Unlock()
	var out []uint64
	for k := range s.m {
		out = append(out, k)
	}
	return out
}

// seqOf reads the sequence number of a payload.
func seqOf(payload []byte) uint64 {
	var p struct{ Seq uint64 }
	_ = json.Unmarshal(payload, &p)
	return p.Seq
}

// producer appends to an outbox at a steady rate, like a gateway's
// pollers: readings of two heads, and an event every eventEvery entries.
type producer struct {
	n    atomic.Int64
	done chan struct{}
}

func startProducer(t *testing.T, ob *mqtt.Outbox, perSecond, total, eventEvery int) *producer {
	pr := &producer{done: make(chan struct{})}
	stop := make(chan struct{})
	go func() {
		defer close(pr.done)
		tick := time.NewTicker(time.Second / time.Duration(perSecond))
		defer tick.Stop()
		r := mqtt.Reading{Gateway: tp.Gateway, Unit: "degC", Quality: "good", Flags: []string{}}
		for i := 1; i <= total; i++ {
			select {
			case <-stop:
				return
			case <-tick.C:
			}
			var err error
			if i%eventEvery == 0 {
				_, err = ob.Append(mqtt.KindEvent, tp.Events(), false, func(seq uint64) []byte {
					return fmt.Appendf(nil, `{"type":"alarm","gateway":%q,"seq":%d}`, tp.Gateway, seq)
				})
			} else {
				r.Head = fmt.Sprintf("h%d", i%2+1)
				_, err = ob.Append(mqtt.KindReading, tp.Reading(r.Head), false, func(seq uint64) []byte {
					r.Seq, r.Time = seq, time.Now()
					return r.AppendJSON(nil)
				})
			}
			if err != nil {
				t.Errorf("append %d: %v", i, err)
				return
			}
			pr.n.Store(int64(i))
		}
	}()
	t.Cleanup(func() {
		close(stop)
		<-pr.done
	})
	return pr
}

// waitAppended waits until n entries have been appended.
func (pr *producer) waitAppended(t *testing.T, n int) {
	t.Helper()
	eventually(t, fmt.Sprintf("%d appended", n), func() bool { return pr.n.Load() >= int64(n) })
}

func (pr *producer) finish(t *testing.T) {
	t.Helper()
	select {
	case <-pr.done:
	case <-time.After(wait):
		t.Fatalf("producer not done within %v", wait)
	}
}

// cutAndKill stops the publisher's link through proxy and holds it, waits
// until the publisher has given that connection up, then until the
// subscribers hold everything the publisher had acknowledged, and then
// kills the broker with SIGKILL.
//
// This is how a broker's loss is told apart from the publisher's. A
// broker killed this way loses what it held in memory: messages it had
// acknowledged but not yet forwarded would be lost by the broker, after
// the publisher rightly deleted them on their PUBACK. With the link cut
// first, no PUBACK can come any more, so the set of acknowledged entries
// is final before the kill; once the subscribers hold all of them, the
// broker holds nothing acknowledged that they lack. Whatever else it held
// was never acknowledged, is still in the outbox and is sent again. So any
// sequence number missing at the end is the publisher's loss.
func cutAndKill(t *testing.T, p *mqtt.Publisher, proxy *mqtttest.Proxy, broker *mqtttest.Broker, c *collector, acked *seqSet) {
	t.Helper()
	proxy.Stall()
	proxy.Cut()
	eventually(t, "link given up", func() bool { return !p.Stats().Connected })
	final := acked.all()
	c.waitFor(t, "every acknowledged entry at the subscribers", func(first map[uint64]arrival) bool {
		for _, s := range final {
			if _, ok := first[s]; !ok {
				return false
			}
		}
		return true
	})
	broker.Stop()
}

// A steady stream of 200 entries a second for about eight seconds while
// the link is reset twice, stalled for a second, cut for a second and a
// half, and the broker is killed and restarted: a subscriber ends with
// every sequence number, live and replayed readings each in order per
// topic, and the outbox ends empty.
func TestOutboxStreamThroughFaults(t *testing.T) {
	broker := mqtttest.Start(t)
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/#")
	c := collectSeqs(t, sub)
	proxy := mqtttest.NewProxy(t, broker.Addr())
	ob := openOutbox(t, t.TempDir())
	o := testOptions(t, proxy.URL())
	o.Outbox = ob
	var acked seqSet
	o.OnAck = func(m mqtt.Message) { acked.add(seqOf(m.Payload)) }
	p := newPublisher(t, o)
	stop := run(t, p)
	waitConnected(t, p)

	const total = 1600
	pr := startProducer(t, ob, 200, total, 25)
	pr.waitAppended(t, 200)
	proxy.Cut() // reset; the publisher reconnects at once
	pr.waitAppended(t, 300)
	proxy.Cut()
	pr.waitAppended(t, 450)
	proxy.Stall() // a second without a byte moving
	pr.waitAppended(t, 650)
	proxy.Resume()
	pr.waitAppended(t, 800)
	proxy.Stall() // an outage of a second and a half
	proxy.Cut()
	pr.waitAppended(t, 1100)
	proxy.Resume()
	pr.waitAppended(t, 1250)
	cutAndKill(t, p, proxy, broker, c, &acked)
	pr.waitAppended(t, 1350)
	broker.Start()
	sub.WaitSubscriptions(2, wait)
	proxy.Resume()
	pr.finish(t)

	c.waitAll(t, total)
	c.checkOrder(t)
	eventually(t, "outbox empty", func() bool { return ob.Stats().Depth == 0 })
	st := p.Stats()
	c.mu.Lock()
	replayed := 0
	for _, a := range c.first {
		if a.replayed {
			replayed++
		}
	}
	t.Logf("publisher %+v; %d copies beyond the first; %d first arrivals replayed; outbox %+v", st, c.copies, replayed, ob.Stats())
	c.mu.Unlock()
	if st.Connects < 5 || replayed == 0 {
		t.Errorf("want at least 5 connections and replayed readings: %+v, %d replayed", st, replayed)
	}
	if err := stop(); err != nil {
		t.Fatal(err)
	}
}

// Two brokers, the first killed: the publisher goes on with the second,
// and the subscribers of both together hold every sequence number.
func TestOutboxFailover(t *testing.T) {
	first, second := mqtttest.Start(t), mqtttest.Start(t)
	subFirst := mqtttest.Subscribe(t, first.URL(), "glowgate/gw1/#")
	subSecond := mqtttest.Subscribe(t, second.URL(), "glowgate/gw1/#")
	c := collectSeqs(t, subFirst, subSecond)
	proxy := mqtttest.NewProxy(t, first.Addr())
	ob := openOutbox(t, t.TempDir())
	o := testOptions(t, proxy.URL(), second.URL())
	o.Outbox = ob
	var acked seqSet
	o.OnAck = func(m mqtt.Message) { acked.add(seqOf(m.Payload)) }
	p := newPublisher(t, o)
	stop := run(t, p)
	waitConnected(t, p)
	if b := p.Stats().Broker; b != proxy.URL() {
		t.Fatalf("connected to %s, want the first broker %s", b, proxy.URL())
	}

	const total = 600
	pr := startProducer(t, ob, 200, total, 20)
	pr.waitAppended(t, 250)
	cutAndKill(t, p, proxy, first, c, &acked)
	proxy.Resume() // the relay now finds no broker behind it
	eventually(t, "failover", func() bool { return p.Stats().Broker == second.URL() })
	pr.finish(t)
	c.waitAll(t, total)
	c.checkOrder(t)
	eventually(t, "outbox empty", func() bool { return ob.Stats().Depth == 0 })
	t.Logf("publisher %+v", p.Stats())
	if err := stop(); err != nil {
		t.Fatal(err)
	}
}

// A backlog of 200,000 readings (appended while no broker was reachable)
// does not hold back live readings: after the connection, live readings
// reach a subscriber within a second of their append while the backlog
// is still draining, and backlog readings arrive marked "replayed":true,
// in order.
func TestOutboxBacklogDoesNotDelayLive(t *testing.T) {
	const backlog = 200000
	broker := mqtttest.Start(t)
	broker.Stop()
	ob := openOutbox(t, t.TempDir())
	start := time.Now()
	appendReadings(t, ob, tp.Reading("h1"), mqtt.Reading{Gateway: tp.Gateway, Head: "h1", Unit: "degC", Quality: "good"}, backlog)
	t.Logf("backlog of %d appended in %v", backlog, time.Since(start))

	broker.Start()
	liveSub := mqtttest.Subscribe(t, broker.URL(), tp.Reading("h2"))
	backSub := mqtttest.Subscribe(t, broker.URL(), tp.Reading("h1"))
	o := testOptions(t, broker.URL())
	o.Outbox = ob
	p := newPublisher(t, o)
	stop := run(t, p)
	waitConnected(t, p)
	connected := time.Now()

	// Live readings of head h2, 100 a second, for half a second, read as
	// they arrive. Latency runs from the reading's time (its append,
	// truncated to the millisecond) to its arrival.
	const live = 50
	go func() {
		tick := time.NewTicker(10 * time.Millisecond)
		defer tick.Stop()
		r := mqtt.Reading{Gateway: tp.Gateway, Head: "h2", Unit: "degC", Quality: "good"}
		for range live {
			<-tick.C
			if _, err := ob.Append(mqtt.KindReading, tp.Reading("h2"), false, func(seq uint64) []byte {
				r.Seq, r.Time = seq, time.Now()
				return r.AppendJSON(nil)
			}); err != nil {
				t.Error(err)
				return
			}
		}
	}()
	var worst time.Duration
	var firstLive time.Time
	var prevLive uint64
	for range live {
		m, ok := liveSub.Next(wait)
		if !ok {
			t.Fatalf("live readings missing: %+v", p.Stats())
		}
		now := time.Now()
		var got struct {
			Seq      uint64
			Time     time.Time
			Replayed bool
		}
		if err := json.Unmarshal(m.Payload, &got); err != nil || got.Replayed || got.Seq <= prevLive {
			t.Fatalf("live reading after %d: %s (%v)", prevLive, m.Payload, err)
		}
		prevLive = got.Seq
		if firstLive.IsZero() {
			firstLive = now
		}
		worst = max(worst, now.Sub(got.Time))
	}
	drained := p.Stats().Replayed
	t.Logf("first live reading %v after the connection; worst live latency %v; %d of %d backlog readings acknowledged by then",
		firstLive.Sub(connected), worst, drained, backlog)
	if worst > time.Second || firstLive.Sub(connected) > time.Second {
		t.Errorf("live readings late: first %v after the connection, worst %v", firstLive.Sub(connected), worst)
	}
	if drained >= backlog {
		t.Errorf("the backlog had drained before the live readings were checked: the test proves nothing")
	}
	// The head of the backlog, as it arrives: replayed, in order.
	var prev uint64
	for i := range 1000 {
		m, ok := backSub.Next(wait)
		if !ok {
			t.Fatalf("backlog reading %d missing", i)
		}
		var got struct {
			Seq      uint64
			Replayed *bool
		}
		if err := json.Unmarshal(m.Payload, &got); err != nil || got.Replayed == nil || !*got.Replayed || got.Seq <= prev {
			t.Fatalf("backlog reading after %d: %s (%v)", prev, m.Payload, err)
		}
		prev = got.Seq
	}
	if err := stop(); err != nil {
		t.Fatal(err)
	}
	if st := ob.Stats(); st.Depth == 0 || st.Delivered == 0 {
		t.Errorf("outbox after a partial drain: %+v", st)
	}
}

// An alarm event or state does not wait for its commit: it is sent at
// once beside its durable copy (its number was reserved by an earlier
// commit), while a reading waits for its commit. Each arrives once, and
// both are deleted on their PUBACKs once committed.
func TestOutboxEventsGoBeforeTheirCommit(t *testing.T) {
	broker := mqtttest.Start(t)
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/#")
	c := collectSeqs(t, sub)
	ob := openOutbox(t, t.TempDir())
	o := testOptions(t, broker.URL())
	o.Outbox = ob
	p := newPublisher(t, o)
	stop := run(t, p)
	defer stop()
	appendOne := func(kind mqtt.EntryKind, topic string) uint64 {
		t.Helper()
		seq, err := ob.Append(kind, topic, kind == mqtt.KindState, func(seq uint64) []byte {
			return fmt.Appendf(nil, `{"seq":%d}`, seq)
		})
		if err != nil {
			t.Fatal(err)
		}
		return seq
	}
	first := appendOne(mqtt.KindReading, tp.Reading("h1")) // its commit reserves numbers ahead
	c.waitFor(t, "the first reading", func(m map[uint64]arrival) bool { _, ok := m[first]; return ok })

	release := mqtt.HoldCommits(t, ob)
	reading := appendOne(mqtt.KindReading, tp.Reading("h1"))
	event := appendOne(mqtt.KindEvent, tp.Events())
	state := appendOne(mqtt.KindState, tp.Alarm("h1", "high"))
	c.waitFor(t, "the event and the state while commits are held", func(m map[uint64]arrival) bool {
		_, e := m[event]
		_, s := m[state]
		return e && s
	})
	c.mu.Lock()
	_, early := c.first[reading]
	c.mu.Unlock()
	if early {
		t.Errorf("reading %d arrived before its commit", reading)
	}
	release()
	c.waitAll(t, state)
	waitDepth(t, ob, 0)
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.copies != 0 {
		t.Errorf("%d messages arrived more than once", c.copies)
	}
}

// waitDepth waits until ob holds n entries (acknowledged ones deleted).
func waitDepth(t *testing.T, ob *mqtt.Outbox, n int) {
	t.Helper()
	deadline := time.Now().Add(wait)
	for ob.Stats().Depth != n {
		if time.Now().After(deadline) {
			t.Fatalf("outbox depth %d, want %d within %v", ob.Stats().Depth, n, wait)
		}
		if err := ob.Sync(); err != nil {
			t.Fatal(err)
		}
	}
}

// A retained state that comes late, from the backlog, after a newer state
// of its topic went out live, is still delivered (its number must arrive)
// but not retained: the broker keeps the newer one.
func TestOutboxStaleStateNotRetained(t *testing.T) {
	broker := mqtttest.Start(t)
	ob := openOutbox(t, t.TempDir())
	topic := tp.Alarm("h1", "high")
	state := func(v string) {
		t.Helper()
		if _, err := ob.Append(mqtt.KindState, topic, true, func(seq uint64) []byte {
			return fmt.Appendf(nil, `{"seq":%d,"state":%q}`, seq, v)
		}); err != nil {
			t.Fatal(err)
		}
	}
	// Appended while no broker is reachable: the old state lies behind a
	// backlog of readings that takes a while to drain.
	appendReadings(t, ob, tp.Reading("h1"), sampleReading(), 20000)
	state("unacknowledged")
	o := testOptions(t, broker.URL())
	o.Outbox = ob
	p := newPublisher(t, o)
	stop := run(t, p)
	defer stop()
	waitConnected(t, p)
	state("normal") // live: overtakes the backlog
	waitDepth(t, ob, 0)

	m := mqtttest.Subscribe(t, broker.URL(), topic).WaitFor(topic, nil, wait)
	if !strings.Contains(string(m.Payload), `"state":"normal"`) || !m.Retained {
		t.Errorf("retained state %s (retained %v), want the newer one, normal", m.Payload, m.Retained)
	}
}

// With ReadingsAtMostOnce the outbox's readings go at QoS 0 and are done
// with once written; its events and states still go at QoS 1. The outbox
// empties either way.
func TestOutboxReadingsAtMostOnce(t *testing.T) {
	broker := mqtttest.Start(t)
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/#")
	ob := openOutbox(t, t.TempDir())
	o := testOptions(t, broker.URL())
	o.Outbox, o.ReadingsAtMostOnce = ob, true
	p := newPublisher(t, o)
	stop := run(t, p)
	defer stop()
	appendReadings(t, ob, tp.Reading("h1"), sampleReading(), 50)
	if _, err := ob.Append(mqtt.KindEvent, tp.Events(), false, func(seq uint64) []byte {
		return fmt.Appendf(nil, `{"type":"alarm","seq":%d}`, seq)
	}); err != nil {
		t.Fatal(err)
	}
	// The event goes out at once beside its durable copy, so it may come
	// before readings of the backlog.
	readings, events := 0, 0
	for readings < 50 || events < 1 {
		m, ok := sub.Next(wait)
		if !ok {
			t.Fatalf("%d readings of 50 and %d events of 1 arrived", readings, events)
		}
		switch m.Topic {
		case tp.Reading("h1"):
			readings++
			if m.QoS != 0 {
				t.Fatalf("reading at QoS %d, want 0", m.QoS)
			}
		case tp.Events():
			events++
			if m.QoS != 1 {
				t.Errorf("event at QoS %d, want 1", m.QoS)
			}
		}
	}
	waitDepth(t, ob, 0)
}
