package mqtttest

import (
	"fmt"
	"testing"
	"time"

	paho "github.com/eclipse/paho.mqtt.golang"
)

// CeilingWindow is the number of publications RawQoS1Ceiling keeps in
// flight, the same as the publisher's default window.
const CeilingWindow = 64

// RawQoS1Ceiling measures how fast one plain paho client delivers n QoS 1
// messages of payloadSize bytes to the broker at url, keeping
// CeilingWindow of them in flight and completing their tokens in order:
// the rate a publisher built on paho can at best approach on this machine
// and broker. It returns messages per second, from the first publish to
// the last PUBACK, and fails tb on any error.
func RawQoS1Ceiling(tb testing.TB, url string, n, payloadSize int) float64 {
	tb.Helper()
	if n <= 0 || payloadSize < 0 {
		tb.Fatalf("RawQoS1Ceiling: n = %d, payload size = %d", n, payloadSize)
	}
	o := paho.NewClientOptions().
		AddBroker(url).
		SetClientID(fmt.Sprintf("mqtttest-ceiling-%d", clientSeq.Add(1))).
		SetProtocolVersion(4).
		SetCleanSession(true).
		SetAutoReconnect(false).
		SetOrderMatters(false).
		SetConnectTimeout(5 * time.Second).
		SetWriteTimeout(5 * time.Second)
	c := paho.NewClient(o)
	if tok := c.Connect(); !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
		tb.Fatalf("RawQoS1Ceiling connect %s: %v", url, tok.Error())
	}
	defer c.Disconnect(100)
	payload := make([]byte, payloadSize)
	for i := range payload {
		payload[i] = 'a' + byte(i%26)
	}
	const topic = "mqtttest/ceiling"
	window := make([]paho.Token, 0, CeilingWindow)
	wait := func(tok paho.Token) {
		if !tok.WaitTimeout(10*time.Second) || tok.Error() != nil {
			tb.Fatalf("RawQoS1Ceiling publish: no PUBACK within 10s (%v)", tok.Error())
		}
	}
	start := time.Now()
	for i := 0; i < n; i++ {
		if len(window) == CeilingWindow {
			wait(window[0])
			window = window[1:]
		}
		window = append(window, c.Publish(topic, 1, false, payload))
	}
	for _, tok := range window {
		wait(tok)
	}
	return float64(n) / time.Since(start).Seconds()
}
