package mqtttest

import (
	"crypto/tls"
	"fmt"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
)

// Message is one message a Subscriber received.
type Message struct {
	Topic    string
	Payload  []byte
	Retained bool // sent because of the subscription, from the broker's retained store
	QoS      byte // as delivered: the lower of the publisher's and the subscription's (1)
}

// Subscriber is a test-side MQTT client subscribed at QoS 1 to one topic
// filter. Messages arrive on C in the order the broker sent them. It
// reconnects by itself when the broker goes away and subscribes again
// (with a clean session: what the broker got while it was away is lost).
type Subscriber struct {
	// C carries the received messages. It is buffered; when the test does
	// not keep up, the client stops reading from the broker.
	C <-chan Message

	t      testing.TB
	filter string
	c      paho.Client
	msgs   chan Message
	done   chan struct{}

	mu     sync.Mutex
	subs   int           // subscriptions acknowledged so far
	subsCh chan struct{} // closed and replaced at each acknowledgement
}

var clientSeq atomic.Uint64

// Subscribe connects to the broker at url, subscribes to filter at QoS 1,
// waits for the SUBACK and returns. The client disconnects in t's cleanup.
func Subscribe(t testing.TB, url, filter string) *Subscriber {
	t.Helper()
	return SubscribeWith(t, url, filter, SubscribeOptions{})
}

// SubscribeOptions are the credentials of a Subscriber.
type SubscribeOptions struct {
	TLS                *tls.Config // for ssl:// brokers
	Username, Password string
}

// SubscribeWith is Subscribe with credentials.
func SubscribeWith(t testing.TB, url, filter string, so SubscribeOptions) *Subscriber {
	t.Helper()
	s := &Subscriber{
		t:      t,
		filter: filter,
		msgs:   make(chan Message, 1<<16),
		done:   make(chan struct{}),
		subsCh: make(chan struct{}),
	}
	s.C = s.msgs
	first := s.subscribed()
	o := paho.NewClientOptions().
		AddBroker(url).
		SetClientID(fmt.Sprintf("mqtttest-sub-%d", clientSeq.Add(1))).
		SetProtocolVersion(4).
		SetCleanSession(true).
		SetAutoReconnect(true).
		SetMaxReconnectInterval(100 * time.Millisecond).
		SetConnectTimeout(5 * time.Second).
		SetKeepAlive(10 * time.Second).
		// In order: the handler runs on the client's single router goroutine.
		SetOrderMatters(true).
		SetDefaultPublishHandler(s.receive).
		SetOnConnectHandler(s.onConnect)
	if so.TLS != nil {
		o.SetTLSConfig(so.TLS)
	}
	if so.Username != "" {
		o.SetUsername(so.Username).SetPassword(so.Password)
	}
	s.c = paho.NewClient(o)
	t.Cleanup(func() {
		close(s.done)
		s.c.Disconnect(100)
	})
	if tok := s.c.Connect(); !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
		t.Fatalf("subscriber connect %s: %v", url, tok.Error())
	}
	select {
	case <-first:
	case <-time.After(10 * time.Second):
		t.Fatalf("subscriber: no SUBACK for %q within 10s", filter)
	}
	return s
}

// onConnect subscribes on every (re)connection. paho calls it on a new
// goroutine, so it may wait for the SUBACK.
func (s *Subscriber) onConnect(c paho.Client) {
	tok := c.Subscribe(s.filter, 1, s.receive)
	if !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
		return // the connection broke; the next one subscribes again
	}
	s.mu.Lock()
	s.subs++
	close(s.subsCh)
	s.subsCh = make(chan struct{})
	s.mu.Unlock()
}

func (s *Subscriber) receive(_ paho.Client, m paho.Message) {
	msg := Message{Topic: m.Topic(), Payload: m.Payload(), Retained: m.Retained(), QoS: m.Qos()}
	select {
	case s.msgs <- msg:
	case <-s.done:
	}
}

// subscribed returns a channel closed at the next acknowledged
// subscription.
func (s *Subscriber) subscribed() <-chan struct{} {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.subsCh
}

// Subscriptions is how many times the subscription has been acknowledged:
// 1 after Subscribe, one more after each reconnection.
func (s *Subscriber) Subscriptions() int {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.subs
}

// WaitSubscriptions waits until the subscription has been acknowledged n
// times in all (so n-1 reconnections), failing the test after timeout.
func (s *Subscriber) WaitSubscriptions(n int, timeout time.Duration) {
	s.t.Helper()
	deadline := time.NewTimer(timeout)
	defer deadline.Stop()
	for {
		s.mu.Lock()
		got, ch := s.subs, s.subsCh
		s.mu.Unlock()
		if got >= n {
			return
		}
		select {
		case <-ch:
		case <-deadline.C:
			s.t.Fatalf("subscriber %q: %d subscriptions after %v, want %d", s.filter, got, timeout, n)
		}
	}
}

// Next returns the next message, or false when none comes within timeout.
func (s *Subscriber) Next(timeout time.Duration) (Message, bool) {
	t := time.NewTimer(timeout)
	defer t.Stop()
	select {
	case m := <-s.msgs:
		return m, true
	case <-t.C:
		return Message{}, false
	}
}

// WaitFor discards messages until one on topic (any topic when empty)
// satisfies pred (any message when nil) and returns it, failing the test
// when none comes within timeout.
func (s *Subscriber) WaitFor(topic string, pred func(Message) bool, timeout time.Duration) Message {
	s.t.Helper()
	deadline := time.NewTimer(timeout)
	defer deadline.Stop()
	for {
		select {
		case m := <-s.msgs:
			if (topic == "" || m.Topic == topic) && (pred == nil || pred(m)) {
				return m
			}
		case <-deadline.C:
			s.t.Fatalf("subscriber %q: no matching message on %q within %v", s.filter, topic, timeout)
			return Message{}
		}
	}
}
