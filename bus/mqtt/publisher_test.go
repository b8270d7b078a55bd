package mqtt_test

import (
	"context"
	"crypto/tls"
	"fmt"
	"log/slog"
	"net"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
)

const wait = 15 * time.Second // bound of every wait in these tests

var tp = mqtt.Topics{Root: "glowgate", Gateway: "gw1"}

// testOptions are publisher options for loopback tests: quick retries.
func testOptions(t testing.TB, brokers ...string) mqtt.Options {
	return mqtt.Options{
		Brokers:    brokers,
		ClientID:   "glowgate-" + strings.ReplaceAll(t.Name(), "/", "-"),
		StateTopic: tp.State(),
		// ConnectTimeout also bounds a publish caught by a breaking
		// connection, and so how long a stop may wait for it.
		ConnectTimeout: time.Second,
		BackoffMin:     20 * time.Millisecond,
		BackoffMax:     200 * time.Millisecond,
		FlushTimeout:   5 * time.Second,
		Logger:         slog.New(slog.NewTextHandler(tlog{t}, &slog.HandlerOptions{Level: slog.LevelDebug})),
	}
}

// tlog sends log lines to t.Log while the test runs.
type tlog struct{ t testing.TB }

func (w tlog) Write(p []byte) (int, error) {
	w.t.Log(strings.TrimRight(string(p), "\n"))
	return len(p), nil
}

// run starts p.Run and returns a stop function that cancels it, waits for
// it (failing after wait) and returns its error. Cleanup stops it too.
func run(t *testing.T, p *mqtt.Publisher) (stop func() error) {
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- p.Run(ctx) }()
	var once sync.Once
	var err error
	stop = func() error {
		once.Do(func() {
			cancel()
			select {
			case err = <-done:
			case <-time.After(wait):
				err = fmt.Errorf("Run did not return within %v of cancel", wait)
			}
		})
		return err
	}
	t.Cleanup(func() { _ = stop() })
	return stop
}

func newPublisher(t *testing.T, o mqtt.Options) *mqtt.Publisher {
	t.Helper()
	p, err := mqtt.NewPublisher(o)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

func waitConnected(t *testing.T, p *mqtt.Publisher) {
	t.Helper()
	select {
	case <-p.Connected():
	case <-time.After(wait):
		t.Fatalf("publisher not connected within %v: %+v", wait, p.Stats())
	}
}

// eventually polls cond on a ticker until it holds, failing after wait.
func eventually(t *testing.T, what string, cond func() bool) {
	t.Helper()
	deadline := time.NewTimer(wait)
	defer deadline.Stop()
	tick := time.NewTicker(5 * time.Millisecond)
	defer tick.Stop()
	for !cond() {
		select {
		case <-tick.C:
		case <-deadline.C:
			t.Fatalf("%s: not within %v", what, wait)
		}
	}
}

func seqMessage(seq int) mqtt.Message {
	return mqtt.Message{Topic: tp.Reading("h1"), Payload: []byte(strconv.Itoa(seq))}
}

func publishRange(t *testing.T, p *mqtt.Publisher, from, to int) {
	t.Helper()
	for i := from; i < to; i++ {
		if !p.Publish(seqMessage(i)) {
			t.Fatalf("Publish(%d) = false: %+v", i, p.Stats())
		}
	}
}

// collect reads readings from sub until every seq in [from, to) has come,
// and returns how many came twice or more. Readings must come in order
// except that a resend may start again from an earlier seq.
func collect(t *testing.T, sub *mqtttest.Subscriber, from, to int) (dups int) {
	t.Helper()
	seen := make(map[int]int)
	deadline := time.NewTimer(wait)
	defer deadline.Stop()
	for len(seen) < to-from {
		select {
		case m := <-sub.C:
			if m.Topic != tp.Reading("h1") {
				continue
			}
			seq, err := strconv.Atoi(string(m.Payload))
			if err != nil {
				t.Fatalf("payload %q: %v", m.Payload, err)
			}
			if seq < from || seq >= to {
				continue
			}
			seen[seq]++
			if seen[seq] > 1 {
				dups++
			}
		case <-deadline.C:
			var missing []int
			for i := from; i < to && len(missing) < 20; i++ {
				if seen[i] == 0 {
					missing = append(missing, i)
				}
			}
			t.Fatalf("%d of %d readings after %v; first missing %v", len(seen), to-from, wait, missing)
		}
	}
	return dups
}

// The normal life: Online, the OnConnect info, queued readings in order
// without loss or duplicates, and Offline, retained, on a clean stop after
// a flush of what was queued.
func TestPublisherInOrderWithStates(t *testing.T) {
	broker := mqtttest.Start(t)
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/#")
	o := testOptions(t, broker.URL())
	info := mqtt.Message{Topic: tp.Info("h1"), Payload: []byte(`{"wavelengths_um":[0.75,0.9]}`), Retain: true}
	o.OnConnect = func() []mqtt.Message { return []mqtt.Message{info} }
	p := newPublisher(t, o)

	const queuedFirst, total = 100, 3000
	publishRange(t, p, 0, queuedFirst) // before Run: must follow Online and info
	stop := run(t, p)
	waitConnected(t, p)
	publishRange(t, p, queuedFirst, total)
	// Stop at once: the flush must deliver the rest before Offline.
	if err := stop(); err != nil {
		t.Fatalf("Run: %v", err)
	}

	want := []string{"state online", "info " + string(info.Payload)}
	for i := 0; i < total; i++ {
		want = append(want, "reading "+strconv.Itoa(i))
	}
	want = append(want, "state offline")
	for i, w := range want {
		m, ok := sub.Next(wait)
		if !ok {
			t.Fatalf("message %d (%s): none within %v", i, w, wait)
		}
		got := m.Topic[strings.LastIndex(m.Topic, "/")+1:] + " " + string(m.Payload)
		if got != w {
			t.Fatalf("message %d: got %q, want %q", i, got, w)
		}
	}
	st := p.Stats()
	if st.Published != total || st.Queued != 0 || st.Dropped != 0 || st.Connected || st.Connects != 1 {
		t.Errorf("stats after stop: %+v", st)
	}
	// A newcomer finds the state and the info retained.
	late := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/#")
	got := map[string]mqtttest.Message{}
	for len(got) < 2 {
		m, ok := late.Next(wait)
		if !ok {
			t.Fatalf("retained messages: got %v", got)
		}
		got[m.Topic] = m
	}
	if m := got[tp.State()]; string(m.Payload) != "offline" || !m.Retained {
		t.Errorf("retained state = %q retained=%v, want offline", m.Payload, m.Retained)
	}
	if m := got[tp.Info("h1")]; string(m.Payload) != string(info.Payload) || !m.Retained {
		t.Errorf("retained info = %q retained=%v", m.Payload, m.Retained)
	}
}

// A broker absent when the publisher starts: Publish keeps queueing, and
// once a broker is reachable everything queued arrives. The first broker
// of the list never answers (connection refused); the second is a relay
// to a broker that is down, then up.
func TestPublisherBrokerAbsentAtStart(t *testing.T) {
	broker := mqtttest.Start(t)
	broker.Stop()
	proxy := mqtttest.NewProxy(t, broker.Addr())
	proxy.Stall() // the subscriber must be in place before anything flows
	refused := deadAddr(t)

	p := newPublisher(t, testOptions(t, "tcp://"+refused, proxy.URL()))
	stop := run(t, p)
	const total = 2000
	publishRange(t, p, 0, total)
	if st := p.Stats(); st.Connected || st.Queued != total {
		t.Fatalf("with no broker: %+v", st)
	}

	broker.Start()
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/#")
	proxy.Resume()
	if dups := collect(t, sub, 0, total); dups != 0 {
		t.Errorf("%d duplicates without any broken connection", dups)
	}
	eventually(t, "all acknowledged", func() bool { return p.Stats().Published == total })
	if err := stop(); err != nil {
		t.Fatal(err)
	}
}

// The broker dies while messages are in flight and comes back: every
// message arrives (duplicates allowed). The relay holds the messages sent
// after Stall, so they are in flight and unacknowledged when the broker
// is killed, and no acknowledged message can be lost inside the dying
// broker, which would be the broker's loss, not the publisher's.
func TestPublisherBrokerKilledMidStream(t *testing.T) {
	broker := mqtttest.Start(t)
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/#")
	proxy := mqtttest.NewProxy(t, broker.Addr())
	p := newPublisher(t, testOptions(t, proxy.URL()))
	stop := run(t, p)
	waitConnected(t, p)

	const before, total = 1000, 3000
	publishRange(t, p, 0, before)
	if dups := collect(t, sub, 0, before); dups != 0 {
		t.Errorf("%d duplicates before the kill", dups)
	}
	proxy.Stall()
	publishRange(t, p, before, total)
	eventually(t, "messages in flight", func() bool { return p.Stats().InFlight > 0 })
	t.Logf("killing the broker with %+v", p.Stats())

	broker.Stop()
	broker.Start()
	sub.WaitSubscriptions(2, wait)
	proxy.Resume()
	dups := collect(t, sub, before, total)
	t.Logf("duplicates after the restart: %d", dups)
	eventually(t, "all acknowledged", func() bool { return p.Stats().Queued == 0 })
	if st := p.Stats(); st.Connects < 2 || st.Published < total {
		t.Errorf("stats: %+v, want at least 2 connections and %d published", st, total)
	}
	if err := stop(); err != nil {
		t.Fatal(err)
	}
}

// The broker is killed with no relay while the queue drains: every
// message is still acknowledged in the end, by the restarted broker.
func TestPublisherBrokerKilledDirect(t *testing.T) {
	broker := mqtttest.Start(t)
	o := testOptions(t, broker.URL())
	const total = 20000
	var mu sync.Mutex
	acked := make(map[string]bool)
	all := make(chan struct{})
	o.OnAck = func(m mqtt.Message) {
		mu.Lock()
		defer mu.Unlock()
		if !acked[string(m.Payload)] {
			acked[string(m.Payload)] = true
			if len(acked) == total {
				close(all)
			}
		}
	}
	o.QueueSize = total
	p := newPublisher(t, o)
	stop := run(t, p)
	waitConnected(t, p)
	publishRange(t, p, 0, total)
	eventually(t, "a quarter acknowledged", func() bool { return p.Stats().Published >= total/4 })
	broker.Stop()
	st := p.Stats()
	t.Logf("broker killed with %+v", st)
	if st.Queued == 0 {
		t.Fatalf("queue drained before the kill: %+v", st)
	}
	broker.Start()
	select {
	case <-all:
	case <-time.After(wait):
		t.Fatalf("not all acknowledged: %+v", p.Stats())
	}
	if st := p.Stats(); st.Connects < 2 {
		t.Errorf("stats: %+v, want a reconnection", st)
	}
	if err := stop(); err != nil {
		t.Fatal(err)
	}
}

// A connection that vanishes without DISCONNECT makes the broker publish
// the Will: Offline, retained, on the state topic. Back online, the
// publisher says Online again.
func TestPublisherWill(t *testing.T) {
	broker := mqtttest.Start(t)
	sub := mqtttest.Subscribe(t, broker.URL(), tp.State())
	proxy := mqtttest.NewProxy(t, broker.Addr())
	p := newPublisher(t, testOptions(t, proxy.URL()))
	stop := run(t, p)
	isState := func(s string) func(mqtttest.Message) bool {
		return func(m mqtttest.Message) bool { return string(m.Payload) == s }
	}
	sub.WaitFor(tp.State(), isState("online"), wait)

	proxy.Stall() // keep the publisher from reconnecting
	proxy.Cut()
	sub.WaitFor(tp.State(), isState("offline"), wait)
	late := mqtttest.Subscribe(t, broker.URL(), tp.State())
	if m := late.WaitFor(tp.State(), nil, wait); string(m.Payload) != "offline" || !m.Retained {
		t.Errorf("state for a newcomer: %q retained=%v, want offline retained", m.Payload, m.Retained)
	}

	proxy.Resume()
	sub.WaitFor(tp.State(), isState("online"), wait)
	eventually(t, "second connection", func() bool { return p.Stats().Connects >= 2 })
	if err := stop(); err != nil {
		t.Fatal(err)
	}
	sub.WaitFor(tp.State(), isState("offline"), wait)
}

// A full queue drops the oldest non-retained message not in flight and
// says so; when only retained messages are left, the new one is dropped.
// What stays is delivered in order.
func TestPublisherQueueFull(t *testing.T) {
	broker := mqtttest.Start(t)
	o := testOptions(t, broker.URL())
	o.QueueSize, o.Window = 4, 2
	o.StateTopic = ""
	p := newPublisher(t, o)
	msg := func(name string, retain bool) mqtt.Message {
		return mqtt.Message{Topic: "glowgate/gw1/q/" + name, Payload: []byte(name), Retain: retain}
	}
	steps := []struct {
		m    mqtt.Message
		want bool
	}{
		{msg("alarm1", true), true},
		{msg("r1", false), true},
		{msg("r2", false), true},
		{msg("r3", false), true},
		{msg("r4", false), false},                    // drops r1
		{msg("alarm2", true), false},                 // drops r2
		{msg("alarm3", true), false},                 // drops r3
		{msg("alarm4", true), false},                 // drops r4
		{msg("r5", false), false},                    // nothing to drop: r5 itself goes
		{msg("alarm5", true), false},                 // the same
		{mqtt.Message{Topic: "glowgate/+/x"}, false}, // refused, not dropped
		{mqtt.Message{Topic: ""}, false},             // refused
	}
	for i, s := range steps {
		if got := p.Publish(s.m); got != s.want {
			t.Fatalf("step %d: Publish(%s) = %v, want %v", i, s.m.Topic, got, s.want)
		}
	}
	st := p.Stats()
	if st.Queued != 4 || st.Dropped != 6 || st.Rejected != 2 || st.Published != 0 {
		t.Fatalf("stats: %+v, want 4 queued, 6 dropped, 2 rejected", st)
	}
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/q/#")
	stop := run(t, p)
	for _, want := range []string{"alarm1", "alarm2", "alarm3", "alarm4"} {
		m, ok := sub.Next(wait)
		if !ok || string(m.Payload) != want {
			t.Fatalf("got %q (%v), want %q", m.Payload, ok, want)
		}
	}
	if err := stop(); err != nil {
		t.Fatal(err)
	}
	if st := p.Stats(); st.Published != 4 || st.Queued != 0 {
		t.Errorf("stats after delivery: %+v", st)
	}
}

// With no broker at all, a stop gives up after FlushTimeout, keeps the
// queue, and returns nil.
func TestPublisherStopWithoutBroker(t *testing.T) {
	o := testOptions(t, "tcp://"+deadAddr(t))
	o.FlushTimeout = 300 * time.Millisecond
	p := newPublisher(t, o)
	publishRange(t, p, 0, 10)
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- p.Run(ctx) }()
	cancel()
	select {
	case err := <-done:
		if err != nil {
			t.Fatalf("Run = %v, want nil", err)
		}
	case <-time.After(wait):
		t.Fatalf("Run did not return within %v", wait)
	}
	if st := p.Stats(); st.Queued != 10 || st.Published != 0 || st.Connected {
		t.Errorf("stats: %+v", st)
	}
	if st := p.Stats(); st.InFlight != 0 {
		t.Errorf("in flight after Run returned: %+v", st)
	}
}

// Run refuses to run twice at once; once it has returned, a new Run
// delivers what the last one left queued.
func TestPublisherRunAgain(t *testing.T) {
	broker := mqtttest.Start(t)
	broker.Stop()
	o := testOptions(t, broker.URL())
	o.FlushTimeout = 100 * time.Millisecond
	p := newPublisher(t, o)
	publishRange(t, p, 0, 100)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	results := make(chan error, 2)
	for range 2 {
		go func() { results <- p.Run(ctx) }()
	}
	// The one that lost the race returns at once, the other on cancel.
	for i, want := range []bool{true, false} {
		select {
		case err := <-results:
			if (err != nil) != want {
				t.Fatalf("Run result %d: %v, want error %v", i, err, want)
			}
		case <-time.After(wait):
			t.Fatalf("Run result %d: none within %v", i, wait)
		}
		cancel()
	}
	if st := p.Stats(); st.Queued != 100 {
		t.Fatalf("after the first Run: %+v", st)
	}
	broker.Start()
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/gw1/#")
	stop := run(t, p)
	collect(t, sub, 0, 100)
	if err := stop(); err != nil {
		t.Fatal(err)
	}
}

// The embedded broker binds a free port and carries messages like any
// other.
func TestEmbeddedBroker(t *testing.T) {
	eb, err := mqtt.StartEmbeddedBroker("127.0.0.1:0", nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = eb.Close() })
	if _, port, err := net.SplitHostPort(eb.Addr()); err != nil || port == "0" {
		t.Fatalf("Addr() = %q", eb.Addr())
	}
	sub := mqtttest.Subscribe(t, eb.URL(), "glowgate/gw1/#")
	p := newPublisher(t, testOptions(t, eb.URL()))
	stop := run(t, p)
	publishRange(t, p, 0, 500)
	if dups := collect(t, sub, 0, 500); dups != 0 {
		t.Errorf("%d duplicates", dups)
	}
	if err := stop(); err != nil {
		t.Fatal(err)
	}
	sub.WaitFor(tp.State(), func(m mqtttest.Message) bool { return string(m.Payload) == "offline" }, wait)
	if err := eb.Close(); err != nil {
		t.Fatal(err)
	}
	if err := eb.Close(); err != nil {
		t.Fatalf("second Close: %v", err)
	}
	if _, err := mqtt.StartEmbeddedBroker(eb.Addr()+"x", nil); err == nil {
		t.Error("StartEmbeddedBroker on a bad address: nil error")
	}
}

func TestNewPublisherOptions(t *testing.T) {
	ok := mqtt.Options{Brokers: []string{"tcp://127.0.0.1:1883"}}
	for _, c := range []struct {
		name    string
		change  func(*mqtt.Options)
		wantErr string
	}{
		{"defaults", func(*mqtt.Options) {}, ""},
		{"no broker", func(o *mqtt.Options) { o.Brokers = nil }, "no broker"},
		{"bad scheme", func(o *mqtt.Options) { o.Brokers = []string{"http://x:1"} }, `scheme "http"`},
		{"no host", func(o *mqtt.Options) { o.Brokers = []string{"tcp://"} }, "no host"},
		{"second broker bad", func(o *mqtt.Options) { o.Brokers = append(o.Brokers, "127.0.0.1:1883") }, "broker 2"},
		{"negative timeout", func(o *mqtt.Options) { o.FlushTimeout = -time.Second }, "flush timeout -1s: negative"},
		{"short keep-alive", func(o *mqtt.Options) { o.KeepAlive = 500 * time.Millisecond }, "keep-alive"},
		{"backoff order", func(o *mqtt.Options) { o.BackoffMin, o.BackoffMax = time.Minute, time.Second }, "minimum backoff"},
		{"negative queue", func(o *mqtt.Options) { o.QueueSize = -1 }, "queue size -1"},
		{"window above queue", func(o *mqtt.Options) { o.QueueSize, o.Window = 10, 11 }, "window 11 larger than queue size 10"},
		{"small queue, default window", func(o *mqtt.Options) { o.QueueSize = 10 }, ""},
		{"state wildcard", func(o *mqtt.Options) { o.StateTopic = "a/#" }, "state topic"},
		{"command topic without handler", func(o *mqtt.Options) { o.CommandTopic = "a/cmd" }, "without OnCommand"},
		{"command wildcard", func(o *mqtt.Options) { o.CommandTopic, o.OnCommand = "a/+", func([]byte) {} }, "command topic"},
		{"command topic", func(o *mqtt.Options) { o.CommandTopic, o.OnCommand = "a/cmd", func([]byte) {} }, ""},
		{"TLS over tcp", func(o *mqtt.Options) { o.TLS = &tls.Config{} }, "TLS is configured but scheme \"tcp\" is plaintext"},
		{"TLS over ssl", func(o *mqtt.Options) { o.TLS, o.Brokers = &tls.Config{}, []string{"ssl://h:8883"} }, ""},
		{"password in a bad URL", func(o *mqtt.Options) { o.Brokers = []string{"tcp://u:secret@h:x"} }, "broker 1: not a URL"},
	} {
		o := ok
		o.Brokers = append([]string(nil), ok.Brokers...)
		c.change(&o)
		_, err := mqtt.NewPublisher(o)
		switch {
		case c.wantErr == "" && err != nil:
			t.Errorf("%s: %v", c.name, err)
		case c.wantErr != "" && (err == nil || !strings.Contains(err.Error(), c.wantErr)):
			t.Errorf("%s: error %v, want one with %q", c.name, err, c.wantErr)
		case err != nil && strings.Contains(err.Error(), "secret"):
			t.Errorf("%s: error %v shows the password", c.name, err)
		}
	}
}

// deadAddr returns a loopback address where nothing listens.
func deadAddr(t *testing.T) string {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	addr := l.Addr().String()
	if err := l.Close(); err != nil {
		t.Fatal(err)
	}
	return addr
}
