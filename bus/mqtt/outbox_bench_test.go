package mqtt_test

import (
	"context"
	"encoding/json"
	"slices"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
)

// appendReadings appends n copies of r with their own sequence numbers
// and the time of the append, and waits for their commit.
func appendReadings(tb testing.TB, ob *mqtt.Outbox, topic string, r mqtt.Reading, n int) {
	tb.Helper()
	r.Replayed = false // as a gateway appends it
	for range n {
		if _, err := ob.Append(mqtt.KindReading, topic, false, func(seq uint64) []byte {
			r.Seq, r.Time = seq, time.Now()
			return r.AppendJSON(make([]byte, 0, 1024))
		}); err != nil {
			tb.Fatal(err)
		}
	}
	if err := ob.Sync(); err != nil {
		tb.Fatal(err)
	}
}

func benchOutbox(b *testing.B, dir string) *mqtt.Outbox {
	ob, err := mqtt.OpenOutbox(dir, mqtt.OutboxOptions{GapTopic: tp.Events(), Gateway: tp.Gateway, MaxEntries: 2000000})
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { _ = ob.Close() })
	return ob
}

// BenchmarkOutboxAppend measures appends of Reading payloads with group
// commit (default interval, each commit ending in an fsync), up to the
// commit of the last one, and the file size per reading.
// Run with e.g. -benchtime=200000x.
func BenchmarkOutboxAppend(b *testing.B) {
	ob := benchOutbox(b, b.TempDir())
	r := sampleReading()
	topic := tp.Reading("h1")
	b.ReportAllocs()
	b.ResetTimer()
	start := time.Now()
	appendReadings(b, ob, topic, r, b.N)
	elapsed := time.Since(start)
	b.StopTimer()
	st := ob.Stats()
	b.ReportMetric(float64(b.N)/elapsed.Seconds(), "readings/s")
	b.ReportMetric(float64(st.Bytes)/float64(b.N), "disk-B/reading")
	b.ReportMetric(float64(len(r.AppendJSON(nil))), "payload-B")
	b.ReportMetric(float64(st.Commits), "commits")
}

// BenchmarkOutboxDrain measures how fast a Publisher drains a backlog of
// b.N readings from the outbox to a local broker (from Run to the last
// PUBACK), beside the ceiling of a plain paho client with the same window
// and payload size on the same broker, measured in the same run.
// Run with e.g. -benchtime=100000x.
func BenchmarkOutboxDrain(b *testing.B) {
	broker := mqtttest.Start(b)
	r := sampleReading()
	size := len(r.AppendJSON(nil))
	ceiling := mqtttest.RawQoS1Ceiling(b, broker.URL(), max(b.N, 20000), size)
	ob := benchOutbox(b, b.TempDir())
	appendReadings(b, ob, tp.Reading("h1"), r, b.N)

	var acked atomic.Int64
	done := make(chan struct{})
	o := mqtt.Options{Brokers: []string{broker.URL()}, ClientID: "glowgate-bench", StateTopic: tp.State(), Outbox: ob}
	o.OnAck = func(mqtt.Message) {
		if acked.Add(1) == int64(b.N) {
			close(done)
		}
	}
	p, err := mqtt.NewPublisher(o)
	if err != nil {
		b.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	stopped := make(chan error, 1)
	b.ResetTimer()
	start := time.Now()
	go func() { stopped <- p.Run(ctx) }()
	defer func() {
		cancel()
		if err := <-stopped; err != nil {
			b.Error(err)
		}
	}()
	select {
	case <-done:
	case <-time.After(10 * time.Minute):
		b.Fatalf("not all acknowledged: %+v", p.Stats())
	}
	elapsed := time.Since(start)
	b.StopTimer()
	rate := float64(b.N) / elapsed.Seconds()
	b.ReportMetric(rate, "msgs/s")
	b.ReportMetric(ceiling, "raw-msgs/s")
	b.ReportMetric(rate/ceiling, "of-raw")
}

// liveClock collects the latency of live readings at a subscriber: the
// time from their append (Reading.Time, milliseconds) to their arrival.
type liveClock struct {
	mu        sync.Mutex
	latencies []time.Duration
	first     time.Time // arrival of the first live reading
}

func (lc *liveClock) watch(sub *mqtttest.Subscriber, stop <-chan struct{}) {
	for {
		select {
		case <-stop:
			return
		case m := <-sub.C:
			now := time.Now()
			var r struct {
				Time     time.Time
				Replayed bool
			}
			if json.Unmarshal(m.Payload, &r) != nil || r.Replayed {
				continue
			}
			lc.mu.Lock()
			if lc.first.IsZero() {
				lc.first = now
			}
			lc.latencies = append(lc.latencies, now.Sub(r.Time))
			lc.mu.Unlock()
		}
	}
}

// BenchmarkBacklogLiveLatency drains a backlog of 1,000,000 readings
// (appended while no broker was reachable) while live readings arrive at
// 100 per second, and reports the latency of the live readings, from
// append to a subscriber of their topic, the time from the connection to
// the first live reading, and the drain time. It takes a few minutes:
// run it alone with -run=^$ -bench=BacklogLiveLatency -benchtime=1x.
func BenchmarkBacklogLiveLatency(b *testing.B) {
	const backlog = 1000000
	for range b.N {
		b.StopTimer()
		broker := mqtttest.Start(b)
		ob := benchOutbox(b, b.TempDir())
		r := sampleReading()
		fill := time.Now()
		appendReadings(b, ob, tp.Reading("h1"), r, backlog)
		b.Logf("backlog of %d appended in %v: %+v", backlog, time.Since(fill), ob.Stats())

		live := mqtttest.Subscribe(b, broker.URL(), tp.Reading("live"))
		var lc liveClock
		stopWatch := make(chan struct{})
		var wg sync.WaitGroup
		wg.Add(1)
		go func() {
			defer wg.Done()
			lc.watch(live, stopWatch)
		}()

		o := mqtt.Options{Brokers: []string{broker.URL()}, ClientID: "glowgate-bench", StateTopic: tp.State(), Outbox: ob}
		p, err := mqtt.NewPublisher(o)
		if err != nil {
			b.Fatal(err)
		}
		ctx, cancel := context.WithCancel(context.Background())
		stopped := make(chan error, 1)
		// Live readings at 100/s from before the connection on.
		stopLive := make(chan struct{})
		wg.Add(1)
		go func() {
			defer wg.Done()
			t := time.NewTicker(10 * time.Millisecond)
			defer t.Stop()
			lr := sampleReading()
			lr.Head, lr.Replayed = "live", false
			for {
				select {
				case <-stopLive:
					return
				case <-t.C:
					lr.Time = time.Now()
					if _, err := ob.Append(mqtt.KindReading, tp.Reading("live"), false, func(seq uint64) []byte {
						lr.Seq = seq
						return lr.AppendJSON(nil)
					}); err != nil {
						b.Error(err)
						return
					}
				}
			}
		}()
		b.StartTimer()
		start := time.Now()
		go func() { stopped <- p.Run(ctx) }()
		var connected time.Time
		select {
		case <-p.Connected():
			connected = time.Now()
		case <-time.After(time.Minute):
			b.Fatal("not connected")
		}
		tick := time.NewTicker(50 * time.Millisecond)
		for p.Stats().Replayed < backlog {
			select {
			case <-tick.C:
			case <-time.After(20 * time.Minute):
				b.Fatalf("backlog not drained: %+v", p.Stats())
			}
		}
		tick.Stop()
		drain := time.Since(start)
		b.StopTimer()
		close(stopLive)
		cancel()
		if err := <-stopped; err != nil {
			b.Error(err)
		}
		close(stopWatch)
		wg.Wait()

		lc.mu.Lock()
		lat := slices.Clone(lc.latencies)
		first := lc.first
		lc.mu.Unlock()
		if len(lat) == 0 {
			b.Fatal("no live reading arrived")
		}
		slices.Sort(lat)
		pct := func(q float64) time.Duration { return lat[min(len(lat)-1, int(q*float64(len(lat))))] }
		b.ReportMetric(pct(0.5).Seconds()*1000, "live-p50-ms")
		b.ReportMetric(pct(0.99).Seconds()*1000, "live-p99-ms")
		b.ReportMetric(lat[len(lat)-1].Seconds()*1000, "live-max-ms")
		b.ReportMetric(first.Sub(connected).Seconds()*1000, "first-live-ms")
		b.ReportMetric(drain.Seconds(), "drain-s")
		b.ReportMetric(backlog/drain.Seconds(), "drain-msgs/s")
		b.Logf("%d live readings during the drain; outbox after: %+v", len(lat), ob.Stats())
		if max := lat[len(lat)-1]; max > time.Second {
			b.Errorf("live latency reached %v, more than 1s", max)
		}
	}
}
