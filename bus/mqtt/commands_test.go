package mqtt_test

import (
	"fmt"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"

	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
)

// sendCommand publishes payload on the command topic at QoS 1 from a
// client of its own.
func sendCommand(t *testing.T, url, payload string, retain bool) {
	t.Helper()
	c := paho.NewClient(paho.NewClientOptions().AddBroker(url).
		SetClientID(fmt.Sprintf("operator-%d", time.Now().UnixNano())).SetAutoReconnect(false))
	if tok := c.Connect(); !tok.WaitTimeout(wait) || tok.Error() != nil {
		t.Fatalf("operator connect: %v", tok.Error())
	}
	defer c.Disconnect(100)
	if tok := c.Publish(tp.Cmd(), 1, retain, payload); !tok.WaitTimeout(wait) || tok.Error() != nil {
		t.Fatalf("operator publish: %v", tok.Error())
	}
}

// Commands reach OnCommand in order on a goroutine of the publisher's
// own, with replies published; a slow OnCommand holds back neither the
// publications nor paho; a retained command is ignored; and the
// subscription comes back after the broker restarts.
func TestPublisherCommands(t *testing.T) {
	broker := mqtttest.Start(t)
	sendCommand(t, broker.URL(), "stale", true) // retained before the gateway subscribes
	replies := mqtttest.Subscribe(t, broker.URL(), tp.CmdReply())
	readings := mqtttest.Subscribe(t, broker.URL(), tp.Reading("h1"))

	got := make(chan string, 16)
	release := make(chan struct{})
	var p *mqtt.Publisher
	o := testOptions(t, broker.URL())
	o.CommandTopic = tp.Cmd()
	o.OnCommand = func(payload []byte) {
		got <- string(payload)
		if string(payload) == "slow" {
			<-release
		}
		p.Reply(tp.CmdReply(), append([]byte("done "), payload...))
	}
	p = newPublisher(t, o)
	stop := run(t, p)
	waitConnected(t, p) // subscribed: connect waits for the SUBACK

	next := func(want string) {
		t.Helper()
		select {
		case s := <-got:
			if s != want {
				t.Fatalf("command %q, want %q", s, want)
			}
		case <-time.After(wait):
			t.Fatalf("command %q: none within %v", want, wait)
		}
	}
	sendCommand(t, broker.URL(), "first", false)
	next("first")
	if m := replies.WaitFor(tp.CmdReply(), nil, wait); string(m.Payload) != "done first" || m.Retained {
		t.Fatalf("reply %q retained=%v", m.Payload, m.Retained)
	}

	sendCommand(t, broker.URL(), "slow", false)
	next("slow")
	for _, c := range []string{"a", "b", "c"} {
		sendCommand(t, broker.URL(), c, false)
	}
	// OnCommand is stuck in "slow": publications still flow.
	publishRange(t, p, 0, 20)
	for i := range 20 {
		if m, ok := readings.Next(wait); !ok || string(m.Payload) != fmt.Sprint(i) {
			t.Fatalf("reading %d while a command runs: %q, %v", i, m.Payload, ok)
		}
	}
	close(release)
	for _, c := range []string{"a", "b", "c"} {
		next(c)
	}

	broker.Stop()
	broker.Start()
	eventually(t, "reconnected", func() bool { st := p.Stats(); return st.Connected && st.Connects >= 2 })
	sendCommand(t, broker.URL(), "after restart", false)
	next("after restart")
	if err := stop(); err != nil {
		t.Fatal(err)
	}
	select {
	case s := <-got:
		t.Fatalf("unexpected command %q (the retained one must be ignored)", s)
	default:
	}
	if st := p.Stats(); st.Commands != 6 || st.CommandsDropped != 0 {
		t.Errorf("stats: %+v, want 6 commands", st)
	}
}
