package status

import (
	"bufio"
	"context"
	"io"
	"math"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"glowgate/bus/modbus"
	"glowgate/bus/mqtt"
)

// testToken is the operator token of the test servers.
const testToken = "s3cret-operator-token"

// testClock is a settable clock for Options.Now.
type testClock struct {
	mu sync.Mutex
	t  time.Time
}

func (c *testClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.t
}

func (c *testClock) Set(t time.Time) {
	c.mu.Lock()
	defer c.mu.Unlock()
	c.t = t
}

// startServer starts a Server behind an httptest server (plain HTTP on
// loopback). o.Registry is a fresh registry unless set.
func startServer(t testing.TB, o Options) (*Server, *httptest.Server) {
	t.Helper()
	if o.Registry == nil {
		o.Registry = prometheus.NewRegistry()
	}
	if o.Gateway == "" {
		o.Gateway = "test-gw"
	}
	if o.Version == "" {
		o.Version = "v0.0.0-test"
	}
	s, err := New(o)
	if err != nil {
		t.Fatalf("New: %v", err)
	}
	ts := httptest.NewServer(s.Handler())
	t.Cleanup(func() {
		s.Close()
		ts.CloseClientConnections()
		ts.Close()
	})
	return s, ts
}

func f64(v float64) *float64 { return &v }

// demoChannels are the channel names and wavelengths of the test heads.
var demoChannels = [][]mqtt.Channel{
	{{Name: "short", WavelengthUM: 0.9}, {Name: "long", WavelengthUM: 1.05}},
	{{Name: "c1", WavelengthUM: 0.75}, {Name: "c2", WavelengthUM: 0.9}, {Name: "c3", WavelengthUM: 1.05}},
}

// testReading returns a reading of head at temperature temp (in unit)
// with the given channels and signal fraction frac on each.
func testReading(head string, seq uint64, at time.Time, temp float64, unit string, chans []mqtt.Channel, frac float64, quality string) *mqtt.Reading {
	r := &mqtt.Reading{
		Gateway: "test-gw", Head: head, Seq: seq, Time: at,
		Temperature: f64(temp), RawTemperature: f64(temp + 0.7), Unit: unit,
		Ratio: f64(0.8), EmissivityRatio: 1, Uncertainty: f64(2.5),
		Quality: quality, StatusCode: 0, Flags: []string{},
	}
	for i, c := range chans {
		c.Signal = f64(1000 * (1 + float64(i)))
		c.SignalFraction = f64(frac * (1 - 0.05*float64(i)))
		c.BrightnessTemperature = f64(temp - 40*(1-frac))
		r.Channels = append(r.Channels, c)
	}
	if len(chans) >= 3 {
		r.PairTemperatures = []mqtt.PairTemperature{{Pair: "c1/c2", Temperature: f64(temp - 1)}, {Pair: "c2/c3", Temperature: f64(temp + 1.5)}, {Pair: "c1/c3", Temperature: f64(temp)}}
		r.Nongrey = f64(2.5)
	}
	return r
}

// headInfos describes the test heads: two two-colour heads and one
// three-colour head.
func headInfos() []HeadInfo {
	return []HeadInfo{
		{Name: "caster-strand", Description: "Strand at the mould exit", Line: "melt-shop", Unit: "degC", RangeMin: 700, RangeMax: 1400,
			Channels:    []ChannelInfo{{"short", 0.9}, {"long", 1.05}},
			Settings:    map[string]any{"emissivity_ratio": 1.02, "processing": map[string]any{"hold": "peak", "decay_K_per_s": 30}},
			Calibration: map[string]any{"short": map[string]any{"A": 8.9e-7, "B": 1.1e-5, "C": 3.2e4}}},
		{Name: "ladle-stream", Description: "Tapping stream", Line: "melt-shop", Unit: "degC", RangeMin: 1200, RangeMax: 1800,
			Channels: []ChannelInfo{{"short", 0.9}, {"long", 1.05}}},
		{Name: "kiln-zone", Description: "Firing zone, three colours", Line: "kiln-bus", Unit: "K", RangeMin: 900, RangeMax: 1700,
			Channels: []ChannelInfo{{"c1", 0.75}, {"c2", 0.9}, {"c3", 1.05}}},
	}
}

// lineStats returns synthetic line counters: "melt-shop" with both heads
// healthy, "kiln-bus" with its one head failing when failing is true.
func lineStats(failing bool) []modbus.LineStats {
	mk := func(name string, polls, failures, timeouts uint64, fail bool) modbus.PollStats {
		p := modbus.PollStats{Name: name, Polls: polls, Failures: failures, Transactions: polls, Failing: fail}
		p.Errors[modbus.KindTimeout] = timeouts
		return p
	}
	melt := modbus.LineStats{Name: "melt-shop", Running: 10 * time.Second,
		Polls: []modbus.PollStats{mk("caster-strand", 100, 0, 0, false), mk("ladle-stream", 100, 2, 2, false)}}
	melt.Times.Count = 200
	melt.Times.Sum = 200 * 4 * time.Millisecond
	melt.BusyTime = melt.Times.Sum // one transaction at a time
	for i, b := range modbus.TransactionTimeBounds {
		if b >= 5*time.Millisecond {
			melt.Times.Buckets[i] = 200
		} else if b >= 2*time.Millisecond {
			melt.Times.Buckets[i] = 50
		}
	}
	kiln := modbus.LineStats{Name: "kiln-bus", Running: 40 * time.Second,
		Polls: []modbus.PollStats{mk("kiln-zone", 20, 5, 5, failing)}}
	kiln.Times.Count = 20
	kiln.Times.Sum = 20 * time.Second
	kiln.BusyTime = kiln.Times.Sum
	kiln.Times.Buckets[len(kiln.Times.Buckets)-3] = 15 // ≤ 1 s
	kiln.Times.Buckets[len(kiln.Times.Buckets)-2] = 20
	kiln.Times.Buckets[len(kiln.Times.Buckets)-1] = 20
	return []modbus.LineStats{melt, kiln}
}

// sseEvent is one server-sent event.
type sseEvent struct {
	id, name, data string
}

// sseStream reads events from a live stream.
type sseStream struct {
	resp *http.Response
	sc   *bufio.Scanner
}

func openStream(t testing.TB, ctx context.Context, url string) *sseStream {
	t.Helper()
	req, err := http.NewRequestWithContext(ctx, "GET", url, nil)
	if err != nil {
		t.Fatal(err)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatalf("GET %s: %v", url, err)
	}
	t.Cleanup(func() { resp.Body.Close() })
	if resp.StatusCode != 200 || resp.Header.Get("Content-Type") != "text/event-stream" {
		t.Fatalf("GET %s: %s, Content-Type %q", url, resp.Status, resp.Header.Get("Content-Type"))
	}
	sc := bufio.NewScanner(resp.Body)
	sc.Buffer(make([]byte, 0, 1<<16), 1<<22)
	return &sseStream{resp: resp, sc: sc}
}

// next returns the next event (comments and retry lines skipped), or an
// error when the stream ends.
func (s *sseStream) next() (sseEvent, error) {
	var ev sseEvent
	for s.sc.Scan() {
		line := s.sc.Text()
		switch {
		case line == "":
			if ev.name != "" || ev.data != "" {
				return ev, nil
			}
		case strings.HasPrefix(line, ":"), strings.HasPrefix(line, "retry:"):
		case strings.HasPrefix(line, "id: "):
			ev.id = line[4:]
		case strings.HasPrefix(line, "event: "):
			ev.name = line[7:]
		case strings.HasPrefix(line, "data: "):
			ev.data += line[6:]
		}
	}
	if err := s.sc.Err(); err != nil {
		return ev, err
	}
	return ev, io.EOF
}

// until reads events until one named name arrives and returns it.
func (s *sseStream) until(t testing.TB, name string) sseEvent {
	t.Helper()
	for {
		ev, err := s.next()
		if err != nil {
			t.Fatalf("stream ended waiting for event %q: %v", name, err)
		}
		if ev.name == name {
			return ev
		}
	}
}

func get(t testing.TB, url string) (*http.Response, string) {
	t.Helper()
	resp, err := http.Get(url)
	if err != nil {
		t.Fatalf("GET %s: %v", url, err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatalf("GET %s: read: %v", url, err)
	}
	return resp, string(b)
}

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }
