package daemon

import (
	"context"
	"encoding/json"
	"net"
	"strings"
	"testing"
	"time"

	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
	"glowgate/configs"
	"glowgate/daemon/config"
)

// readingFields are the keys of the Reading contract in DESIGN.md that
// every two-channel reading carries.
var readingFields = []string{
	"gateway", "head", "seq", "time", "temperature", "raw_temperature", "unit", "ratio",
	"emissivity_ratio", "channels", "uncertainty", "quality", "status_code", "flags", "replayed",
}

var channelFields = []string{"name", "wavelength_um", "signal", "signal_fraction", "brightness_temperature"}

// freeAddr returns a loopback address nobody listens on right now.
func freeAddr(t testing.TB) string {
	t.Helper()
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	return l.Addr().String()
}

// demoConfig is the embedded demo configuration with its endpoints moved
// to free loopback ports.
func demoConfig(t testing.TB) *config.Config {
	t.Helper()
	cfg, err := config.Parse("demo.yaml", configs.Demo)
	if err != nil {
		t.Fatal(err)
	}
	for i := range cfg.Endpoints {
		cfg.Endpoints[i].Address = freeAddr(t)
	}
	return cfg
}

// startSimulator serves cfg's heads until the test ends.
func startSimulator(t testing.TB, cfg *config.Config) {
	t.Helper()
	s, err := NewSimulator(cfg, nil)
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Start(t.Context()); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
}

// startDaemon runs a daemon publishing to brokerURL until the returned
// stop function is called or the test ends; stop waits for it to return.
func startDaemon(t testing.TB, o Options) (stop func() error) {
	t.Helper()
	d, err := New(o)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()
	var result error
	stopped := false
	stop = func() error {
		if !stopped {
			stopped = true
			cancel()
			result = <-done
		}
		return result
	}
	t.Cleanup(func() { stop() })
	return stop
}

// TestEndToEnd runs simulator → daemon → real broker → subscriber on the
// demo configuration: every head's readings arrive with every field of
// the Reading contract, its info and the gateway state are retained, and a
// clean stop leaves the state offline.
func TestEndToEnd(t *testing.T) {
	broker := mqtttest.Start(t)
	cfg := demoConfig(t)
	startSimulator(t, cfg)
	sub := mqtttest.Subscribe(t, broker.URL(), cfg.MQTT.Root+"/#")
	stop := startDaemon(t, Options{Config: cfg, Brokers: []string{broker.URL()}, Version: "test"})

	topics := mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}
	pending := map[string]bool{}
	for _, h := range cfg.Heads {
		pending[topics.Reading(h.Name)] = true
		pending[topics.Info(h.Name)] = true
	}
	online := false
	lastSeq := uint64(0)
	deadline := time.After(20 * time.Second)
	for len(pending) > 0 || !online {
		var m mqtttest.Message
		select {
		case m = <-sub.C:
		case <-deadline:
			t.Fatalf("still waiting for %v (online state seen: %v)", pending, online)
		}
		switch {
		case m.Topic == topics.State():
			online = online || string(m.Payload) == "online"
		case strings.HasSuffix(m.Topic, "/info"):
			var in map[string]any
			if err := json.Unmarshal(m.Payload, &in); err != nil {
				t.Fatalf("%s: %v: %s", m.Topic, err, m.Payload)
			}
			if in["gateway"] != cfg.Gateway || len(in["channels"].([]any)) != 2 {
				t.Errorf("%s: %s", m.Topic, m.Payload)
			}
			delete(pending, m.Topic)
		case strings.HasSuffix(m.Topic, "/reading"):
			seq := checkReading(t, m)
			if seq <= lastSeq {
				t.Errorf("seq %d after %d", seq, lastSeq)
			}
			lastSeq = seq
			delete(pending, m.Topic)
		}
	}
	if err := stop(); err != nil {
		t.Fatalf("daemon: %v", err)
	}
	sub.WaitFor(topics.State(), func(m mqtttest.Message) bool { return string(m.Payload) == "offline" }, 10*time.Second)
}

// checkReading checks one published reading against the contract and
// returns its sequence number.
func checkReading(t *testing.T, m mqtttest.Message) uint64 {
	t.Helper()
	var r map[string]any
	if err := json.Unmarshal(m.Payload, &r); err != nil {
		t.Fatalf("%s: %v: %s", m.Topic, err, m.Payload)
	}
	for _, k := range readingFields {
		if _, ok := r[k]; !ok {
			t.Errorf("%s: no %q in %s", m.Topic, k, m.Payload)
		}
	}
	chans, _ := r["channels"].([]any)
	if len(chans) != 2 {
		t.Fatalf("%s: channels %v", m.Topic, r["channels"])
	}
	for _, c := range chans {
		for _, k := range channelFields {
			if _, ok := c.(map[string]any)[k]; !ok {
				t.Errorf("%s: channel lacks %q: %s", m.Topic, k, m.Payload)
			}
		}
	}
	if ts, _ := r["time"].(string); !strings.HasSuffix(ts, "Z") || len(ts) != len("2006-01-02T15:04:05.000Z") {
		t.Errorf("%s: time %q is not RFC 3339 UTC with milliseconds", m.Topic, r["time"])
	}
	if _, ok := r["flags"].([]any); !ok {
		t.Errorf("%s: flags %v is not an array", m.Topic, r["flags"])
	}
	switch r["quality"] {
	case "good", "uncertain", "bad":
	default:
		t.Errorf("%s: quality %v", m.Topic, r["quality"])
	}
	if r["quality"] == "good" && r["temperature"] == nil {
		t.Errorf("%s: good reading without a temperature: %s", m.Topic, m.Payload)
	}
	return uint64(r["seq"].(float64))
}
