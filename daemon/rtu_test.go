package daemon

import (
	"encoding/json"
	"fmt"
	"math"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"glowgate/bus/modbus/modbustest"
	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
	"glowgate/daemon/config"
)

// casterConfig is configs/caster.yaml with its lines' devices moved into
// the test's own folder.
func casterConfig(t *testing.T) *config.Config {
	t.Helper()
	cfg, err := config.Load("../configs/caster.yaml")
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	for i := range cfg.Lines {
		cfg.Lines[i].Device = filepath.Join(dir, cfg.Lines[i].Name)
	}
	return cfg
}

// TestRTULinesEndToEnd runs configs/caster.yaml: two simulated RS-485
// lines with eight heads → daemon → real broker. Every head's readings
// arrive with their extras; the head whose keypad setting disagrees with
// the configuration is flagged, and the head with a noisy cable (a CRC
// error every 40 answers, retried) still reads good.
func TestRTULinesEndToEnd(t *testing.T) {
	broker := mqtttest.Start(t)
	cfg := casterConfig(t)
	startSimulator(t, cfg)
	topics := mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}
	sub := mqtttest.Subscribe(t, broker.URL(), topics.Reading("+"))
	startDaemon(t, Options{Config: cfg, Brokers: []string{broker.URL()}})

	seen := map[string]mqtt.Reading{}
	good := map[string]int{}
	deadline := time.After(30 * time.Second)
	for len(seen) < len(cfg.Heads) || good["mould-exit-s4"] < 20 {
		var m mqtttest.Message
		select {
		case m = <-sub.C:
		case <-deadline:
			t.Fatalf("heads seen: %d of %d; good readings of mould-exit-s4: %d", len(seen), len(cfg.Heads), good["mould-exit-s4"])
		}
		var r mqtt.Reading
		if err := json.Unmarshal(m.Payload, &r); err != nil {
			t.Fatal(err)
		}
		seen[r.Head] = r
		if r.Quality == "good" {
			good[r.Head]++
		}
	}
	for name, r := range seen {
		if len(r.Extras) != 2 || r.Extras[0].Name != "head_temperature" || r.Extras[0].Value == nil {
			t.Errorf("%s: extras %+v", name, r.Extras)
		}
	}
	cut := seen["torch-cut-s1"]
	if !slices.Contains(cut.Flags, "setting_mismatch") || cut.Quality != "uncertain" {
		t.Errorf("torch-cut-s1 reads back 1.000 against 1.010: flags %v quality %s", cut.Flags, cut.Quality)
	}
	if r := seen["spray-zone-s2"]; slices.Contains(r.Flags, "setting_mismatch") || r.Temperature == nil {
		t.Errorf("spray-zone-s2: %+v", r)
	}
	if v := *seen["mould-exit-s1"].Extras[0].Value; v < 40 || v > 44 {
		t.Errorf("mould-exit-s1 head temperature %v degC, scenario 41..43", v)
	}
}

// TestRTUPeerAgreesWithSimulator: the same head served on one line by
// Debian's python3-pymodbus (an RTU server over a socat pseudo-terminal
// pair, registers fixed to the band signals of a 1400 K blackbody) and on
// another by glowgate's own simulator (noise off, 1400 K) reads the same:
// both within 0.001 K of 1400 K, and within 1e-6 K of each other.
func TestRTUPeerAgreesWithSimulator(t *testing.T) {
	const tk = 1400.0
	pair := modbustest.NewPtyPair(t)
	s := bandSignals(t, tk, twoBands)
	w0, w1 := strings.Split(float32Words(s[0]), ":"), strings.Split(float32Words(s[1]), ":")
	modbustest.StartPymodbusRTU(t, pair.A, "--baud", "19200", "--unit", "1",
		"--input", fmt.Sprintf("0=%s:%s:%s:%s", w0[0], w0[1], w1[0], w1[1]))

	broker := mqtttest.Start(t)
	simLink := filepath.Join(t.TempDir(), "sim-line")
	head := func(name, line string) string {
		return fmt.Sprintf(`
  - name: %s
    line: %s
    unit_id: 1
    period: 100ms
    range: {min: 700degC, max: 2000degC}
    channels:
      - {name: short, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: long, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
    sim: {temperature: {start: %gK}}
`, name, line, tk)
	}
	cfg := parseConfig(t, fmt.Sprintf(`
gateway: peer-gw
unit: K
mqtt: {brokers: [%s]}
lines:
  - {name: peer, device: %s, baud: 19200, parity: none, timeout: 200ms}
  - {name: own, device: %s, baud: 19200, parity: none, timeout: 200ms}
heads:%s%s`, broker.URL(), pair.B, simLink, head("by-pymodbus", "peer"), head("by-simulator", "own")))
	// The simulator serves only its own line; the peer's is pymodbus's.
	own := *cfg
	own.Lines = cfg.Lines[1:]
	startSimulator(t, &own)
	sub := mqtttest.Subscribe(t, broker.URL(), mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}.Reading("+"))
	startDaemon(t, Options{Config: cfg})

	got := map[string]float64{}
	deadline := time.After(30 * time.Second)
	for len(got) < 2 {
		var m mqtttest.Message
		select {
		case m = <-sub.C:
		case <-deadline:
			t.Fatalf("readings from %v only", got)
		}
		var r mqtt.Reading
		if err := json.Unmarshal(m.Payload, &r); err != nil {
			t.Fatal(err)
		}
		if r.Quality != "good" || r.RawTemperature == nil {
			t.Fatalf("%s: %s", r.Head, m.Payload)
		}
		got[r.Head] = *r.RawTemperature
	}
	for name, v := range got {
		if math.Abs(v-tk) > 0.001 {
			t.Errorf("%s reads %v K, want %v K", name, v, tk)
		}
	}
	if d := math.Abs(got["by-pymodbus"] - got["by-simulator"]); d > 1e-6 {
		t.Errorf("pymodbus and the simulator disagree by %g K", d)
	}
}
