package sim

import (
	"bufio"
	"context"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"testing"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/modbus/modbustest"
	"glowgate/convert"
)

// bandSignal is one row of testdata/band_signals.csv.
type bandSignal struct {
	lo, hi, t, signal float64
}

// readBandSignals loads the band radiances made by testdata/band_signals.py
// (scipy.integrate.quad of Planck's law, scipy 1.10.1).
func readBandSignals(t testing.TB) []bandSignal {
	t.Helper()
	f, err := os.Open("testdata/band_signals.csv")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var rows []bandSignal
	sc := bufio.NewScanner(f)
	for line := 1; sc.Scan(); line++ {
		text := sc.Text()
		if strings.HasPrefix(text, "#") || strings.HasPrefix(text, "lo_m") {
			continue
		}
		parts := strings.Split(text, ",")
		if len(parts) != 4 {
			t.Fatalf("band_signals.csv:%d: %d fields, want 4", line, len(parts))
		}
		var v [4]float64
		for i, p := range parts {
			if v[i], err = strconv.ParseFloat(p, 64); err != nil {
				t.Fatalf("band_signals.csv:%d: %v", line, err)
			}
		}
		rows = append(rows, bandSignal{v[0], v[1], v[2], v[3]})
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	if len(rows) == 0 {
		t.Fatal("band_signals.csv: no rows")
	}
	return rows
}

// The signals served over Modbus equal ε·τ times the band radiance that
// scipy.integrate.quad gives for Planck's law (testdata/band_signals.py,
// scipy 1.10.1), at each temperature a stepped profile visits. Tolerance:
// float32 rounding (2⁻²⁴) plus the channel model's integration error.
func TestServerMatchesPlanckIntegral(t *testing.T) {
	rows := readBandSignals(t)
	temps := map[float64]bool{}
	var order []float64
	for _, r := range rows {
		if !temps[r.t] {
			temps[r.t] = true
			order = append(order, r.t)
		}
	}
	// One second at each temperature, in table order.
	h := twoColour(t, 5, order[0])
	h.Channels[0].Emissivity, h.Channels[1].Emissivity = 0.9, 0.7
	h.Transmission = Constant(0.5)
	for _, tk := range order[1:] {
		h.Temperature.Segments = append(h.Temperature.Segments,
			Segment{Kind: Hold, Duration: time.Second}, Segment{Kind: Step, Value: tk})
	}
	clk := newTestClock()
	_, addr := startServer(t, []Head{h}, clk, nil)
	c := dialClient(t, addr)

	lows := []float64{0.875e-6, 1.025e-6}
	for i, tk := range order {
		got := readFields(t, c, h)
		for _, r := range rows {
			if r.t != tk {
				continue
			}
			ch := -1
			for j, lo := range lows {
				if math.Abs(r.lo-lo) < 1e-12 {
					ch = j
				}
			}
			if ch < 0 {
				t.Fatalf("band_signals.csv: band %g..%g m is not a channel of the test head", r.lo, r.hi)
			}
			want := h.Channels[ch].Emissivity * 0.5 * r.signal
			if math.Abs(got[ch]/want-1) > 1e-6 {
				t.Errorf("T=%.2f K channel %d: served %.9g, want ε·τ·S_quad = %.9g", tk, ch, got[ch], want)
			}
		}
		if i < len(order)-1 {
			clk.Advance(time.Second)
		}
	}
}

// The ratio of the served signals converts back to the scenario temperature:
// convert.Ratio on the decoded signals gives the profile temperature within
// 0.01 K at every stage of the casting scenario, cloud included, and a signal
// fraction of ε·τ.
func TestServerRatioTemperature(t *testing.T) {
	clk := newTestClock()
	h := casterScenario(t)
	_, addr := startServer(t, []Head{h}, clk, nil)
	c := dialClient(t, addr)
	ratio, err := convert.NewRatio(h.Channels[0].Model, h.Channels[1].Model, 1, 973.15, 1873.15, 0.02)
	if err != nil {
		t.Fatal(err)
	}
	var last time.Duration
	for e := time.Duration(0); e <= 90*time.Second; e += 1500 * time.Millisecond {
		clk.Advance(e - last)
		last = e
		got := readFields(t, c, h)
		res := ratio.Convert(got[0], got[1])
		want := h.Temperature.At(e)
		if math.Abs(res.Temperature-want) > 0.01 {
			t.Errorf("t=%v: ratio temperature %.4f K, want profile %.4f K (flags %v)", e, res.Temperature, want, res.Flags)
		}
		if f, wantF := res.Channels[0].Fraction, 0.4*h.Transmission.At(e); math.Abs(f-wantF) > 1e-5 {
			t.Errorf("t=%v: signal fraction %.6f, want ε·τ = %.6f", e, f, wantF)
		}
	}
}

// pymodbusRead runs testdata/read_pymodbus.py (Debian's python3-pymodbus) against
// addr and returns its registers, or the exception code it saw.
func pymodbusRead(t *testing.T, addr string, unit uint8, table modbus.Table, start, count uint16) ([]uint16, int) {
	t.Helper()
	host, port, _ := strings.Cut(addr, ":")
	return runPymodbusReader(t, "testdata/read_pymodbus.py", host, port,
		strconv.Itoa(int(unit)), table.String(), strconv.Itoa(int(start)), strconv.Itoa(int(count)))
}

// runPymodbusReader runs one of the pymodbus reader scripts in testdata
// with args and returns the registers it printed, or the exception code.
func runPymodbusReader(t *testing.T, script string, args ...string) ([]uint16, int) {
	t.Helper()
	ctx, cancel := context.WithTimeout(t.Context(), 30*time.Second)
	defer cancel()
	out, err := exec.CommandContext(ctx, "/usr/bin/python3", append([]string{script}, args...)...).Output()
	if err != nil {
		var stderr string
		if ee, ok := err.(*exec.ExitError); ok {
			stderr = string(ee.Stderr)
		}
		t.Fatalf("%s: %v\n%s", script, err, stderr)
	}
	var res struct {
		Registers []uint16 `json:"registers"`
		Exception *int     `json:"exception"`
	}
	if err := json.Unmarshal(out, &res); err != nil {
		t.Fatalf("%s output %q: %v", script, out, err)
	}
	if res.Exception != nil {
		return nil, *res.Exception
	}
	return res.Registers, 0
}

// An independent Modbus implementation (Debian's python3-pymodbus) reads the
// same registers, with the same values, as the decoding tests above, and sees
// the documented exception for an unknown unit.
func TestServerWithPymodbus(t *testing.T) {
	if err := exec.Command("/usr/bin/python3", "-c", "import pymodbus.client").Run(); err != nil {
		modbustest.RequireReal(t, "Debian's python3-pymodbus is not available: %v", err)
	}
	clk := newTestClock()
	caster, kiln := casterScenario(t), kilnHead(t)
	_, addr := startServer(t, []Head{caster, kiln}, clk, nil)
	e := 31 * time.Second // inside the clouding ramp and the temperature ramp
	clk.Advance(e)

	for _, h := range []Head{caster, kiln} {
		lo, hi := uint16(math.MaxUint16), uint16(0)
		for _, ch := range h.Channels {
			lo, hi = min(lo, ch.Field.Address), max(hi, ch.Field.Address+ch.Field.Len())
		}
		regs, exc := pymodbusRead(t, addr, h.Unit, h.Table, lo, hi-lo)
		if exc != 0 {
			t.Fatalf("unit %d: pymodbus saw exception %d", h.Unit, exc)
		}
		if len(regs) != int(hi-lo) {
			t.Fatalf("unit %d: pymodbus read %d registers, want %d", h.Unit, len(regs), hi-lo)
		}
		tk, tau := h.Temperature.At(e), h.Transmission.At(e)
		for i, ch := range h.Channels {
			v, err := ch.Field.Decode(regs, lo)
			if err != nil {
				t.Fatal(err)
			}
			want := ch.Emissivity * tau * ch.Model.Signal(tk)
			if math.Abs(v-want) > encodingTolerance(ch.Field, want) {
				t.Errorf("unit %d channel %d via pymodbus: %.9g, want %.9g", h.Unit, i, v, want)
			}
		}
	}
	// Exception 0x0B for a unit id no head uses (Modbus Application Protocol
	// V1.1b3, section 7).
	if _, exc := pymodbusRead(t, addr, 42, modbus.InputRegisters, 0, 2); exc != 0x0B {
		t.Errorf("unknown unit: pymodbus saw exception %d, want 11", exc)
	}
}
