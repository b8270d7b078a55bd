package daemon

import (
	"encoding/json"
	"fmt"
	"math"
	"testing"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/modbus/modbustest"
	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
	"glowgate/convert"
	"glowgate/daemon/config"
)

// threeHeads is a configuration of three identical heads (unit ids 1-3)
// on one endpoint, with float32 signals at input registers 0 and 2.
const threeHeads = `
gateway: test-gw
unit: K
mqtt:
  brokers: [%s]
  queue: 100000
endpoints:
  - name: ep
    address: %s
    timeout: 200ms
    backoff_max: 1s
heads:
%s`

const headTemplate = `
  - name: %s
    endpoint: ep
    unit_id: %d
    period: 20ms
    range: {min: 700K, max: 2500K}
    channels:
      - name: short
        band: {from: 0.875um, to: 0.925um}
        signal: {address: 0, type: float32}
      - name: long
        band: {from: 1.025um, to: 1.075um}
        signal: {address: 2, type: float32}
`

func parseConfig(t testing.TB, text string) *config.Config {
	t.Helper()
	cfg, err := config.Parse("test.yaml", []byte(text))
	if err != nil {
		t.Fatalf("%v\n%s", err, text)
	}
	return cfg
}

// setBlackbody serves the band signals of a blackbody at tk kelvin for unit.
func setBlackbody(t testing.TB, srv *modbustest.Server, unit uint8, tk float64) {
	t.Helper()
	regs := make([]uint16, 4)
	for i, band := range [][2]float64{{0.875e-6, 0.925e-6}, {1.025e-6, 1.075e-6}} {
		m, err := convert.NewBand(band[0], band[1], convert.C2ITS90)
		if err != nil {
			t.Fatal(err)
		}
		f := modbus.Field{Address: uint16(2 * i), Type: modbus.Float32, Scale: 1}
		if err := f.Encode(m.Signal(tk), regs, 0); err != nil {
			t.Fatal(err)
		}
	}
	srv.Set(unit, modbus.InputRegisters, 0, regs...)
}

// TestFaultIsolation: a head answering a Modbus exception and a silent
// head publish bad readings with their OPC UA status codes, while a
// healthy head on the same endpoint keeps publishing good ones.
func TestFaultIsolation(t *testing.T) {
	broker := mqtttest.Start(t)
	srv := modbustest.NewServer(t)
	for unit := uint8(1); unit <= 3; unit++ {
		setBlackbody(t, srv, unit, 1500)
	}
	srv.SetFault(2, modbustest.Fault{Kind: modbustest.Exception, Code: 0x04})
	srv.SetFault(3, modbustest.Fault{Kind: modbustest.Silent})
	heads := fmt.Sprintf(headTemplate, "healthy", 1) + fmt.Sprintf(headTemplate, "failing", 2) + fmt.Sprintf(headTemplate, "silent", 3)
	cfg := parseConfig(t, fmt.Sprintf(threeHeads, broker.URL(), srv.Addr(), heads))
	topics := mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}
	sub := mqtttest.Subscribe(t, broker.URL(), topics.Reading("+"))
	startDaemon(t, Options{Config: cfg})

	want := map[string]struct {
		quality string
		status  uint32
	}{
		"healthy": {"good", statusGood},
		"failing": {"bad", statusBadDeviceFailure},
		"silent":  {"bad", statusBadTimeout},
	}
	seen := map[string]int{}
	deadline := time.After(20 * time.Second)
	// Enough healthy readings to show that the silent head's timeouts do
	// not stall the line: 20 ms period, 200 ms timeout, backoff to 1 s.
	for seen["healthy"] < 30 || seen["failing"] == 0 || seen["silent"] == 0 {
		var m mqtttest.Message
		select {
		case m = <-sub.C:
		case <-deadline:
			t.Fatalf("readings seen: %v", seen)
		}
		var r mqtt.Reading
		if err := json.Unmarshal(m.Payload, &r); err != nil {
			t.Fatal(err)
		}
		w := want[r.Head]
		if r.Quality != w.quality || r.StatusCode != w.status {
			t.Errorf("%s: quality %s status %#x, want %s %#x: %s", r.Head, r.Quality, r.StatusCode, w.quality, w.status, m.Payload)
		}
		switch r.Head {
		case "healthy":
			if r.RawTemperature == nil || math.Abs(*r.RawTemperature-1500) > 0.01 {
				t.Errorf("healthy head: %s", m.Payload)
			}
		default:
			if r.Temperature != nil || len(r.Flags) != 1 || r.Flags[0] != "comm_error" {
				t.Errorf("%s: failed poll must carry no values and flag comm_error: %s", r.Head, m.Payload)
			}
		}
		seen[r.Head]++
	}
}

// TestBrokerAbsentAtStart: the daemon polls and queues while no broker
// listens, and delivers what it queued, in order, once one comes.
func TestBrokerAbsentAtStart(t *testing.T) {
	broker := mqtttest.StartMosquitto(t)
	broker.Stop()
	srv := modbustest.NewServer(t)
	setBlackbody(t, srv, 1, 1200)
	cfg := parseConfig(t, fmt.Sprintf(threeHeads, broker.URL(), srv.Addr(), fmt.Sprintf(headTemplate, "only", 1)))
	d, err := New(Options{Config: cfg})
	if err != nil {
		t.Fatal(err)
	}
	first := d.seq.Load() + 1
	ctx := t.Context()
	done := make(chan error, 1)
	go func() { done <- d.Run(ctx) }()

	// Wait until the daemon has made readings with nowhere to send them.
	for srv.Requests() < 10 {
		select {
		case err := <-done:
			t.Fatalf("daemon stopped without a broker: %v", err)
		case <-time.After(10 * time.Millisecond):
		}
	}
	broker.Start()
	sub := mqtttest.Subscribe(t, broker.URL(), mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}.Reading("only"))
	// The subscriber may connect after the first queued readings went out;
	// what it must see is an unbroken run of sequence numbers.
	var prev uint64
	for n := 0; n < 20; n++ {
		m, ok := sub.Next(20 * time.Second)
		if !ok {
			t.Fatalf("after %d readings: no more", n)
		}
		var r mqtt.Reading
		if err := json.Unmarshal(m.Payload, &r); err != nil {
			t.Fatal(err)
		}
		if r.Seq < first {
			t.Fatalf("seq %d before the first %d", r.Seq, first)
		}
		if r.Seq <= prev {
			continue // a duplicate after a reconnection is allowed
		}
		if prev != 0 && r.Seq != prev+1 {
			t.Fatalf("seq %d after %d: a reading was lost", r.Seq, prev)
		}
		prev = r.Seq
	}
}
