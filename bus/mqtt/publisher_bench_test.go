package mqtt_test

import (
	"context"
	"sync/atomic"
	"testing"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
)

// BenchmarkPublishQoS1 measures QoS 1 delivery of Reading payloads from
// one Publisher to a local broker, from the first Publish to the last
// PUBACK, and reports it beside the ceiling of a plain paho client with
// the same window and payload size on the same broker.
// Run with e.g. -benchtime=30000x.
func BenchmarkPublishQoS1(b *testing.B) {
	broker := mqtttest.Start(b)
	r := sampleReading()
	payload := r.AppendJSON(nil)
	ceiling := mqtttest.RawQoS1Ceiling(b, broker.URL(), max(b.N, 1000), len(payload))

	o := mqtt.Options{
		Brokers:    []string{broker.URL()},
		ClientID:   "glowgate-bench",
		StateTopic: tp.State(),
		QueueSize:  b.N,
	}
	var done <-chan struct{}
	o.OnAck, done = countAcks(b.N, nil)
	p := runBench(b, o)
	select {
	case <-p.Connected():
	case <-time.After(wait):
		b.Fatal("not connected")
	}
	topic := tp.Reading("h1")

	b.ResetTimer()
	start := time.Now()
	for i := 0; i < b.N; i++ {
		if !p.Publish(mqtt.Message{Topic: topic, Payload: payload}) {
			b.Fatalf("Publish %d refused: %+v", i, p.Stats())
		}
	}
	select {
	case <-done:
	case <-time.After(time.Minute):
		b.Fatalf("not all acknowledged: %+v", p.Stats())
	}
	elapsed := time.Since(start)
	b.StopTimer()

	rate := float64(b.N) / elapsed.Seconds()
	b.ReportMetric(rate, "msgs/s")
	b.ReportMetric(ceiling, "raw-msgs/s")
	b.ReportMetric(rate/ceiling, "of-raw")
	b.ReportMetric(float64(len(payload)), "payload-B")
}

// BenchmarkRawQoS1Ceiling is the plain paho client alone.
// countAcks is an OnAck that calls each (when not nil) and closes done at
// the n-th acknowledgement.
func countAcks(n int, each func(mqtt.Message)) (onAck func(mqtt.Message), done <-chan struct{}) {
	var acked atomic.Int64
	c := make(chan struct{})
	return func(m mqtt.Message) {
		if each != nil {
			each(m)
		}
		if acked.Add(1) == int64(n) {
			close(c)
		}
	}, c
}

// runBench runs a Publisher with o until b ends, then stops it and checks
// what Run returned.
func runBench(b *testing.B, o mqtt.Options) *mqtt.Publisher {
	b.Helper()
	p, err := mqtt.NewPublisher(o)
	if err != nil {
		b.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	go func() { stopped <- p.Run(ctx) }()
	b.Cleanup(func() {
		cancel()
		if err := <-stopped; err != nil {
			b.Error(err)
		}
	})
	return p
}

func BenchmarkRawQoS1Ceiling(b *testing.B) {
	broker := mqtttest.Start(b)
	r := sampleReading()
	size := len(r.AppendJSON(nil))
	b.ResetTimer()
	rate := mqtttest.RawQoS1Ceiling(b, broker.URL(), b.N, size)
	b.ReportMetric(rate, "msgs/s")
}
