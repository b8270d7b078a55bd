package daemon

import (
	"encoding/json"
	"fmt"
	"net/http"
	"os"
	"slices"
	"strings"
	"syscall"
	"testing"
	"time"

	"glowgate/bus/modbus/modbustest"
	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
	"glowgate/daemon/config"

	paho "github.com/eclipse/paho.mqtt.golang"
	"github.com/prometheus/common/expfmt"
	"github.com/prometheus/common/model"
)

// TestAlarmEndToEnd: an over-temperature raises the head's high alarm
// within a poll period plus its on-delay; an acknowledge command moves it
// to acknowledged; the return to normal clears it; a shelve expires on
// time. Every transition arrives on the events topic and the alarm's
// retained state follows.
func TestAlarmEndToEnd(t *testing.T) {
	broker := mqtttest.Start(t)
	srv := modbustest.NewServer(t)
	setBlackbody(t, srv, 1, 1400)
	cfg := parseConfig(t, fmt.Sprintf(`
gateway: alarm-gw
unit: K
mqtt: {brokers: [%s]}
state_dir: "%s"
endpoints: [{name: ep, address: %s, timeout: 200ms}]
heads:
  - name: strand
    endpoint: ep
    period: 50ms
    range: {min: 700K, max: 2500K}
    channels:
      - {name: short, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
    alarms:
      - {name: high, kind: high, setpoint: 1450K, deadband: 5K, on_delay: 200ms, priority: high, message: "strand too hot"}
`, broker.URL(), t.TempDir(), srv.Addr()))
	topics := mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}
	events := mqtttest.Subscribe(t, broker.URL(), topics.Events())
	replies := mqtttest.Subscribe(t, broker.URL(), topics.CmdReply())
	startDaemon(t, Options{Config: cfg})

	next := func(want string, within time.Duration) alarmEvent {
		t.Helper()
		var ev alarmEvent
		events.WaitFor(topics.Events(), func(m mqtttest.Message) bool {
			if json.Unmarshal(m.Payload, &ev) != nil || ev.Type != "alarm" {
				return false
			}
			return ev.To == want
		}, within)
		return ev
	}
	send := func(msg string) commandReply {
		t.Helper()
		c := paho.NewClient(paho.NewClientOptions().AddBroker(broker.URL()).SetClientID("alarm-test-operator"))
		if tok := c.Connect(); !tok.WaitTimeout(5*time.Second) || tok.Error() != nil {
			t.Fatal(tok.Error())
		}
		defer c.Disconnect(100)
		if tok := c.Publish(topics.Cmd(), 1, false, msg); !tok.WaitTimeout(5*time.Second) || tok.Error() != nil {
			t.Fatal(tok.Error())
		}
		m := replies.WaitFor(topics.CmdReply(), nil, 5*time.Second)
		var r commandReply
		if err := json.Unmarshal(m.Payload, &r); err != nil {
			t.Fatalf("reply %s: %v", m.Payload, err)
		}
		return r
	}
	command := func(body string) {
		t.Helper()
		if r := send(`{"command":` + body + `}`); !r.OK {
			t.Fatalf("command %s: %+v", body, r)
		}
	}

	// The daemon is connected, and subscribed to commands, once its
	// readings flow.
	readings := mqtttest.Subscribe(t, broker.URL(), topics.Reading("strand"))
	readings.WaitFor(topics.Reading("strand"), nil, 10*time.Second)

	// Bad commands get error replies, and the daemon carries on.
	for _, bad := range []string{
		`{"command":`,
		`{"command":{"id":"b1","action":"acknowledge","by":"op-7","head":"strand"}}`,
		`{"command":{"id":"b2","action":"acknowledge","by":"op-7","head":"strand","alarm":"nosuch"}}`,
		`{"command":{"id":"b3","action":"launch"}}`,
		`{"command":{"id":"b4","action":"republish","by":"` + strings.Repeat("x", 5000) + `"}}`,
	} {
		if r := send(bad); r.OK || r.Error == "" {
			t.Errorf("command %.60s: reply %+v, want an error", bad, r)
		}
	}

	// Let the daemon come up, then heat the strand.
	hot := time.Now()
	setBlackbody(t, srv, 1, 1500)
	ev := next("unacknowledged", 5*time.Second)
	// One poll period (50 ms) plus the on-delay (200 ms), with room for
	// the broker round trips of a loaded test machine.
	if d := time.Since(hot); d > 2*time.Second || ev.Priority != "high" || ev.Message != "strand too hot" || !ev.Active {
		t.Errorf("activation after %v: %+v", d, ev)
	}
	command(`{"id":"a1","action":"acknowledge","by":"op-7","head":"strand","alarm":"high"}`)
	if ev := next("acknowledged", 5*time.Second); ev.By != "op-7" {
		t.Errorf("acknowledged by %q, want op-7", ev.By)
	}
	setBlackbody(t, srv, 1, 1400)
	next("normal", 5*time.Second)

	until := time.Now().Add(1500 * time.Millisecond).UTC().Format(time.RFC3339Nano)
	command(fmt.Sprintf(`{"id":"a2","action":"shelve","by":"op-7","head":"strand","alarm":"high","until":"%s"}`, until))
	next("shelved", 5*time.Second)
	shelvedAt := time.Now()
	ev = next("normal", 5*time.Second)
	if ev.Reason != "shelve_expired" || time.Since(shelvedAt) > 3*time.Second {
		t.Errorf("after shelving: %+v (after %v)", ev, time.Since(shelvedAt))
	}
}

// A broker that restarts without persistence has lost every retained
// message: on reconnecting the daemon sends each alarm's retained state
// again, the same message as last published.
func TestAlarmStatesRetainedAcrossBrokerRestart(t *testing.T) {
	broker := mqtttest.Start(t)
	srv := modbustest.NewServer(t)
	setBlackbody(t, srv, 1, 1500)
	cfg := alarmConfig(t, broker.URL(), srv.Addr())
	topics := mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}
	topic := topics.Alarm("strand", "high")
	startDaemon(t, Options{Config: cfg})
	active := func(m mqtttest.Message) bool {
		var st alarmState
		return json.Unmarshal(m.Payload, &st) == nil && st.Active && st.State == "unacknowledged"
	}
	before := mqtttest.Subscribe(t, broker.URL(), topic).WaitFor(topic, active, 10*time.Second)

	broker.Stop()
	broker.Start()
	// Sent again (seen live or, if later, retained), and then retained.
	mqtttest.Subscribe(t, broker.URL(), topic).WaitFor(topic, nil, 10*time.Second)
	after := mqtttest.Subscribe(t, broker.URL(), topic).WaitFor(topic, nil, 10*time.Second)
	if !after.Retained || string(after.Payload) != string(before.Payload) {
		t.Errorf("after the restart the retained state is %s (retained %v), want %s", after.Payload, after.Retained, before.Payload)
	}
}

// A configuration reload in the middle of an on-delay carries the alarm
// over: it activates an on-delay after the condition began, not an
// on-delay after the reload.
func TestAlarmOnDelayCarriedOverReload(t *testing.T) {
	broker := mqtttest.Start(t)
	srv := modbustest.NewServer(t)
	setBlackbody(t, srv, 1, 1400)
	cfg := parseConfig(t, strings.Replace(alarmConfigText(t, broker.URL(), srv.Addr()), "priority: high}", "priority: high, on_delay: 3s}", 1))
	topics := mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}
	events := mqtttest.Subscribe(t, broker.URL(), topics.Events())
	readings := mqtttest.Subscribe(t, broker.URL(), topics.Reading("strand"))
	reload := make(chan os.Signal, 1)
	startDaemon(t, Options{Config: cfg, Load: func() (*config.Config, error) { return cfg, nil }, Reload: reload})
	readings.WaitFor("", nil, 10*time.Second)

	setBlackbody(t, srv, 1, 1500)
	var r mqtt.Reading
	hotAt := func(m mqtttest.Message) bool { return json.Unmarshal(m.Payload, &r) == nil && *r.Temperature > 1450 }
	readings.WaitFor("", hotAt, 10*time.Second)
	hot := r.Time
	// Two seconds into the three-second on-delay, by the daemon's clock.
	readings.WaitFor("", func(m mqtttest.Message) bool { return hotAt(m) && r.Time.Sub(hot) >= 2*time.Second }, 10*time.Second)
	reload <- syscall.SIGHUP
	var ev alarmEvent
	events.WaitFor("", func(m mqtttest.Message) bool {
		return json.Unmarshal(m.Payload, &ev) == nil && ev.To == "unacknowledged"
	}, 10*time.Second)
	at, err := time.Parse(time.RFC3339Nano, ev.Time)
	if err != nil {
		t.Fatal(err)
	}
	// Carried over: about 3 s after the first hot reading; restarted by
	// the reload it would be 5 s or more.
	if d := at.Sub(hot); d < 3*time.Second || d > 4500*time.Millisecond {
		t.Errorf("activated %v after the first hot reading, want about the on-delay (3 s)", d)
	}
}

// alarmConfig is one head with a high alarm and no delays, for the
// annunciation measurements.
func alarmConfig(t testing.TB, broker, endpoint string) *config.Config {
	return parseConfig(t, alarmConfigText(t, broker, endpoint))
}

// alarmConfigText is alarmConfig's text.
func alarmConfigText(t testing.TB, broker, endpoint string) string {
	return fmt.Sprintf(`
gateway: alarm-gw
unit: K
mqtt: {brokers: [%s], queue: 100000}
state_dir: "%s"
endpoints: [{name: ep, address: %s, timeout: 200ms}]
heads:
  - name: strand
    endpoint: ep
    period: 10ms
    range: {min: 700K, max: 2500K}
    channels:
      - {name: short, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
    alarms:
      - {name: high, kind: high, setpoint: 1450K, deadband: 5K, priority: high}
`, broker, t.TempDir(), endpoint)
}

// TestAlarmMetrics: /metrics of a running daemon, parsed with the
// Prometheus text parser (github.com/prometheus/common/expfmt), carries
// the head's temperature and the alarm load; a chattering alarm is
// counted and its events say so.
func TestAlarmMetrics(t *testing.T) {
	broker := mqtttest.Start(t)
	srv := modbustest.NewServer(t)
	setBlackbody(t, srv, 1, 1400)
	cfg := alarmConfig(t, broker.URL(), srv.Addr())
	events := mqtttest.Subscribe(t, broker.URL(), mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}.Events())
	d, err := New(Options{Config: cfg, HTTPListen: "127.0.0.1:0"})
	if err != nil {
		t.Fatal(err)
	}
	done := make(chan error, 1)
	go func() { done <- d.Run(t.Context()) }()
	t.Cleanup(func() { <-done })

	// Three activations within a second: chattering.
	var ev alarmEvent
	for range 3 {
		setBlackbody(t, srv, 1, 1500)
		events.WaitFor("", func(m mqtttest.Message) bool {
			return json.Unmarshal(m.Payload, &ev) == nil && ev.To == "unacknowledged"
		}, 5*time.Second)
		setBlackbody(t, srv, 1, 1400)
		events.WaitFor("", func(m mqtttest.Message) bool { return json.Unmarshal(m.Payload, &ev) == nil && ev.Active == false }, 5*time.Second)
	}
	if !ev.Chattering {
		t.Errorf("after three activations in a second the events do not say chattering: %+v", ev)
	}
	var addr string
	for addr == "" {
		addr = d.StatusAddr()
	}
	resp, err := http.Get("http://" + addr + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	parser := expfmt.NewTextParser(model.UTF8Validation)
	families, err := parser.TextToMetricFamilies(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	if f := families["glowgate_alarm_annunciations_10m"]; f == nil || f.Metric[0].GetGauge().GetValue() < 3 {
		t.Errorf("glowgate_alarm_annunciations_10m: %v", f)
	}
	if f := families["glowgate_alarms_chattering"]; f == nil || f.Metric[0].GetGauge().GetValue() != 1 {
		t.Errorf("glowgate_alarms_chattering: %v", f)
	}
	if families["glowgate_temperature_celsius"] == nil {
		t.Errorf("no glowgate_temperature_celsius in /metrics")
	}
}

// BenchmarkAnnunciation measures the annunciation latency: from the
// reading that completes the (zero) on-delay to the alarm event at a
// subscriber of a real Mosquitto. The reading's time is when its poll was
// sent, truncated to the millisecond, so the figures are upper bounds.
// "outbox" runs with a state directory (the event is committed with fsync
// before it is sent), "memory" without.
//
//	go test -run '^$' -bench Annunciation -benchtime 200x ./daemon/
func BenchmarkAnnunciation(b *testing.B) {
	b.Run("outbox", func(b *testing.B) { benchAnnunciation(b, true) })
	b.Run("memory", func(b *testing.B) { benchAnnunciation(b, false) })
}

func benchAnnunciation(b *testing.B, durable bool) {
	broker := mqtttest.Start(b)
	srv := modbustest.NewServer(b)
	setBlackbody(b, srv, 1, 1400)
	cfg := alarmConfig(b, broker.URL(), srv.Addr())
	if !durable {
		cfg.StateDir = ""
	}
	events := mqtttest.Subscribe(b, broker.URL(), mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}.Events())
	startDaemon(b, Options{Config: cfg})
	lat := make([]float64, 0, b.N)
	var ev alarmEvent
	b.ResetTimer()
	for range b.N {
		setBlackbody(b, srv, 1, 1500)
		events.WaitFor("", func(m mqtttest.Message) bool {
			if json.Unmarshal(m.Payload, &ev) != nil || ev.To != "unacknowledged" {
				return false
			}
			at, _ := time.Parse(time.RFC3339Nano, ev.Time)
			lat = append(lat, float64(time.Since(at).Microseconds())/1e3)
			return true
		}, 5*time.Second)
		setBlackbody(b, srv, 1, 1400)
		events.WaitFor("", func(m mqtttest.Message) bool { return json.Unmarshal(m.Payload, &ev) == nil && !ev.Active }, 5*time.Second)
	}
	b.StopTimer()
	slices.Sort(lat)
	b.ReportMetric(lat[len(lat)/2], "p50_ms")
	b.ReportMetric(lat[len(lat)*99/100], "p99_ms")
	b.ReportMetric(lat[len(lat)-1], "max_ms")
	b.ReportMetric(0, "ns/op")
}
