package daemon

import (
	"bufio"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"strconv"
	"strings"
	"testing"
	"time"

	"glowgate/bus/modbus/modbustest"
	"glowgate/bus/mqtt"
	"glowgate/bus/mqtt/mqtttest"
)

// bandRadiance reads testdata/band_radiance.csv: band radiances of the
// 0.875-0.925 um and 1.025-1.075 um bands computed with scipy.integrate.quad
// (Debian python3-scipy; testdata/band_radiance.py made the file).
func bandRadiance(t testing.TB) map[float64][2]float64 {
	t.Helper()
	f, err := os.Open("../testdata/band_radiance.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows := map[float64][2]float64{}
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		line := sc.Text()
		if strings.HasPrefix(line, "#") || strings.HasPrefix(line, "t_K") {
			continue
		}
		var v [3]float64
		for i, s := range strings.Split(line, ",") {
			if v[i], err = strconv.ParseFloat(s, 64); err != nil {
				t.Fatalf("band_radiance.csv %q: %v", line, err)
			}
		}
		rows[v[0]] = [2]float64{v[1], v[2]}
	}
	return rows
}

// float32Words is v as an IEEE 754 single in two registers, high word
// first, big-endian bytes, as hex for pymodbus_server.py.
func float32Words(v float64) string {
	b := math.Float32bits(float32(v))
	return fmt.Sprintf("%04X:%04X", b>>16, b&0xFFFF)
}

// TestIndependentPeer: Debian python3-pymodbus serves the scipy band
// radiances of blackbodies at three temperatures; the daemon polls it,
// one request at a time and then with all three in flight, and publishes
// each temperature within 0.01 K.
func TestIndependentPeer(t *testing.T) {
	for _, inFlight := range []int{1, 3} {
		t.Run(fmt.Sprintf("in_flight=%d", inFlight), func(t *testing.T) { independentPeer(t, inFlight) })
	}
}

func independentPeer(t *testing.T, inFlight int) {
	table := bandRadiance(t)
	temps := []float64{973.15, 1400, 1873.15}
	spec := `{"units": [`
	var heads string
	for i, tk := range temps {
		s, ok := table[tk]
		if !ok {
			t.Fatalf("no %v K row in band_radiance.csv", tk)
		}
		if i > 0 {
			spec += ","
		}
		w0, w2 := strings.Split(float32Words(s[0]), ":"), strings.Split(float32Words(s[1]), ":")
		spec += fmt.Sprintf(`{"unit": %d, "input": {"0": ["%s", "%s"], "2": ["%s", "%s"]}}`, i+1, w0[0], w0[1], w2[0], w2[1])
		heads += fmt.Sprintf(headTemplate, fmt.Sprintf("h%d", i+1), i+1)
	}
	spec += "]}"
	specFile := t.TempDir() + "/spec.json"
	if err := os.WriteFile(specFile, []byte(spec), 0o644); err != nil {
		t.Fatal(err)
	}
	peer := modbustest.StartPymodbus(t, "--spec", specFile)
	broker := mqtttest.Start(t)
	text := strings.Replace(fmt.Sprintf(threeHeads, broker.URL(), peer, heads), "    timeout: 200ms\n",
		fmt.Sprintf("    timeout: 200ms\n    in_flight: %d\n", inFlight), 1)
	cfg := parseConfig(t, text)
	if cfg.Endpoints[0].InFlight != inFlight {
		t.Fatalf("in_flight %d, want %d", cfg.Endpoints[0].InFlight, inFlight)
	}
	sub := mqtttest.Subscribe(t, broker.URL(), mqtt.Topics{Root: cfg.MQTT.Root, Gateway: cfg.Gateway}.Reading("+"))
	startDaemon(t, Options{Config: cfg})

	// Every head twice: the second round of a batch is read on the
	// connection the first one used.
	got := map[string]int{}
	for twice := 0; twice < len(temps); {
		m, ok := sub.Next(20 * time.Second)
		if !ok {
			t.Fatalf("readings from %v only", got)
		}
		var r mqtt.Reading
		if err := json.Unmarshal(m.Payload, &r); err != nil {
			t.Fatal(err)
		}
		var i int
		fmt.Sscanf(r.Head, "h%d", &i)
		want := temps[i-1]
		// float32 registers round each signal to 6e-8 relative, about
		// 1e-4 K here; 0.01 K is the conversion's own tolerance.
		if r.Quality != "good" || r.RawTemperature == nil || math.Abs(*r.RawTemperature-want) > 0.01 {
			t.Errorf("%s: want %.3f K (scipy), got %s", r.Head, want, m.Payload)
		}
		if got[r.Head]++; got[r.Head] == 2 {
			twice++
		}
	}
}
