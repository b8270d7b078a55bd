package main

import (
	"bufio"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"net"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/mqtt/mqtttest"
)

var rssFor = flag.Duration("rss-for", time.Minute, "how long BenchmarkRunRSS lets the daemon run before reading its RSS")

// BenchmarkRunEndToEnd runs the simulator (glowgate sim) and the daemon
// (glowgate run), each as its own process, the daemon publishing at QoS 1
// (or 0) to a real Mosquitto, with a subscriber in the test process. It
// reports readings/s delivered and the latency from acquisition to the
// subscriber:
//
//	heads=50/flat-out        50 heads on one endpoint, every head every 2 ms
//	                         (25,000 readings/s offered): one connection's
//	                         serial transactions are the ceiling
//	heads=50/endpoints=50/…  each head its own endpoint, as heads wired one
//	                         to an address are: the daemon is the ceiling
//	heads=50/1000-per-s      every head every 50 ms: latency at a plant-like load
//	heads=64/10Hz            the footprint target's load
//	…/qos=0                  readings at QoS 0 (mqtt.qos: 0)
//	…/in_flight=N            the endpoint's requests N in flight at once
//	                         (endpoints[].in_flight), answered by the
//	                         simulator in one write
//
// Latency is the subscriber's clock minus the reading's time. That time is
// when the poll's request was sent, before the reply, and is truncated to
// the millisecond, so the figures overstate the latency from poll reply to
// subscriber by up to the Modbus round trip plus 1 ms; they are upper
// bounds. Beside them: the QoS 1 ceiling of one plain paho client to the
// same broker in the same run (mqtttest.RawQoS1Ceiling), and the ratio.
//
//	go test -run '^$' -bench RunEndToEnd -benchtime 20000x ./cmd/glowgate/
//
// With -e2e-profile DIR each case writes the daemon's CPU profile to
// DIR/<case>.pprof (glowgate run -cpu-profile).
func BenchmarkRunEndToEnd(b *testing.B) {
	for _, bc := range []struct {
		name      string
		heads     int
		endpoints int
		period    time.Duration
		qos       int
		inFlight  int
	}{
		{"heads=50/flat-out", 50, 1, 2 * time.Millisecond, 1, 1},
		{"heads=50/flat-out/in_flight=50", 50, 1, 2 * time.Millisecond, 1, 50},
		{"heads=50/endpoints=50/flat-out", 50, 50, 2 * time.Millisecond, 1, 1},
		{"heads=50/endpoints=50/flat-out/qos=0", 50, 50, 2 * time.Millisecond, 0, 1},
		{"heads=50/1000-per-s", 50, 1, 50 * time.Millisecond, 1, 1},
		{"heads=50/1000-per-s/qos=0", 50, 1, 50 * time.Millisecond, 0, 1},
		{"heads=50/1000-per-s/in_flight=50", 50, 1, 50 * time.Millisecond, 1, 50},
		{"heads=64/10Hz", 64, 1, 100 * time.Millisecond, 1, 1},
		{"heads=64/10Hz/in_flight=64", 64, 1, 100 * time.Millisecond, 1, 64},
	} {
		b.Run(bc.name, func(b *testing.B) { benchRun(b, bc.heads, bc.endpoints, bc.period, bc.qos, bc.inFlight) })
	}
}

// freeAddrs returns n loopback addresses whose ports were free a moment
// ago, for the simulator to listen on.
func freeAddrs(tb testing.TB, n int) []string {
	tb.Helper()
	addrs := make([]string, n)
	for i := range addrs {
		l, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			tb.Fatal(err)
		}
		addrs[i] = l.Addr().String()
		defer l.Close() // held until all are chosen, so that none repeats
	}
	return addrs
}

// startSim runs `glowgate sim` on the configuration at cfgPath, as its own
// process, and waits until it serves all of its endpoints.
func startSim(tb testing.TB, cfgPath string, endpoints int) {
	tb.Helper()
	r, w := io.Pipe()
	start(tb, w, "sim", "-config", cfgPath, "-log-level", "warn")
	serving := make(chan struct{})
	go func() {
		sc := bufio.NewScanner(r)
		for n := 0; sc.Scan(); {
			if strings.HasPrefix(sc.Text(), "serving ") {
				if n++; n == endpoints {
					close(serving)
				}
			}
		}
	}()
	tb.Cleanup(func() { w.Close() })
	select {
	case <-serving:
	case <-time.After(10 * time.Second):
		tb.Fatalf("the simulator did not serve %d endpoints within 10 s", endpoints)
	}
}

var e2eProfile = flag.String("e2e-profile", "", "directory for the daemon's CPU profile of each BenchmarkRunEndToEnd case")

// spreadConfig is gatewayConfig with n heads spread round-robin over one
// endpoint per address, each head unit 1 on its endpoint's responder when
// there are as many addresses as heads.
func spreadConfig(broker string, addrs []string, n int, period time.Duration, qos, inFlight int) string {
	var b strings.Builder
	fmt.Fprintf(&b, "gateway: lifecycle-gw\nunit: degC\nmqtt:\n  brokers: [%s]\n  queue: 200000\n  qos: %d\nendpoints:\n", broker, qos)
	for i, a := range addrs {
		fmt.Fprintf(&b, "  - {name: ep%02d, address: %s, timeout: 200ms, in_flight: %d}\n", i+1, a, inFlight)
	}
	b.WriteString("heads:\n")
	for i := range n {
		fmt.Fprintf(&b, `  - name: head%02d
    endpoint: ep%02d
    unit_id: %d
    period: %v
    range: {min: 600degC, max: 2000degC}
    channels:
      - {name: short, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
`, i+1, i%len(addrs)+1, i/len(addrs)+1, period)
	}
	return b.String()
}

// procCPU is the CPU time a process has used so far (user + system),
// from /proc/PID/stat in clock ticks of 10 ms (USER_HZ = 100 on Linux;
// proc(5)).
func procCPU(tb testing.TB, pid int) time.Duration {
	tb.Helper()
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		tb.Fatal(err)
	}
	// Fields after the command name, which is in parentheses and may hold spaces.
	f := strings.Fields(string(b[strings.LastIndexByte(string(b), ')')+2:]))
	utime, _ := strconv.ParseInt(f[11], 10, 64)
	stime, _ := strconv.ParseInt(f[12], 10, 64)
	return time.Duration(utime+stime) * 10 * time.Millisecond
}

func benchRun(b *testing.B, n, endpoints int, period time.Duration, qos, inFlight int) {
	broker := mqtttest.Start(b)
	cfgPath := filepath.Join(b.TempDir(), "gw.yaml")
	writeFile(b, cfgPath, spreadConfig(broker.URL(), freeAddrs(b, endpoints), n, period, qos, inFlight))
	startSim(b, cfgPath, endpoints)
	sub := mqtttest.Subscribe(b, broker.URL(), "glowgate/+/+/reading")
	args := []string{"run", "-config", cfgPath, "-log-level", "warn"}
	if *e2eProfile != "" {
		name := strings.NewReplacer("/", "_", "=", "").Replace(strings.TrimPrefix(b.Name(), "BenchmarkRunEndToEnd/"))
		args = append(args, "-cpu-profile", filepath.Join(*e2eProfile, name+".pprof"))
	}
	p := start(b, io.Discard, args...)
	if *e2eProfile != "" {
		b.Cleanup(func() { // the profile is written when the run stops
			p.cmd.Process.Signal(syscall.SIGTERM)
			select {
			case <-p.done:
				p.done <- nil
			case <-time.After(10 * time.Second):
			}
		})
	}
	for i := 0; i < 2*n; i++ { // warm up: connected, every head answered
		if _, ok := sub.Next(10 * time.Second); !ok {
			b.Fatal("no readings")
		}
	}

	b.ResetTimer()
	began := time.Now()
	cpu0 := procCPU(b, p.cmd.Process.Pid)
	lat := make([]float64, 0, b.N)
	var r struct {
		Time time.Time `json:"time"`
	}
	for len(lat) < b.N {
		m, ok := sub.Next(10 * time.Second)
		if !ok {
			b.Fatalf("received %d of %d", len(lat), b.N)
		}
		at := time.Now()
		if err := json.Unmarshal(m.Payload, &r); err != nil {
			b.Fatal(err)
		}
		lat = append(lat, float64(at.Sub(r.Time).Microseconds())/1e3)
	}
	elapsed := time.Since(began)
	cpu := procCPU(b, p.cmd.Process.Pid) - cpu0
	rss, _ := procMemory(b, p.cmd.Process.Pid)
	rate := float64(len(lat)) / elapsed.Seconds()
	b.StopTimer()
	// CPU of the daemon process per 1,000 readings/s: the share of one
	// core it needs for that rate.
	b.ReportMetric(cpu.Seconds()/elapsed.Seconds()/(rate/1000)*100, "cpu%_per_1000/s")
	b.ReportMetric(rss, "rss_MB")
	slices.Sort(lat)
	b.ReportMetric(rate, "readings/s")
	b.ReportMetric(lat[len(lat)/2], "p50_ms")
	b.ReportMetric(lat[len(lat)*99/100], "p99_ms")
	b.ReportMetric(lat[len(lat)-1], "max_ms")
	ceiling := mqtttest.RawQoS1Ceiling(b, broker.URL(), 20000, 520)
	b.ReportMetric(ceiling, "raw_qos1_msgs/s")
	b.ReportMetric(rate/ceiling, "ratio_to_raw")
	b.ReportMetric(0, "ns/op")
}

// BenchmarkRunRSS is the footprint at the target load: the glowgate
// binary with 64 heads polled at 10 Hz (640 readings/s) on one endpoint
// served by the simulator (glowgate sim, its own process), publishing to
// a real Mosquitto. It reports the resident
// set size after -rss-for (default a minute), with the peak (VmHWM)
// beside it, and the CPU the daemon used over that time, in % of one core
// (the simulator's and the broker's work is not in it, but the kernel's
// loopback delivery of what the daemon sends is). The status page is on,
// as by default; GLOWGATE_RSS_NO_HTTP=1 measures without it. Cases: the
// endpoint's requests one at a time (in_flight=1, the default) and all 64
// in flight at once (in_flight=64); and after_faults, where 16 heads went
// silent for a second each, one after another, in the simulator's first
// 6 s, and the measurement starts at its 8th second: the polls they
// failed must fall due with the others again, or the gateway wakes more
// often and batches less from then on.
//
//	go test -run '^$' -bench RunRSS -benchtime 1x ./cmd/glowgate/
func BenchmarkRunRSS(b *testing.B) {
	for _, n := range []int{1, 64} {
		b.Run(fmt.Sprintf("in_flight=%d", n), func(b *testing.B) { benchRSS(b, n, false) })
	}
	b.Run("in_flight=64/after_faults", func(b *testing.B) { benchRSS(b, 64, true) })
}

func benchRSS(b *testing.B, inFlight int, faulted bool) {
	broker := mqtttest.Start(b)
	const heads = 64
	names := make([]string, heads)
	for i := range names {
		names[i] = fmt.Sprintf("head%02d", i+1)
	}
	cfgPath := filepath.Join(b.TempDir(), "gw.yaml")
	text := strings.ReplaceAll(gatewayConfig(broker.URL(), freeAddrs(b, 1)[0], names...), "period: 50ms", "period: 100ms")
	text = strings.Replace(text, "    timeout: 200ms\n", fmt.Sprintf("    timeout: 200ms\n    in_flight: %d\n", inFlight), 1)
	if os.Getenv("GLOWGATE_RSS_NO_HTTP") != "" {
		text = strings.Replace(text, "unit: degC\n", "unit: degC\nhttp: {listen: \"\"}\n", 1)
	}
	settled := time.Now()
	if faulted {
		for i := range 16 {
			name := fmt.Sprintf("  - name: %s\n", names[i])
			text = strings.Replace(text, name, fmt.Sprintf("%s    sim: {faults: [{kind: silent, at: %v, for: 1s}]}\n",
				name, 1500*time.Millisecond+time.Duration(i)*250*time.Millisecond), 1)
		}
		settled = settled.Add(8 * time.Second)
	}
	writeFile(b, cfgPath, text)
	startSim(b, cfgPath, 1)
	sub := mqtttest.Subscribe(b, broker.URL(), "glowgate/+/+/reading")

	p := start(b, io.Discard, "run", "-config", cfgPath)
	if _, ok := sub.Next(10 * time.Second); !ok {
		b.Fatal("no readings")
	}
	for wait := time.After(time.Until(settled)); ; {
		select {
		case <-sub.C:
			continue
		case <-wait:
		}
		break
	}
	received := 0
	began, cpu0 := time.Now(), procCPU(b, p.cmd.Process.Pid)
	deadline := time.After(*rssFor)
	for wait := true; wait; {
		select {
		case <-sub.C:
			received++
		case <-deadline:
			wait = false
		}
	}
	cpu := procCPU(b, p.cmd.Process.Pid) - cpu0
	b.ReportMetric(cpu.Seconds()/time.Since(began).Seconds()*100, "cpu_%_of_core")
	rss, hwm := procMemory(b, p.cmd.Process.Pid)
	b.ReportMetric(rss, "rss_MB")
	b.ReportMetric(hwm, "peak_rss_MB")
	b.ReportMetric(float64(received)/rssFor.Seconds(), "readings/s")
	b.ReportMetric(0, "ns/op")
}

// procMemory reads VmRSS and VmHWM of a process from /proc, in MB.
func procMemory(tb testing.TB, pid int) (rss, hwm float64) {
	tb.Helper()
	f, err := os.Open(fmt.Sprintf("/proc/%d/status", pid))
	if err != nil {
		tb.Fatal(err)
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		fields := strings.Fields(sc.Text())
		if len(fields) < 2 {
			continue
		}
		kb, _ := strconv.ParseFloat(fields[1], 64)
		switch fields[0] {
		case "VmRSS:":
			rss = kb / 1024
		case "VmHWM:":
			hwm = kb / 1024
		}
	}
	return rss, hwm
}

// BenchmarkRunAnnunciation measures the annunciation latency of the
// glowgate binary as its own process, with a state directory (every
// event committed with fsync before it is sent): from the reading that
// completes a zero on-delay to the alarm event at a subscriber of a real
// Mosquitto. An event's time is its poll's send time truncated to the
// millisecond, so the figures are upper bounds.
//
//	go test -run '^$' -bench RunAnnunciation -benchtime 200x ./cmd/glowgate/
func BenchmarkRunAnnunciation(b *testing.B) {
	broker := mqtttest.Start(b)
	srv := headServer(b, 1, 1400)
	dir := b.TempDir()
	cfgPath := filepath.Join(dir, "gw.yaml")
	text := strings.Replace(gatewayConfig(broker.URL(), srv.Addr(), "strand"), "period: 50ms", "period: 10ms", 1)
	text = strings.Replace(text, "unit: degC\n", "unit: degC\nhttp: {listen: \"\"}\n", 1)
	text += "    alarms:\n      - {name: high, kind: high, setpoint: 1450K, deadband: 5K, priority: high}\n"
	writeFile(b, cfgPath, text)
	events := mqtttest.Subscribe(b, broker.URL(), "glowgate/lifecycle-gw/events")
	start(b, io.Discard, "run", "-config", cfgPath, "-state-dir", filepath.Join(dir, "state"), "-log-level", "warn")
	hot, cold := blackbodyRegisters(b, 1500), blackbodyRegisters(b, 1400)
	var ev struct {
		To     string `json:"to"`
		Active bool   `json:"active"`
		Time   string `json:"time"`
	}
	lat := make([]float64, 0, b.N)
	b.ResetTimer()
	for range b.N {
		srv.Set(1, modbus.InputRegisters, 0, hot...)
		events.WaitFor("", func(m mqtttest.Message) bool {
			if json.Unmarshal(m.Payload, &ev) != nil || ev.To != "unacknowledged" {
				return false
			}
			at, _ := time.Parse(time.RFC3339Nano, ev.Time)
			lat = append(lat, float64(time.Since(at).Microseconds())/1e3)
			return true
		}, 10*time.Second)
		srv.Set(1, modbus.InputRegisters, 0, cold...)
		events.WaitFor("", func(m mqtttest.Message) bool { return json.Unmarshal(m.Payload, &ev) == nil && !ev.Active }, 10*time.Second)
	}
	b.StopTimer()
	slices.Sort(lat)
	b.ReportMetric(lat[len(lat)/2], "p50_ms")
	b.ReportMetric(lat[len(lat)*99/100], "p99_ms")
	b.ReportMetric(lat[len(lat)-1], "max_ms")
	b.ReportMetric(0, "ns/op")
}
