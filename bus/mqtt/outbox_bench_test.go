package mqtt_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
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

	o := mqtt.Options{Brokers: []string{broker.URL()}, ClientID: "glowgate-bench", StateTopic: tp.State(), Outbox: ob}
	var done <-chan struct{}
	o.OnAck, done = countAcks(b.N, nil)
	b.ResetTimer()
	start := time.Now()
	p := runBench(b, o)
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

// BenchmarkOutboxSustained is the gateway's delivery path at a steady
// load: readings appended to the durable outbox (JSON encoding, group
// commit with fsync) at an offered rate, 50 heads' worth every
// millisecond tick, while a Publisher drains it at QoS 1 to a local
// Mosquitto. It reports the rate acknowledged by the broker over the run,
// the latency from append to PUBACK, and the deepest the outbox got: a
// sustained rate keeps the depth bounded. b.N readings are offered.
//
//	go test -run '^$' -bench OutboxSustained -benchtime 200000x ./bus/mqtt/
func BenchmarkOutboxSustained(b *testing.B) {
	for _, rate := range []int{10000, 20000, 25000, 30000} {
		b.Run(fmt.Sprintf("offered=%d", rate), func(b *testing.B) { benchSustained(b, rate) })
	}
}

func benchSustained(b *testing.B, rate int) {
	broker := mqtttest.Start(b)
	ob := benchOutbox(b, b.TempDir())
	var (
		acked    atomic.Int64
		maxDepth int64
		latMu    sync.Mutex
		lat      = make([]time.Duration, 0, b.N)
	)
	appended := make([]int64, b.N+1) // seq -> append time, Unix ns
	o := mqtt.Options{Brokers: []string{broker.URL()}, ClientID: "glowgate-bench", StateTopic: tp.State(), Outbox: ob}
	var done <-chan struct{}
	o.OnAck, done = countAcks(b.N, func(m mqtt.Message) {
		acked.Add(1)
		if seq := scanSeq(m.Payload); seq > 0 && seq < uint64(len(appended)) {
			if at := atomic.LoadInt64(&appended[seq]); at != 0 {
				latMu.Lock()
				lat = append(lat, time.Duration(time.Now().UnixNano()-at))
				latMu.Unlock()
			}
		}
	})
	p := runBench(b, o)
	select {
	case <-p.Connected():
	case <-time.After(10 * time.Second):
		b.Fatal("not connected")
	}

	r := sampleReading()
	r.Replayed = false
	perTick := max(1, rate/1000)
	b.ResetTimer()
	start := time.Now()
	tick := time.NewTicker(time.Millisecond)
	defer tick.Stop()
	for n := 0; n < b.N; {
		<-tick.C
		// Catch up with the clock, as pollers due together would.
		due := min(b.N, int(time.Since(start).Milliseconds()+1)*perTick)
		for ; n < due; n++ {
			r.Head = fmt.Sprintf("h%02d", n%50)
			if _, err := ob.Append(mqtt.KindReading, tp.Reading(r.Head), false, func(seq uint64) []byte {
				r.Seq, r.Time = seq, time.Now()
				if seq < uint64(len(appended)) {
					atomic.StoreInt64(&appended[seq], r.Time.UnixNano())
				}
				return r.AppendJSON(make([]byte, 0, 1024))
			}); err != nil {
				b.Fatal(err)
			}
		}
		maxDepth = max(maxDepth, int64(n)-acked.Load()) // appended, not yet acknowledged
	}
	offered := time.Since(start)
	select {
	case <-done:
	case <-time.After(5 * time.Minute):
		b.Fatalf("not all acknowledged: %+v", p.Stats())
	}
	elapsed := time.Since(start)
	b.StopTimer()
	latMu.Lock()
	slices.Sort(lat)
	b.ReportMetric(float64(b.N)/elapsed.Seconds(), "acked/s")
	b.ReportMetric(float64(b.N)/offered.Seconds(), "offered/s")
	b.ReportMetric(float64(lat[len(lat)/2].Microseconds())/1e3, "p50_ms")
	b.ReportMetric(float64(lat[len(lat)*99/100].Microseconds())/1e3, "p99_ms")
	latMu.Unlock()
	b.ReportMetric(float64(maxDepth), "max-depth")
	b.ReportMetric(0, "ns/op")
}

// scanSeq is the number after the first "seq": in p, without decoding the
// rest (seqOf's json.Unmarshal would load the publisher's goroutine).
func scanSeq(p []byte) uint64 {
	i := bytes.Index(p, []byte(`"seq":`))
	if i < 0 {
		return 0
	}
	var n uint64
	for _, c := range p[i+len(`"seq":`):] {
		if c < '0' || c > '9' {
			break
		}
		n = 10*n + uint64(c-'0')
	}
	return n
}
