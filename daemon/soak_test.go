package daemon

import (
	"cmp"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"log/slog"
	"math/rand/v2"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"

	"glowgate/alarms"
	"glowgate/bus/modbus/modbustest"
	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
	"glowgate/daemon/config"
)

var (
	soak    = flag.Bool("soak", false, "run TestSoak for -soak-for instead of a short smoke run")
	soakFor = flag.Duration("soak-for", 10*time.Minute, "how long TestSoak runs with -soak")
)

// The heads' bad_quality alarm, and what it takes to raise it.
const (
	soakOnDelay = 500 * time.Millisecond
	// soakFailing is how long a head must fail for its bad_quality alarm
	// to be sure to activate (a configuration reload carries the alarm
	// over, its on-delay under way). A failing
	// poll is retried after the head's period, then at doubling intervals
	// (modbus.Line: 100, 200, 400 ms), so failed polls start at f, f+0.1,
	// f+0.3 and f+0.7 s: the first at least the on-delay after the first
	// failed one is 0.7 s later. The first failed poll starts within a
	// period (0.1 s) of the failing; the other 0.7 s allow for the line
	// being held up by other heads' timeouts and for a slow machine.
	soakFailing = 1500 * time.Millisecond
	// soakSlack widens a window of failing when it is compared with the
	// times of alarm events: those are acquisition times (when the poll's
	// request went out, to the millisecond), and the simulator's
	// scenario clock starts a moment after the test reads its own.
	soakSlack = 300 * time.Millisecond
	// soakTick paces the random faults.
	soakTick = 700 * time.Millisecond
	// soakSteady is how many good readings in a row every head must give
	// once the faults have stopped before the alarms are checked.
	soakSteady = 20
)

// TestSoak runs 64 heads at 10 Hz through a durable outbox to a real
// Mosquitto while faults come at random: the link to the broker cut or
// stalled, the broker killed and restarted, heads silent or answering
// exceptions on a Modbus TCP server (half of its heads read one request
// at a time, half in batches of 16 in flight), heads silent or answering with CRC
// errors on an RS-485 line (8 of the 64, served by the simulator on a
// pseudo-terminal, faults scripted from a fixed seed), the configuration
// reloaded. Then the faults stop and every head must read good again.
// Afterwards:
//
//   - every sequence number from 1 to the last numbered once the heads
//     read good again has reached the subscriber, and no gap event (of
//     readings dropped) was sent;
//   - the goroutines are back to their number before, and the heap stayed
//     bounded;
//   - each alarm's events on <root>/<gateway>/events, in sequence order,
//     form one chain from normal (each event leaves from the state the
//     previous one reached, activations and clearings alternating), and
//     end where the daemon's alarm ends, which is not active: normal if it
//     never activated, else rtn_unacknowledged (no one acknowledges);
//   - each alarm's latest state message, and the state the broker
//     retains for it, agree with the daemon's;
//   - a head that failed for soakFailing had its alarm active meanwhile,
//     reloads or not, and one whose CRC errors the line's
//     retry repaired did not activate it.
//
// A broker restart holds the daemon's link (the proxy stalls it), waits
// until the subscriber has everything the broker acknowledged (a probe
// published directly to the broker comes back after all of it: Mosquitto
// queues a message to its subscribers before it sends the PUBACK, and
// delivers a subscriber's messages in order), kills the broker, drops what
// the proxy held (PUBACKs the daemon then never sees, so it sends those
// entries again), restarts it, waits until the subscriber has subscribed
// again, and only then lets the daemon reconnect. A broker that dies
// holding messages it has acknowledged loses them whatever its
// publishers do; the test keeps that out, so that a sequence number
// missing is the daemon's fault. The restarted broker has no retained
// messages: the daemon sends its heads' info and its alarms' retained
// states again on each connection, and the broker must end up retaining
// each alarm's newest state.
//
//	go test -count=1 -timeout 15m -run TestSoak ./daemon/ -soak   # 10 minutes
//	go test -count=1 -run TestSoak ./daemon/ -soak -soak-for 60s
//
// Without -soak it runs for five seconds.
func TestSoak(t *testing.T) {
	length := 5 * time.Second
	if *soak {
		length = *soakFor
	}
	goroutines := runtime.NumGoroutine()
	broker := mqtttest.Start(t)
	proxy := mqtttest.NewProxy(t, broker.Addr())
	srv := modbustest.NewServer(t)
	dir := t.TempDir()
	line := newSoakLine(rand.New(rand.NewPCG(3, 4)), length, filepath.Join(dir, "rs485"))
	var hs strings.Builder
	for i := 1; i <= soakHeads; i++ {
		bus, unit, sim := "endpoint: ep", i, ""
		if i%2 == 0 {
			bus = "endpoint: batched"
		}
		if i > soakTCPHeads {
			bus, unit, sim = "line: rs485", i-soakTCPHeads, line.sim(soakHeadName(i))
		} else {
			setBlackbody(t, srv, uint8(i), 1400)
		}
		fmt.Fprintf(&hs, `
  - name: %s
    %s
    unit_id: %d
    period: 100ms
    range: {min: 700K, max: 2500K}
    channels:
      - {name: short, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
    alarms:
      - {name: blind, kind: bad_quality, on_delay: %v, priority: high}
%s`, soakHeadName(i), bus, unit, soakOnDelay, sim)
	}
	text := fmt.Sprintf(`
gateway: soak-gw
unit: K
mqtt: {brokers: [%s], connect_timeout: 1s}
state_dir: %s
http: {listen: ""}
endpoints:
  - {name: ep, address: %[3]s, timeout: 100ms, backoff_max: 1s}
  - {name: batched, address: %[3]s, timeout: 100ms, backoff_max: 1s, in_flight: 16}
lines: %[4]s
heads:%[5]s`, proxy.URL(), filepath.Join(dir, "state"), srv.Addr(), line.config(), hs.String())
	path := filepath.Join(dir, "soak.yaml")
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Load(path)
	if err != nil {
		t.Fatal(err)
	}
	topics := mqttTopics(cfg)
	// Readings, alarm events and alarm states all carry the gateway's
	// sequence number.
	sub := mqtttest.Subscribe(t, broker.URL(), cfg.MQTT.Root+"/"+cfg.Gateway+"/#")
	rec := newSoakRecord(topics)

	// The simulator serves the line only; the endpoint is srv's.
	lineOnly := *cfg
	lineOnly.Endpoints = nil
	simulator, err := NewSimulator(&lineOnly, nil)
	if err != nil {
		t.Fatal(err)
	}
	lineStart := time.Now() // the line's scenario time zero, a moment early
	if err := simulator.Start(t.Context()); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { simulator.Close() })
	var windows []soakWindow
	for _, f := range line.faults {
		from := lineStart.Add(f.at)
		windows = append(windows, soakWindow{head: f.head, what: f.String() + " on the line", from: from, to: from.Add(f.dur), failing: f.failing()})
	}

	logs := &soakLog{}
	t.Cleanup(func() {
		if t.Failed() {
			t.Logf("the daemon's last log lines:\n%s", logs.String())
		}
	})
	reload := make(chan os.Signal, 1)
	d, err := New(Options{
		Config: cfg, Load: func() (*config.Config, error) { return config.Load(path) }, Reload: reload,
		Logger: slog.New(soakLogHandler{log: logs}),
	})
	if err != nil {
		t.Fatal(err)
	}
	runCtx, stop := context.WithCancel(t.Context())
	defer stop()
	done := make(chan error, 1)
	go func() { done <- d.Run(runCtx) }()

	rng := rand.New(rand.NewPCG(1, 2))
	faults := map[string]int{}
	// Heads on the endpoint made silent until a later tick.
	type silence struct {
		unit   uint8
		until  time.Time
		window int // index into windows
	}
	var silent []silence
	endSilences := func(now time.Time, all bool) {
		kept := silent[:0]
		for _, s := range silent {
			if !all && now.Before(s.until) {
				kept = append(kept, s)
				continue
			}
			windows[s.window].to = time.Now()
			srv.SetFault(s.unit, modbustest.Fault{})
		}
		silent = kept
	}
	pick := func() uint8 {
		for {
			u := uint8(1 + rng.IntN(soakTCPHeads))
			if !slices.ContainsFunc(silent, func(s silence) bool { return s.unit == u }) {
				return u
			}
		}
	}
	var peakHeap uint64
	end := time.Now().Add(length)
	next := time.NewTicker(soakTick)
	defer next.Stop()
	stalled := false
	for time.Now().Before(end) {
		select {
		case m := <-sub.C:
			rec.take(m)
		case now := <-next.C:
			if stalled {
				proxy.Resume()
				stalled = false
			}
			endSilences(now, false)
			switch k := rng.IntN(7); k {
			case 0:
				proxy.Cut()
				faults["link cut"]++
			case 1:
				proxy.Stall()
				stalled = true
				faults["link stalled"]++
			case 2:
				srv.SetFault(pick(), modbustest.Fault{Kind: modbustest.Silent, Times: 3})
				faults["head silent"]++
			case 3:
				srv.SetFault(pick(), modbustest.Fault{Kind: modbustest.Exception, Code: 0x04, Times: 5})
				faults["head exception"]++
			case 4:
				select {
				case reload <- os.Interrupt:
				default:
				}
				faults["configuration reload"]++
			case 5:
				rec.restartBroker(t, broker, proxy, sub)
				faults["broker restart"]++
			case 6:
				u := pick()
				srv.SetFault(u, modbustest.Fault{Kind: modbustest.Silent})
				windows = append(windows, soakWindow{head: soakHeadName(int(u)), what: "silent on the endpoint", from: time.Now(), failing: true})
				// Until the third tick from now.
				silent = append(silent, silence{unit: u, until: now.Add(3*soakTick - soakTick/2), window: len(windows) - 1})
				faults["head silent 2 s"]++
			}
			var ms runtime.MemStats
			runtime.ReadMemStats(&ms)
			peakHeap = max(peakHeap, ms.HeapInuse)
		}
	}
	if stalled {
		proxy.Resume()
	}
	endSilences(time.Now(), true)
	for u := 1; u <= soakTCPHeads; u++ {
		srv.SetFault(uint8(u), modbustest.Fault{})
	}
	// The line's faults ended a second before now. Wait until every head
	// reads good again, steadily, and the daemon's alarms are all clear.
	rec.quiet = time.Now()
	settled := time.After(30 * time.Second)
	check := time.NewTicker(100 * time.Millisecond)
	defer check.Stop()
	for len(rec.unsteady()) > 0 || len(soakActive(d)) > 0 {
		select {
		case m := <-sub.C:
			rec.take(m)
		case <-check.C:
		case <-settled:
			t.Fatalf("30 s after the faults stopped: heads without %d good readings in a row since (head:count) %v; alarms active in the daemon %v; publisher %+v; outbox %+v",
				soakSteady, rec.unsteady(), soakActive(d), d.PublisherStats(), d.outbox.Stats())
		}
	}
	quiet := soakStatuses(d)

	// Everything numbered by now must arrive while the daemon runs on.
	target := d.outbox.Stats().LastSeq
	deadline := time.After(60 * time.Second)
	for rec.newest < target {
		select {
		case m := <-sub.C:
			rec.take(m)
		case <-deadline:
			t.Fatalf("seq %d not received within a minute (newest %d); publisher %+v; outbox %+v", target, rec.newest, d.PublisherStats(), d.outbox.Stats())
		}
	}
	stop()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	for {
		m, ok := sub.Next(time.Second)
		if !ok {
			break
		}
		rec.take(m)
	}
	if err := simulator.Close(); err != nil {
		t.Errorf("closing the simulated line: %v", err)
	}

	// Up to target every number must be there; readings after it may
	// still have been in flight when the daemon stopped.
	var missing []uint64
	for s := uint64(1); s <= target; s++ {
		if !rec.seqs[s] {
			missing = append(missing, s)
		}
	}
	t.Logf("soak %v: %d messages numbered (newest seq %d), faults %v, line faults %d, peak heap %.1f MB",
		length, len(rec.seqs), rec.newest, faults, len(line.faults), float64(peakHeap)/(1<<20))
	if len(missing) > 0 {
		t.Errorf("%d sequence numbers missing between 1 and %d, first %v", len(missing), target, missing[:min(len(missing), 10)])
	}
	if len(rec.gaps) > 0 {
		t.Errorf("%d gap events (readings dropped), first %s", len(rec.gaps), rec.gaps[0])
	}
	if len(rec.bad) > 0 {
		t.Errorf("%d messages that do not decode, first %s", len(rec.bad), rec.bad[0])
	}
	if len(rec.seqs) < int(length/time.Second)*soakHeads*5 {
		t.Errorf("only %d readings in %v from %d heads at 10 Hz", len(rec.seqs), length, soakHeads)
	}
	if peakHeap > 256<<20 {
		t.Errorf("peak heap %.1f MB, want under 256 MB", float64(peakHeap)/(1<<20))
	}
	// The daemon's goroutines are gone (the test's own helpers remain,
	// with a margin for paho's and the broker helpers' lingering ones).
	if n := runtime.NumGoroutine(); n > goroutines+40 {
		t.Errorf("%d goroutines after the daemon stopped, %d before", n, goroutines)
	}

	final := soakStatuses(d)
	for key, st := range final {
		if q, ok := quiet[key]; !ok || q.State != st.State || q.Active != st.Active {
			t.Errorf("alarm %s: %s (active %v) once the heads read good, %s (active %v) when the daemon stopped", key, q.State, q.Active, st.State, st.Active)
		}
	}
	// What the broker retains now, the daemon stopped.
	late := mqtttest.Subscribe(t, broker.URL(), topics.Alarm("+", "+"))
	retained := map[string]alarmState{}
	for {
		m, ok := late.Next(time.Second)
		if !ok {
			break
		}
		var s alarmState
		if err := json.Unmarshal(m.Payload, &s); err != nil {
			t.Errorf("retained alarm state on %s: %v: %s", m.Topic, err, m.Payload)
			continue
		}
		retained[s.Head+"/"+s.Alarm] = s
	}
	rec.checkAlarms(t, final, retained, windows)
}

// soakWindow is a time a head was made to fail (or to answer with
// errors its line repairs).
type soakWindow struct {
	head     string
	what     string
	from, to time.Time
	failing  bool // polls fail; else the line's retry repairs them
}

// soakRecord is what TestSoak's subscriber has received.
type soakRecord struct {
	topics mqtt.Topics
	probe  string // the topic of the test's probes, under the gateway's
	probes int

	seqs   map[uint64]bool
	newest uint64
	events map[string][]soakEvent   // alarm transitions by "head/alarm", each seq once
	states map[string][]soakStateAt // alarm states by "head/alarm", every arrival in order
	gaps   []string                 // gap events: readings the outbox dropped
	bad    []string                 // messages that do not decode
	epoch  int                      // broker restarts so far

	quiet time.Time      // when the faults stopped; zero before
	good  map[string]int // good readings in a row since quiet, by head
}

type soakEvent struct {
	alarmEvent
	at time.Time
}

type soakStateAt struct {
	alarmState
	epoch int // broker restarts before it arrived
}

func newSoakRecord(topics mqtt.Topics) *soakRecord {
	return &soakRecord{
		topics: topics,
		probe:  topics.Root + "/" + topics.Gateway + "/probe",
		seqs:   map[uint64]bool{},
		events: map[string][]soakEvent{},
		states: map[string][]soakStateAt{},
		good:   map[string]int{},
	}
}

func (r *soakRecord) take(m mqtttest.Message) {
	var head struct {
		Seq  uint64 `json:"seq"`
		Type string `json:"type"`
	}
	if json.Unmarshal(m.Payload, &head) != nil || head.Seq == 0 {
		return // the state ("online") and the heads' info carry none
	}
	first := !r.seqs[head.Seq]
	r.seqs[head.Seq] = true
	r.newest = max(r.newest, head.Seq)
	bad := func(err error) { r.bad = append(r.bad, fmt.Sprintf("%s: %v: %s", m.Topic, err, m.Payload)) }
	switch {
	case m.Topic == r.topics.Events():
		if !first {
			return
		}
		if head.Type != "alarm" {
			r.gaps = append(r.gaps, string(m.Payload))
			return
		}
		var e soakEvent
		if err := json.Unmarshal(m.Payload, &e.alarmEvent); err != nil {
			bad(err)
			return
		}
		var err error
		if e.at, err = time.Parse(mqtt.TimeLayout, e.Time); err != nil {
			bad(err)
			return
		}
		key := e.Head + "/" + e.Alarm
		r.events[key] = append(r.events[key], e)
	case strings.HasSuffix(m.Topic, "/reading"):
		if !first || r.quiet.IsZero() {
			return
		}
		var rd struct {
			Head    string    `json:"head"`
			Time    time.Time `json:"time"`
			Quality string    `json:"quality"`
		}
		if err := json.Unmarshal(m.Payload, &rd); err != nil {
			bad(err)
			return
		}
		if rd.Time.Before(r.quiet) {
			return
		}
		if rd.Quality == "good" {
			r.good[rd.Head]++
		} else {
			r.good[rd.Head] = 0
		}
	case strings.Contains(m.Topic, "/alarm/"):
		var s soakStateAt
		if err := json.Unmarshal(m.Payload, &s.alarmState); err != nil {
			bad(err)
			return
		}
		s.epoch = r.epoch
		key := s.Head + "/" + s.Alarm
		r.states[key] = append(r.states[key], s)
	}
}

// unsteady lists the heads (head:count) that have not yet given
// soakSteady good readings in a row since the faults stopped.
func (r *soakRecord) unsteady() []string {
	var out []string
	for i := 1; i <= soakHeads; i++ {
		if n := r.good[soakHeadName(i)]; n < soakSteady {
			out = append(out, fmt.Sprintf("%s:%d", soakHeadName(i), n))
		}
	}
	return out
}

// roundTrip publishes a probe straight to the broker at url and takes
// what the subscriber receives until the probe comes back: then the
// subscriber has every message the broker had taken in before the probe.
func (r *soakRecord) roundTrip(t *testing.T, url string, sub *mqtttest.Subscriber) {
	t.Helper()
	r.probes++
	payload := fmt.Sprintf("probe %d", r.probes)
	c := paho.NewClient(paho.NewClientOptions().AddBroker(url).
		SetClientID(fmt.Sprintf("soak-probe-%d", r.probes)).SetConnectTimeout(5 * time.Second))
	if tok := c.Connect(); !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
		t.Fatalf("probe %d: connect to %s: %v", r.probes, url, tok.Error())
	}
	defer c.Disconnect(0)
	if tok := c.Publish(r.probe, 1, false, payload); !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
		t.Fatalf("probe %d: publish on %s: %v", r.probes, r.probe, tok.Error())
	}
	deadline := time.After(10 * time.Second)
	for {
		select {
		case m := <-sub.C:
			if m.Topic == r.probe {
				if string(m.Payload) == payload {
					return
				}
				continue
			}
			r.take(m)
		case <-deadline:
			t.Fatalf("probe %d on %s not received within 10 s (newest seq %d)", r.probes, r.probe, r.newest)
		}
	}
}

// restartBroker kills the broker and starts it again on its port with
// the daemon's link held, as TestSoak's comment explains.
func (r *soakRecord) restartBroker(t *testing.T, broker *mqtttest.Broker, proxy *mqtttest.Proxy, sub *mqtttest.Subscriber) {
	t.Helper()
	proxy.Stall()
	r.roundTrip(t, broker.URL(), sub)
	broker.Stop()
	proxy.Cut()
	broker.Start()
	sub.WaitSubscriptions(r.epoch+2, 10*time.Second)
	// What arrives before this probe came from the broker that died.
	r.roundTrip(t, broker.URL(), sub)
	r.epoch++
	proxy.Resume()
}

// checkAlarms compares each alarm's final status in the daemon with its
// events, its state messages and the state the broker retains, and the
// alarms' events with the windows of failing.
func (r *soakRecord) checkAlarms(t *testing.T, final map[string]alarms.Status, retained map[string]alarmState, windows []soakWindow) {
	t.Helper()
	if len(final) != soakHeads {
		t.Errorf("the daemon has %d alarms, want one per head, %d", len(final), soakHeads)
	}
	// older counts the times the broker was sent a state older than the
	// one it had just been sent for the same alarm: after a reconnection
	// the publisher sends new entries first and the backlog beside them,
	// and sends such a state without retaining it.
	activated, older := 0, 0
	for key, st := range final {
		evs := r.events[key]
		slices.SortFunc(evs, func(a, b soakEvent) int { return cmp.Compare(a.Seq, b.Seq) })
		// The chain of events, from normal at the start.
		state, active, after := alarms.Normal.String(), false, "the start"
		n := 0
		for _, e := range evs {
			if e.From != state {
				t.Errorf("alarm %s: event seq %d (%s at %s) leaves from %s, but %s left the alarm %s", key, e.Seq, e.Reason, e.Time, e.From, after, state)
			}
			if e.Active == active {
				t.Errorf("alarm %s: event seq %d (%s at %s) leaves the alarm active=%v as %s did", key, e.Seq, e.Reason, e.Time, e.Active, after)
			}
			if want := map[bool]string{true: alarms.ReasonActivated, false: alarms.ReasonCleared}[e.Active]; e.Reason != want {
				t.Errorf("alarm %s: event seq %d at %s gives reason %q with active=%v, want %q", key, e.Seq, e.Time, e.Reason, e.Active, want)
			}
			if e.Active {
				n++
			}
			state, active, after = e.To, e.Active, fmt.Sprintf("event seq %d (%s)", e.Seq, e.Reason)
		}
		if state != st.State.String() || active != st.Active {
			t.Errorf("alarm %s: its events end in %s (active %v) after %s; the daemon's alarm is %s (active %v)", key, state, active, after, st.State, st.Active)
		}
		if uint64(n) != st.Activations {
			t.Errorf("alarm %s: %d activation events, the daemon counts %d activations", key, n, st.Activations)
		}
		want := alarms.Normal
		if n > 0 {
			want = alarms.ReturnedUnacknowledged
			activated++
		}
		if st.Active || st.State != want {
			t.Errorf("alarm %s: %s (active %v) after the heads read good again with %d activations and no acknowledgement, want %s", key, st.State, st.Active, n, want)
		}

		// Its latest state message, and what the broker retains.
		msgs := r.states[key]
		if len(msgs) == 0 {
			head, _, _ := strings.Cut(key, "/")
			t.Errorf("alarm %s: no state message on %s", key, r.topics.Alarm(head, st.Name))
			continue
		}
		latest := slices.MaxFunc(msgs, func(a, b soakStateAt) int { return cmp.Compare(a.Seq, b.Seq) })
		if latest.State != st.State.String() || latest.Active != st.Active {
			t.Errorf("alarm %s: latest state message (seq %d) says %s (active %v), the daemon's alarm is %s (active %v)", key, latest.Seq, latest.State, latest.Active, st.State, st.Active)
		}
		var sent *soakStateAt // the newest the broker was sent since it last started
		for i := range msgs {
			if i > 0 && msgs[i].epoch == msgs[i-1].epoch && msgs[i].Seq < msgs[i-1].Seq {
				older++
			}
			if msgs[i].epoch == r.epoch && (sent == nil || msgs[i].Seq > sent.Seq) {
				sent = &msgs[i]
			}
		}
		got, ok := retained[key]
		switch {
		case sent == nil:
			t.Errorf("alarm %s: the broker retains seq %d (%s), but was sent no state of it since its last restart", key, got.Seq, got.State)
		case !ok:
			t.Errorf("alarm %s: the broker retains no state, though it was sent seq %d (%s) since its last restart", key, sent.Seq, sent.State)
		case got.Seq != sent.Seq:
			t.Errorf("alarm %s: the broker retains seq %d (%s), but the newest state it was sent is seq %d (%s)", key, got.Seq, got.State, sent.Seq, sent.State)
		case got.State != st.State.String() || got.Active != st.Active:
			t.Errorf("alarm %s: the broker retains %s (active %v, seq %d), the daemon's alarm is %s (active %v, latest state message seq %d)",
				key, got.State, got.Active, got.Seq, st.State, st.Active, latest.Seq)
		}
	}

	// Failing long enough raised the alarm; repaired CRC errors did not.
	checked := 0
	for _, w := range windows {
		key := w.head + "/blind"
		evs := r.events[key]
		if !w.failing {
			for _, e := range evs {
				if e.Active && !e.at.Before(w.from.Add(100*time.Millisecond)) && !e.at.After(w.to) {
					t.Errorf("alarm %s activated at %s (event seq %d) while the head had %s from %s to %s, which the line's retry repairs",
						key, e.Time, e.Seq, w.what, w.from.Format(time.StampMilli), w.to.Format(time.StampMilli))
				}
			}
			continue
		}
		if w.to.Sub(w.from) < soakFailing {
			continue
		}
		checked++
		if !activeWithin(evs, w.from.Add(-soakSlack), w.to.Add(soakSlack)) {
			t.Errorf("alarm %s never active while the head was %s from %s to %s (%.1f s; on-delay %v)",
				key, w.what, w.from.Format(time.StampMilli), w.to.Format(time.StampMilli), w.to.Sub(w.from).Seconds(), soakOnDelay)
		}
	}
	if *soak && checked == 0 {
		t.Errorf("no head failed for %v: the activations went unchecked", soakFailing)
	}
	t.Logf("alarms: %d of %d activated at least once; %d times a head failed for %v or more; %d times an older state came after a newer one (sent not retained)",
		activated, len(final), checked, soakFailing, older)
}

// activeWithin reports whether the alarm whose events (in sequence
// order) are evs was active at some time from from to to: active at from,
// or activated then.
func activeWithin(evs []soakEvent, from, to time.Time) bool {
	active, i := false, 0
	for ; i < len(evs) && !evs[i].at.After(from); i++ {
		active = evs[i].Active
	}
	for ; !active && i < len(evs) && !evs[i].at.After(to); i++ {
		active = evs[i].Active
	}
	return active
}

// soakStatuses returns the status of each head's alarm "blind", by
// "head/blind"; a head without it is left out.
func soakStatuses(d *Daemon) map[string]alarms.Status {
	d.mu.Lock()
	heads := d.heads
	d.mu.Unlock()
	out := map[string]alarms.Status{}
	for _, h := range heads {
		if h.alarms == nil {
			continue
		}
		h.alarms.mu.Lock()
		if a := h.alarms.set.Alarm("blind"); a != nil {
			out[h.cfg.Name+"/blind"] = a.Status()
		}
		h.alarms.mu.Unlock()
	}
	return out
}

// soakActive lists the daemon's alarms that are active.
func soakActive(d *Daemon) []string {
	var out []string
	for key, st := range soakStatuses(d) {
		if st.Active {
			out = append(out, key)
		}
	}
	slices.Sort(out)
	return out
}

// soakLog keeps the daemon's last log lines, shown when TestSoak fails.
type soakLog struct {
	mu    sync.Mutex
	lines [200]string // a ring
	n     int
}

func (l *soakLog) add(line string) {
	l.mu.Lock()
	defer l.mu.Unlock()
	l.lines[l.n%len(l.lines)] = line
	l.n++
}

func (l *soakLog) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	var b strings.Builder
	for i := max(0, l.n-len(l.lines)); i < l.n; i++ {
		b.WriteString(l.lines[i%len(l.lines)])
		b.WriteByte('\n')
	}
	return b.String()
}

// soakLogHandler writes records into a soakLog.
type soakLogHandler struct {
	log   *soakLog
	attrs string
}

func (h soakLogHandler) Enabled(context.Context, slog.Level) bool { return true }

func (h soakLogHandler) Handle(_ context.Context, r slog.Record) error {
	var b strings.Builder
	fmt.Fprintf(&b, "%s %s %s%s", r.Time.Format("15:04:05.000"), r.Level, r.Message, h.attrs)
	r.Attrs(func(a slog.Attr) bool {
		b.WriteString(" " + a.String())
		return true
	})
	h.log.add(b.String())
	return nil
}

func (h soakLogHandler) WithAttrs(as []slog.Attr) slog.Handler {
	for _, a := range as {
		h.attrs += " " + a.String()
	}
	return h
}

func (h soakLogHandler) WithGroup(string) slog.Handler { return h }
