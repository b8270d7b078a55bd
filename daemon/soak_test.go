package daemon

import (
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"math/rand/v2"
	"os"
	"runtime"
	"strings"
	"testing"
	"time"

	"glowgate/bus/modbus/modbustest"
	"glowgate/bus/mqtt/mqtttest"
	"glowgate/daemon/config"
)

var (
	soak    = flag.Bool("soak", false, "run TestSoak for -soak-for instead of a short smoke run")
	soakFor = flag.Duration("soak-for", 10*time.Minute, "how long TestSoak runs with -soak")
)

// TestSoak runs 64 heads at 10 Hz through a durable outbox to a real
// Mosquitto while faults come at random: the link to the broker cut or
// stalled, heads silent or answering exceptions, the configuration
// reloaded. Afterwards every sequence number from the first to the last
// has reached the subscriber, the goroutines are back to their number
// before, and the heap stayed bounded.
//
//	go test -count=1 -run TestSoak ./daemon/ -soak              # 10 minutes
//	go test -count=1 -run TestSoak ./daemon/ -soak -soak-for 60s
//
// Without -soak it runs for five seconds.
func TestSoak(t *testing.T) {
	length := 5 * time.Second
	if *soak {
		length = *soakFor
	}
	goroutines := runtime.NumGoroutine()
	broker := mqtttest.Start(t)
	proxy := mqtttest.NewProxy(t, broker.Addr())
	srv := modbustest.NewServer(t)
	const heads = 64
	var hs strings.Builder
	for i := 1; i <= heads; i++ {
		setBlackbody(t, srv, uint8(i), 1400)
		fmt.Fprintf(&hs, `
  - name: h%02d
    endpoint: ep
    unit_id: %d
    period: 100ms
    range: {min: 700K, max: 2500K}
    channels:
      - {name: short, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
    alarms:
      - {name: blind, kind: bad_quality, on_delay: 500ms, priority: high}
`, i, i)
	}
	text := fmt.Sprintf(`
gateway: soak-gw
unit: K
mqtt: {brokers: [%s], connect_timeout: 1s}
state_dir: %s
http: {listen: ""}
endpoints: [{name: ep, address: %s, timeout: 100ms, backoff_max: 1s}]
heads:%s`, proxy.URL(), t.TempDir(), srv.Addr(), hs.String())
	path := t.TempDir() + "/soak.yaml"
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	cfg, err := config.Load(path)
	if err != nil {
		t.Fatal(err)
	}
	// Readings, alarm events and alarm states all carry the gateway's
	// sequence number.
	sub := mqtttest.Subscribe(t, broker.URL(), cfg.MQTT.Root+"/"+cfg.Gateway+"/#")
	seqs := map[uint64]bool{}
	var newest uint64
	take := func(m mqtttest.Message) {
		var r struct {
			Seq uint64 `json:"seq"`
		}
		if json.Unmarshal(m.Payload, &r) != nil || r.Seq == 0 {
			return // the state ("online") and the heads' info carry none
		}
		seqs[r.Seq] = true
		newest = max(newest, r.Seq)
	}

	reload := make(chan os.Signal, 1)
	d, err := New(Options{Config: cfg, Load: func() (*config.Config, error) { return config.Load(path) }, Reload: reload})
	if err != nil {
		t.Fatal(err)
	}
	runCtx, stop := context.WithCancel(t.Context())
	defer stop()
	done := make(chan error, 1)
	go func() { done <- d.Run(runCtx) }()

	rng := rand.New(rand.NewPCG(1, 2))
	faults := map[string]int{}
	var peakHeap uint64
	end := time.Now().Add(length)
	next := time.NewTicker(700 * time.Millisecond)
	defer next.Stop()
	stalled := false
	for time.Now().Before(end) {
		select {
		case m := <-sub.C:
			take(m)
		case <-next.C:
			if stalled {
				proxy.Resume()
				stalled = false
			}
			switch k := rng.IntN(5); k {
			case 0:
				proxy.Cut()
				faults["link cut"]++
			case 1:
				proxy.Stall()
				stalled = true
				faults["link stalled"]++
			case 2:
				srv.SetFault(uint8(1+rng.IntN(heads)), modbustest.Fault{Kind: modbustest.Silent, Times: 3})
				faults["head silent"]++
			case 3:
				srv.SetFault(uint8(1+rng.IntN(heads)), modbustest.Fault{Kind: modbustest.Exception, Code: 0x04, Times: 5})
				faults["head exception"]++
			case 4:
				select {
				case reload <- os.Interrupt:
				default:
				}
				faults["configuration reload"]++
			}
			var ms runtime.MemStats
			runtime.ReadMemStats(&ms)
			peakHeap = max(peakHeap, ms.HeapInuse)
		}
	}
	if stalled {
		proxy.Resume()
	}
	// Everything numbered by now must arrive while the daemon runs on.
	target := d.outbox.Stats().LastSeq
	deadline := time.After(60 * time.Second)
	for newest < target {
		select {
		case m := <-sub.C:
			take(m)
		case <-deadline:
			t.Fatalf("seq %d not received within a minute (newest %d); publisher %+v; outbox %+v", target, newest, d.PublisherStats(), d.outbox.Stats())
		}
	}
	stop()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	for {
		m, ok := sub.Next(time.Second)
		if !ok {
			break
		}
		take(m)
	}
	lo := newest
	for s := range seqs {
		lo = min(lo, s)
	}
	// Up to target every number must be there; readings after it may
	// still have been in flight when the daemon stopped.
	missing := 0
	for s := lo; s <= target; s++ {
		if !seqs[s] {
			missing++
		}
	}
	t.Logf("soak %v: %d readings (seq %d..%d), faults %v, peak heap %.1f MB", length, len(seqs), lo, newest, faults, float64(peakHeap)/(1<<20))
	if missing > 0 {
		t.Errorf("%d sequence numbers missing between %d and %d", missing, lo, target)
	}
	if len(seqs) < int(length/time.Second)*heads*5 {
		t.Errorf("only %d readings in %v from %d heads at 10 Hz", len(seqs), length, heads)
	}
	if peakHeap > 256<<20 {
		t.Errorf("peak heap %.1f MB, want under 256 MB", float64(peakHeap)/(1<<20))
	}
	// The daemon's goroutines are gone (the test's own helpers remain,
	// with a margin for paho's and the broker helpers' lingering ones).
	if n := runtime.NumGoroutine(); n > goroutines+40 {
		t.Errorf("%d goroutines after the daemon stopped, %d before", n, goroutines)
	}
}
