package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/modbus/modbustest"
	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
	"glowgate/convert"
)

// binary is the glowgate executable the lifecycle tests run.
var binary string

func TestMain(m *testing.M) {
	dir, err := os.MkdirTemp("", "glowgate-bin")
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
	binary = filepath.Join(dir, "glowgate")
	build := exec.Command("go", "build", "-o", binary, ".")
	build.Stderr = os.Stderr
	if err := build.Run(); err != nil {
		fmt.Fprintln(os.Stderr, "build glowgate:", err)
		os.RemoveAll(dir)
		os.Exit(1)
	}
	code := m.Run()
	os.RemoveAll(dir)
	os.Exit(code)
}

// gatewayConfig is a configuration with heads at unit ids 1.. on one
// endpoint, float32 signals at input registers 0 and 2.
func gatewayConfig(broker, endpoint string, heads ...string) string {
	var b strings.Builder
	fmt.Fprintf(&b, "gateway: lifecycle-gw\nunit: degC\nmqtt:\n  brokers: [%s]\nendpoints:\n  - name: ep\n    address: %s\n    timeout: 200ms\nheads:\n", broker, endpoint)
	for i, h := range heads {
		fmt.Fprintf(&b, `  - name: %s
    endpoint: ep
    unit_id: %d
    period: 50ms
    range: {min: 600degC, max: 2000degC}
    channels:
      - {name: short, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
`, h, i+1)
	}
	return b.String()
}

// blackbodyRegisters are the four registers of the band signals of a
// blackbody at tk, float32 at 0 and 2.
func blackbodyRegisters(t testing.TB, tk float64) []uint16 {
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
	return regs
}

// headServer serves n units with the band signals of a blackbody at tk.
func headServer(t testing.TB, n int, tk float64) *modbustest.Server {
	t.Helper()
	srv := modbustest.NewServer(t)
	regs := blackbodyRegisters(t, tk)
	for unit := 1; unit <= n; unit++ {
		srv.Set(uint8(unit), modbus.InputRegisters, 0, regs...)
	}
	return srv
}

func writeFile(t testing.TB, path, text string) {
	t.Helper()
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
}

// proc is a running glowgate with its standard error captured.
type proc struct {
	cmd    *exec.Cmd
	mu     sync.Mutex
	stderr bytes.Buffer
	done   chan error
}

func (p *proc) Write(b []byte) (int, error) {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.stderr.Write(b)
}

func (p *proc) log() string {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.stderr.String()
}

func start(t testing.TB, stdout io.Writer, args ...string) *proc {
	t.Helper()
	p := &proc{cmd: exec.Command(binary, args...), done: make(chan error, 1)}
	p.cmd.Stdout = stdout
	p.cmd.Stderr = p
	if err := p.cmd.Start(); err != nil {
		t.Fatal(err)
	}
	go func() { p.done <- p.cmd.Wait() }()
	t.Cleanup(func() {
		p.cmd.Process.Kill()
		<-p.done
		if t.Failed() {
			t.Logf("glowgate %s stderr:\n%s", strings.Join(args, " "), p.log())
		}
	})
	return p
}

// wait waits for the process to exit and returns its exit status.
func (p *proc) wait(t *testing.T, timeout time.Duration) int {
	t.Helper()
	select {
	case <-p.done:
		p.done <- nil // let the cleanup's receive return
		return p.cmd.ProcessState.ExitCode()
	case <-time.After(timeout):
		t.Fatalf("glowgate did not exit within %v", timeout)
		return -1
	}
}

func isPayload(s string) func(mqtttest.Message) bool {
	return func(m mqtttest.Message) bool { return string(m.Payload) == s }
}

// TestSIGTERMPublishesOffline: a terminated daemon publishes its offline
// state itself and exits 0.
func TestSIGTERMPublishesOffline(t *testing.T) {
	broker := mqtttest.Start(t)
	srv := headServer(t, 1, 1400)
	cfgPath := filepath.Join(t.TempDir(), "gw.yaml")
	writeFile(t, cfgPath, gatewayConfig(broker.URL(), srv.Addr(), "strand"))
	topics := mqtt.Topics{Root: "glowgate", Gateway: "lifecycle-gw"}
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/#")

	p := start(t, io.Discard, "run", "-config", cfgPath)
	sub.WaitFor(topics.State(), isPayload("online"), 10*time.Second)
	sub.WaitFor(topics.Reading("strand"), nil, 10*time.Second)
	p.cmd.Process.Signal(syscall.SIGTERM)
	if code := p.wait(t, 10*time.Second); code != 0 {
		t.Fatalf("exit status %d after SIGTERM, want 0", code)
	}
	sub.WaitFor(topics.State(), isPayload("offline"), 5*time.Second)
}

// TestSIGKILLWill: a daemon killed outright cannot say goodbye; the
// broker publishes its Will, the offline state.
func TestSIGKILLWill(t *testing.T) {
	broker := mqtttest.Start(t)
	srv := headServer(t, 1, 1400)
	cfgPath := filepath.Join(t.TempDir(), "gw.yaml")
	writeFile(t, cfgPath, gatewayConfig(broker.URL(), srv.Addr(), "strand"))
	topics := mqtt.Topics{Root: "glowgate", Gateway: "lifecycle-gw"}
	sub := mqtttest.Subscribe(t, broker.URL(), topics.State())

	p := start(t, io.Discard, "run", "-config", cfgPath)
	sub.WaitFor(topics.State(), isPayload("online"), 10*time.Second)
	p.cmd.Process.Kill()
	p.wait(t, 5*time.Second)
	m := sub.WaitFor(topics.State(), isPayload("offline"), 10*time.Second)
	_ = m
	// The Will is retained: a newcomer sees the gateway offline too.
	late := mqtttest.Subscribe(t, broker.URL(), topics.State())
	if m := late.WaitFor(topics.State(), nil, 5*time.Second); string(m.Payload) != "offline" || !m.Retained {
		t.Fatalf("retained state %q (retained %v), want offline", m.Payload, m.Retained)
	}
}

// TestSIGHUPReload: SIGHUP brings in a valid new configuration, and an
// invalid one is logged with its errors while the running one stays.
func TestSIGHUPReload(t *testing.T) {
	broker := mqtttest.Start(t)
	srv := headServer(t, 2, 1400)
	cfgPath := filepath.Join(t.TempDir(), "gw.yaml")
	writeFile(t, cfgPath, gatewayConfig(broker.URL(), srv.Addr(), "first"))
	topics := mqtt.Topics{Root: "glowgate", Gateway: "lifecycle-gw"}
	sub := mqtttest.Subscribe(t, broker.URL(), topics.Reading("+"))

	p := start(t, io.Discard, "run", "-config", cfgPath)
	sub.WaitFor(topics.Reading("first"), nil, 10*time.Second)

	writeFile(t, cfgPath, gatewayConfig(broker.URL(), srv.Addr(), "first", "second"))
	p.cmd.Process.Signal(syscall.SIGHUP)
	sub.WaitFor(topics.Reading("second"), nil, 10*time.Second)

	writeFile(t, cfgPath, strings.Replace(gatewayConfig(broker.URL(), srv.Addr(), "first"), "period: 50ms", "period: 0s", 1))
	p.cmd.Process.Signal(syscall.SIGHUP)
	waitLog(t, p, "configuration reload rejected", 10*time.Second)
	if !strings.Contains(p.log(), "gw.yaml:") {
		t.Errorf("the rejected reload's log does not name file and line:\n%s", p.log())
	}
	// Both heads of the running configuration still publish.
	for _, h := range []string{"first", "second"} {
		sub.WaitFor(topics.Reading(h), nil, 10*time.Second)
	}
}

// waitLog waits until the process has logged want.
func waitLog(t *testing.T, p *proc, want string, timeout time.Duration) {
	t.Helper()
	tick := time.NewTicker(20 * time.Millisecond)
	defer tick.Stop()
	deadline := time.After(timeout)
	for !strings.Contains(p.log(), want) {
		select {
		case <-tick.C:
		case <-deadline:
			t.Fatalf("no %q in the log within %v", want, timeout)
		}
	}
}

// TestDemoWithPort1883Taken: the demo finds another port for its broker
// when 1883 is in use, says where, and readings of every head flow there.
func TestDemoWithPort1883Taken(t *testing.T) {
	if l, err := net.Listen("tcp", "127.0.0.1:1883"); err == nil {
		t.Cleanup(func() { l.Close() })
	} // otherwise something else holds it already, which is the case to test

	out := &lines{ch: make(chan string, 1024)}
	p := start(t, out, "demo", "-summary", "1s")
	re := regexp.MustCompile(`mosquitto_sub -h (\S+) -p (\d+) -t 'glowgate/#'`)
	var host, port string
	for host == "" {
		select {
		case line := <-out.ch:
			if m := re.FindStringSubmatch(line); m != nil {
				host, port = m[1], m[2]
			}
		case <-time.After(20 * time.Second):
			t.Fatal("the demo printed no subscribe command")
		}
	}
	if port == "1883" {
		t.Fatal("the demo claims port 1883, which is taken")
	}
	sub := mqtttest.Subscribe(t, "tcp://"+net.JoinHostPort(host, port), "glowgate/+/+/reading")
	heads := map[string]bool{}
	for len(heads) < 3 {
		m, ok := sub.Next(20 * time.Second)
		if !ok {
			t.Fatalf("readings from %v only", heads)
		}
		var r mqtt.Reading
		if err := json.Unmarshal(m.Payload, &r); err != nil {
			t.Fatal(err)
		}
		heads[r.Head] = true
	}
	p.cmd.Process.Signal(syscall.SIGINT)
	if code := p.wait(t, 10*time.Second); code != 0 {
		t.Fatalf("demo exit status %d after Ctrl-C, want 0", code)
	}
}

// lines splits what a process writes into lines on a channel.
type lines struct {
	buf []byte
	ch  chan string
}

func (l *lines) Write(b []byte) (int, error) {
	l.buf = append(l.buf, b...)
	for {
		i := bytes.IndexByte(l.buf, '\n')
		if i < 0 {
			return len(b), nil
		}
		select {
		case l.ch <- string(l.buf[:i]):
		default:
		}
		l.buf = l.buf[i+1:]
	}
}

// runCLI runs a subcommand in-process and returns its status and output.
func runCLI(args ...string) (code int, stdout, stderr string) {
	var o, e bytes.Buffer
	code = run(context.Background(), &env{stdout: &o, stderr: &e}, args)
	return code, o.String(), e.String()
}

func TestCheck(t *testing.T) {
	code, out, errOut := runCLI("check", "-config", "../../configs/demo.yaml")
	if code != 0 || !strings.Contains(out, "ok") || !strings.Contains(out, "glowgate/brackwater-gw1/state") {
		t.Fatalf("check demo.yaml: status %d\n%s%s", code, out, errOut)
	}
	bad := filepath.Join(t.TempDir(), "bad.yaml")
	writeFile(t, bad, strings.Replace(gatewayConfig("tcp://127.0.0.1:1883", "127.0.0.1:15020", "a", "b"), "period: 50ms", "period: 0s", 2))
	code, _, errOut = runCLI("check", "-config", bad)
	if code != 2 {
		t.Fatalf("check of an invalid file: status %d, want 2", code)
	}
	for _, want := range []string{"bad.yaml:13: heads[0].period:", "bad.yaml:21: heads[1].period:"} {
		if !strings.Contains(errOut, want) {
			t.Errorf("check output lacks %q:\n%s", want, errOut)
		}
	}
	batched := filepath.Join(t.TempDir(), "batched.yaml")
	writeFile(t, batched, strings.Replace(gatewayConfig("tcp://127.0.0.1:1883", "127.0.0.1:15020", "a", "b"), "timeout: 200ms\n", "timeout: 200ms\n    in_flight: 8\n", 1))
	code, out, errOut = runCLI("check", "-config", batched)
	if want := "endpoint ep  modbus tcp 127.0.0.1:15020  timeout 200ms, 8 requests in flight\n"; code != 0 || !strings.Contains(out, want) {
		t.Errorf("check: status %d, output lacks %q:\n%s%s", code, want, out, errOut)
	}
}

func TestUsage(t *testing.T) {
	for _, tc := range []struct {
		args []string
		code int
	}{
		{nil, 2},
		{[]string{"help"}, 0},
		{[]string{"frobnicate"}, 2},
		{[]string{"run"}, 2}, // no -config
		{[]string{"run", "-config", "/nonexistent"}, 2}, // unreadable configuration
		{[]string{"run", "-nosuchflag"}, 2},
		{[]string{"check", "-h"}, 0},
		{[]string{"version"}, 0},
		{[]string{"convert", "-config", "../../configs/demo.yaml", "-head", "caster1-strand", "1", "x"}, 2},
		{[]string{"convert", "-config", "../../configs/demo.yaml", "-head", "nosuchhead", "1", "2"}, 2},
	} {
		if code, out, errOut := runCLI(tc.args...); code != tc.code {
			t.Errorf("glowgate %v: status %d, want %d\n%s%s", tc.args, code, tc.code, out, errOut)
		}
	}
}

// TestConvertCommand: convert prints one Reading; the signals of a
// blackbody at 1200 °C come back as 1200 °C.
func TestConvertCommand(t *testing.T) {
	cfgPath := filepath.Join(t.TempDir(), "gw.yaml")
	writeFile(t, cfgPath, gatewayConfig("tcp://127.0.0.1:1883", "127.0.0.1:15020", "strand"))
	var s [2]float64
	for i, band := range [][2]float64{{0.875e-6, 0.925e-6}, {1.025e-6, 1.075e-6}} {
		m, _ := convert.NewBand(band[0], band[1], convert.C2ITS90)
		s[i] = m.Signal(1200 + 273.15)
	}
	code, out, errOut := runCLI("convert", "-config", cfgPath, "-head", "strand", fmt.Sprint(s[0]), fmt.Sprint(s[1]))
	if code != 0 {
		t.Fatalf("status %d: %s", code, errOut)
	}
	var r map[string]any
	if err := json.Unmarshal([]byte(out), &r); err != nil {
		t.Fatalf("%v: %s", err, out)
	}
	if got := r["temperature"].(float64); got < 1199.99 || got > 1200.01 {
		t.Errorf("temperature %v, want 1200 degC", got)
	}
	if r["quality"] != "good" || r["unit"] != "degC" || r["gateway"] != "lifecycle-gw" {
		t.Errorf("reading: %s", out)
	}
	if lines := strings.Count(strings.TrimSuffix(out, "\n"), "\n") + 1; lines != 1 {
		t.Errorf("convert printed %d lines, want one: %q", lines, out)
	}
}

// TestReadmeConfiguration: the configuration example in README.md is a
// valid configuration.
func TestReadmeConfiguration(t *testing.T) {
	readme, err := os.ReadFile("../../README.md")
	if err != nil {
		t.Fatal(err)
	}
	_, block, ok := strings.Cut(string(readme), "```yaml\n")
	if !ok {
		t.Fatal("README.md has no yaml block")
	}
	block, _, _ = strings.Cut(block, "```")
	path := filepath.Join(t.TempDir(), "readme.yaml")
	writeFile(t, path, block)
	if code, out, errOut := runCLI("check", "-config", path); code != 0 {
		t.Fatalf("the README's configuration: status %d\n%s%s", code, out, errOut)
	}
}

// TestSIGKILLDuringOutage: the daemon keeps readings in its durable
// outbox while the broker is out of reach, is killed outright, and is
// started again on the same state directory; once the broker is back, the
// subscriber holds every sequence number from the first it saw to the
// last (duplicates allowed: QoS 1), except those a gap event names: the
// numbers the killed run had reserved and not committed ("unclean_stop").
func TestSIGKILLDuringOutage(t *testing.T) {
	broker := mqtttest.Start(t)
	proxy := mqtttest.NewProxy(t, broker.Addr())
	srv := headServer(t, 2, 1400)
	dir := t.TempDir()
	cfgPath := filepath.Join(dir, "gw.yaml")
	writeFile(t, cfgPath, gatewayConfig(proxy.URL(), srv.Addr(), "first", "second"))
	state := filepath.Join(dir, "state")
	sub := mqtttest.Subscribe(t, broker.URL(), "glowgate/lifecycle-gw/#")

	seqs := map[uint64]bool{}
	var gaps []string
	collect := func(until func() bool, timeout time.Duration) {
		t.Helper()
		deadline := time.After(timeout)
		for !until() {
			select {
			case m := <-sub.C:
				if !strings.HasSuffix(m.Topic, "/reading") && !strings.HasSuffix(m.Topic, "/events") {
					continue // the state and the heads' info carry no number
				}
				var r struct {
					Seq      uint64
					Type     string
					From, To uint64
					Reason   string
				}
				if err := json.Unmarshal(m.Payload, &r); err != nil {
					t.Fatal(err)
				}
				seqs[r.Seq] = true
				if r.Type == "gap" {
					gaps = append(gaps, fmt.Sprintf("%s %d-%d", r.Reason, r.From, r.To))
					for s := r.From; s <= r.To; s++ {
						seqs[s] = true
					}
				}
			case <-deadline:
				t.Fatalf("%d sequence numbers received or named by gap events %q", len(seqs), gaps)
			}
		}
	}
	p := start(t, io.Discard, "run", "-config", cfgPath, "-state-dir", state)
	collect(func() bool { return len(seqs) >= 20 }, 10*time.Second)

	// The outage: the link goes silent and breaks; readings pile up.
	proxy.Stall()
	proxy.Cut()
	waitPolls(t, srv, 100, p.done) // two heads at 20 Hz: some 2.5 s of readings
	p.cmd.Process.Kill()
	p.wait(t, 5*time.Second)

	p = start(t, io.Discard, "run", "-config", cfgPath, "-state-dir", state)
	proxy.Resume()
	waitPolls(t, srv, 40, p.done)
	// Everything up to a reading made after the restart must arrive.
	var newest uint64
	collect(func() bool {
		for s := range seqs {
			newest = max(newest, s)
		}
		if len(gaps) == 0 || len(seqs) < 150 {
			return false
		}
		lo := newest
		for s := range seqs {
			lo = min(lo, s)
		}
		return uint64(len(seqs)) == newest-lo+1
	}, 30*time.Second)
	if len(gaps) != 1 || !strings.HasPrefix(gaps[0], "unclean_stop ") {
		t.Errorf("gap events %q, want one of reason unclean_stop", gaps)
	}
}

// waitPolls waits until the Modbus responder has answered n more
// requests, failing if the daemon exits first.
func waitPolls(t *testing.T, srv *modbustest.Server, n int, exited <-chan error) {
	t.Helper()
	target := srv.Requests() + n
	tick := time.NewTicker(10 * time.Millisecond)
	defer tick.Stop()
	deadline := time.After(20 * time.Second)
	for srv.Requests() < target {
		select {
		case <-exited:
			t.Fatal("the daemon exited")
		case <-deadline:
			t.Fatalf("%d of %d polls", srv.Requests()-target+n, n)
		case <-tick.C:
		}
	}
}
