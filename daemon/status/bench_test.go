package status

import (
	"context"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"sync"
	"sync/atomic"
	"syscall"
	"testing"
	"time"

	"glowgate/bus/mqtt"
)

// maxPageWeight bounds the page's embedded files: the page must stay light
// enough for a phone on a plant's Wi-Fi.
const maxPageWeight = 200_000

func TestPageWeight(t *testing.T) {
	s, _ := startServer(t, Options{})
	if w := s.pageWeight(); w > maxPageWeight {
		t.Errorf("embedded page weighs %d bytes, over %d", w, maxPageWeight)
	}
	for name, a := range s.assets {
		t.Logf("%-12s %6d bytes", name, len(a.data))
	}
}

// BenchmarkPageWeight reports the page's weight (sum of the embedded
// files, uncompressed) as page_bytes.
func BenchmarkPageWeight(b *testing.B) {
	s, err := New(Options{})
	if err != nil {
		b.Fatal(err)
	}
	var w int
	for b.Loop() {
		w = s.pageWeight()
	}
	b.ReportMetric(float64(w), "page_bytes")
}

// cpuTime is the process's user + system CPU time so far.
func cpuTime(b *testing.B) time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		b.Fatalf("getrusage: %v", err)
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// BenchmarkSSEFanout measures the CPU a connected live stream costs: 50
// heads each send 10 readings a second (500 readings/s, fed from a
// ticker) to N streaming clients over loopback HTTP. Each iteration is one
// second of feed. It reports
//
//	feed_cpu_ms/s      CPU per second of feed with no client connected
//	cpu_ms/s           CPU per second of feed with the clients connected
//	cpu_ms/s/client    (cpu_ms/s − feed_cpu_ms/s) / clients
//	bytes/s/client     what each client receives per second
//
// The clients run in the same process (they read and discard the stream),
// so cpu_ms/s/client includes their reading: an upper bound for the
// server's share. Run with -benchtime=Nx for N seconds of feed (the
// baseline takes as long again).
func BenchmarkSSEFanout(b *testing.B) {
	for _, clients := range []int{1, 10, 50} {
		b.Run(fmt.Sprintf("clients=%d", clients), func(b *testing.B) { benchFanout(b, clients) })
	}
}

func benchFanout(b *testing.B, clients int) {
	const heads, rate = 50, 10 // readings per second per head
	s, ts := startServer(b, Options{})
	var infos []HeadInfo
	readings := make([]*mqtt.Reading, heads)
	for i := range heads {
		name := "head-" + strconv.Itoa(i)
		infos = append(infos, HeadInfo{Name: name, Unit: "degC", Channels: []ChannelInfo{{"short", 0.9}, {"long", 1.05}}})
		readings[i] = testReading(name, 0, time.Now(), 1100, "degC", demoChannels[i%2], 0.7, "good")
	}
	s.SetHeads(infos)
	seq := uint64(0)
	feedSeconds := func(n int) {
		tick := time.NewTicker(time.Second / rate)
		defer tick.Stop()
		for range n * rate {
			at := <-tick.C
			for i, r := range readings {
				seq++
				r.Seq, r.Time = seq, at
				*r.Temperature = 1100 + float64(seq%100)/10 + float64(i)
				s.Reading(r)
			}
		}
	}

	// Baseline: the feed alone, as long as the measurement.
	c0 := cpuTime(b)
	feedSeconds(b.N)
	feedCPU := (cpuTime(b) - c0) / time.Duration(b.N)

	ctx, cancel := context.WithCancel(context.Background())
	var wg sync.WaitGroup
	var received atomic.Int64
	ready := make(chan struct{}, clients)
	for range clients {
		wg.Add(1)
		go func() {
			defer wg.Done()
			req, _ := http.NewRequestWithContext(ctx, "GET", ts.URL+"/api/events", nil)
			resp, err := http.DefaultClient.Do(req)
			if err != nil {
				ready <- struct{}{}
				return
			}
			defer resp.Body.Close()
			ready <- struct{}{}
			n, _ := io.Copy(io.Discard, resp.Body)
			received.Add(n)
		}()
	}
	for range clients {
		<-ready
	}
	defer func() { cancel(); wg.Wait() }()
	s.mu.Lock()
	connected := s.clients
	s.mu.Unlock()
	if connected != clients {
		b.Fatalf("%d of %d clients connected", connected, clients)
	}

	b.ResetTimer()
	c1 := cpuTime(b)
	feedSeconds(b.N)
	total := cpuTime(b) - c1
	b.StopTimer()
	cancel()
	wg.Wait()

	secs := float64(b.N)
	perClient := (total.Seconds()/secs - feedCPU.Seconds()) / float64(clients)
	b.ReportMetric(feedCPU.Seconds()*1000, "feed_cpu_ms/s")
	b.ReportMetric(total.Seconds()/secs*1000, "cpu_ms/s")
	b.ReportMetric(perClient*1000, "cpu_ms/s/client")
	b.ReportMetric(float64(received.Load())/secs/float64(clients), "bytes/s/client")
}
