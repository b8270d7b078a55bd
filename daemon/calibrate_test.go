package daemon

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"glowgate/convert"
	"glowgate/daemon/config"
)

// calibrationDir holds the calibration fixtures and the script that
// writes them (blackbody_points.py, scipy.integrate.quad band radiance).
const calibrationDir = "../testdata/calibration"

func readCalibrationFixture(t testing.TB, name string) (*CalibrationPoints, error) {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(calibrationDir, name))
	if err != nil {
		t.Fatal(err)
	}
	return ReadCalibrationPoints(name, bytes.NewReader(data))
}

func TestReadCalibrationPoints(t *testing.T) {
	// Source: ../testdata/calibration/blackbody_points.py writes the same
	// points twice, in °C with short, long and in K with long, short,
	// comments, blank lines and CRLF line ends.
	c, err := readCalibrationFixture(t, "two-channels.csv")
	if err != nil {
		t.Fatal(err)
	}
	k, err := readCalibrationFixture(t, "kelvin-comments.csv")
	if err != nil {
		t.Fatal(err)
	}
	if c.Unit != "degC" || k.Unit != "K" || len(c.Temperatures) != 10 || len(k.Temperatures) != 10 {
		t.Fatalf("units %q %q, %d and %d points", c.Unit, k.Unit, len(c.Temperatures), len(k.Temperatures))
	}
	if strings.Join(c.Channels, ",") != "short,long" || strings.Join(k.Channels, ",") != "long,short" {
		t.Fatalf("channels %v and %v", c.Channels, k.Channels)
	}
	for i := range c.Temperatures {
		if math.Abs(c.Temperatures[i]-k.Temperatures[i]) > 1e-9 ||
			c.Signals[0][i] != k.Signals[1][i] || c.Signals[1][i] != k.Signals[0][i] {
			t.Errorf("point %d: %g K %v, %g K %v", i+1, c.Temperatures[i], []float64{c.Signals[0][i], c.Signals[1][i]},
				k.Temperatures[i], []float64{k.Signals[1][i], k.Signals[0][i]})
		}
	}
	if c.Temperatures[0] != 973.15 || c.HeaderLine != 3 || c.Lines[0] != 4 || c.Lines[9] != 13 {
		t.Errorf("first point %g K, header line %d, lines %v", c.Temperatures[0], c.HeaderLine, c.Lines)
	}
	if k.HeaderLine != 4 || k.Lines[2] != 7 || k.Lines[3] != 10 {
		t.Errorf("kelvin file: header line %d, lines %v", k.HeaderLine, k.Lines)
	}
}

func TestReadCalibrationPointsErrors(t *testing.T) {
	for _, c := range []struct {
		file string
		want []string
	}{
		{"missing-header.csv", []string{"missing-header.csv:2: missing header: line 2 holds numbers (want temperature_degC or temperature_K, then one column per channel)"}},
		{"unknown-first-column.csv", []string{"unknown-first-column.csv:1: column temp_C: unknown first column (want temperature_degC or temperature_K, then one column per channel)"}},
		{"not-a-number.csv", []string{`not-a-number.csv:5: column long: "13.3x" is not a number`}},
		{"too-few.csv", []string{"too-few.csv:1: 2 blackbody points, need at least 3 to fit Sakuma–Hattori A, B and C"}},
		{"not-rising.csv", []string{"not-rising.csv:4: column long: signal 11 at 900degC is not above 13.3 at 800degC (line 3); signals must rise with temperature"}},
		{"duplicate-temperature.csv", []string{"duplicate-temperature.csv:4: column temperature_K: 973.15K repeats the temperature of line 2"}},
		{"ragged.csv", []string{"ragged.csv:3: 2 values, the header at line 1 names 3 columns"}},
		{"empty.csv", []string{"empty.csv: no header (want temperature_degC or temperature_K, then one column per channel)"}},
		{"duplicate-column.csv", []string{"duplicate-column.csv:1: column short: named twice in the header"}},
		{"bad-values.csv", []string{
			"bad-values.csv:3: column short: signal -3.4 must be positive",
			"bad-values.csv:4: column temperature_degC: -300 is not above absolute zero",
			`bad-values.csv:5: column short: "NaN" is not a number`,
		}},
	} {
		p, err := readCalibrationFixture(t, filepath.Join("bad", c.file))
		if err == nil {
			t.Errorf("%s: no error", c.file)
			continue
		}
		var errs TableErrors
		if !errors.As(err, &errs) || p != nil {
			t.Errorf("%s: error %T, points %v", c.file, err, p)
		}
		want := strings.Join(c.want, "\n")
		if got := strings.ReplaceAll(err.Error(), "bad"+string(filepath.Separator), ""); got != want {
			t.Errorf("%s:\n got %s\nwant %s", c.file, got, want)
		}
	}
}

func TestCalibrationPointsCheckChannels(t *testing.T) {
	cfg, err := config.Load("../configs/demo.yaml")
	if err != nil {
		t.Fatal(err)
	}
	h, _ := cfg.Head("caster1-strand")
	good, err := readCalibrationFixture(t, "two-channels.csv")
	if err != nil {
		t.Fatal(err)
	}
	if err := good.CheckChannels(h); err != nil {
		t.Errorf("two-channels.csv against caster1-strand: %v", err)
	}
	bad, err := readCalibrationFixture(t, "bad/unknown-channel.csv")
	if err != nil {
		t.Fatal(err)
	}
	want := `bad/unknown-channel.csv:1: column mid: no channel "mid" in head caster1-strand (channels: short, long)`
	if err := bad.CheckChannels(h); err == nil || filepath.ToSlash(err.Error()) != want {
		t.Errorf("unknown channel: %v, want %s", err, want)
	}
}

// calibratedConfig is a configuration whose one head takes its channels
// from a calibrate YAML block.
func calibratedConfig(c2, channels string) string {
	return "gateway: cal-gw\n" + c2 + `mqtt: {brokers: [tcp://127.0.0.1:1883]}
endpoints: [{name: ep, address: 127.0.0.1:15022}]
heads:
  - name: cal
    endpoint: ep
    range: {min: 700degC, max: 1600degC}
    channels:
` + channels
}

func TestCalibrateRoundTrip(t *testing.T) {
	// Source: ../testdata/calibration/two-channels.csv (scipy band radiance
	// of the 0.875–0.925 and 1.025–1.075 µm bands at 700–1600 °C). The fit
	// follows the band integral to milli-kelvin level (PHYSICS.md after
	// CCT-WG5 2008: residuals below 5 mK), and the YAML block, pasted into
	// a configuration and loaded, gives channel models that reproduce the
	// points within 5 mK and the fit itself within 1e-6 K.
	p, err := readCalibrationFixture(t, "two-channels.csv")
	if err != nil {
		t.Fatal(err)
	}
	for _, c2 := range []struct {
		key   string
		value float64
	}{{"", convert.C2ITS90}, {"c2: codata2018\n", convert.C2CODATA2018}} {
		fits, err := Calibrate(p, c2.value)
		if err != nil {
			t.Fatal(err)
		}
		var block strings.Builder
		for ci, f := range fits {
			for i, r := range f.Residuals {
				if math.Abs(r) > 0.005 {
					t.Errorf("%s at %g K: residual %.4f K", f.Name, p.Temperatures[i], r)
				}
			}
			yaml := f.YAML("      ")
			if !strings.HasPrefix(yaml, "      - name: "+f.Name+"\n        sakuma_hattori: {a: ") {
				t.Errorf("YAML block %q", yaml)
			}
			block.WriteString(yaml)
			fmt.Fprintf(&block, "        signal: {address: %d, type: float32}\n", 2*ci)
		}
		text := calibratedConfig(c2.key, block.String())
		cfg, err := config.Parse("calibrated.yaml", []byte(text))
		if err != nil {
			t.Fatalf("%v\n%s", err, text)
		}
		h, _ := cfg.Head("cal")
		for ci, ch := range h.Channels {
			m, err := channelModel(cfg, ch)
			if err != nil {
				t.Fatal(err)
			}
			sh, ok := m.(*convert.SakumaHattori)
			if !ok {
				t.Fatalf("channel %s model %T", ch.Name, m)
			}
			for i, temp := range p.Temperatures {
				s := p.Signals[ci][i]
				got := sh.Inverse(s)
				if math.Abs(got-temp) > 0.005 {
					t.Errorf("c2 %g, %s at %g K: pasted curve reads %.5f K", c2.value, ch.Name, temp, got)
				}
				if d := math.Abs(got - fits[ci].Curve.Inverse(s)); d > 1e-6 {
					t.Errorf("c2 %g, %s at %g K: pasted curve off the fit by %.3g K", c2.value, ch.Name, temp, d)
				}
			}
		}
	}
}

func TestChannelFitYAMLName(t *testing.T) {
	f := ChannelFit{Name: "yes", Curve: &convert.SakumaHattori{A: 0.9e-6, B: -1.5e-7, C: 1e7, C2: convert.C2ITS90}}
	want := "- name: \"yes\"\n  sakuma_hattori: {a: 0.9um, b: -0.15umK, c: 10000000}\n"
	if got := f.YAML(""); got != want {
		t.Errorf("YAML = %q, want %q", got, want)
	}
	for name, want := range map[string]string{"short": "short", "ch-2": "ch-2", "2nd": `"2nd"`, "a b": `"a b"`, "": `""`} {
		if got := yamlName(name); got != want {
			t.Errorf("yamlName(%q) = %s, want %s", name, got, want)
		}
	}
}

func FuzzReadCalibrationPoints(f *testing.F) {
	seeds, _ := filepath.Glob(filepath.Join(calibrationDir, "*.csv"))
	bad, _ := filepath.Glob(filepath.Join(calibrationDir, "bad", "*.csv"))
	for _, s := range append(seeds, bad...) {
		data, err := os.ReadFile(s)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		p, err := ReadCalibrationPoints("fuzz.csv", bytes.NewReader(data))
		if err != nil {
			var errs TableErrors
			if p != nil || !errors.As(err, &errs) || len(errs) == 0 || len(errs) > maxTableErrors+1 {
				t.Fatalf("points %v, error %T %v", p, err, err)
			}
			for _, e := range errs {
				if e.Msg == "" || e.Line < 0 {
					t.Fatalf("malformed problem %#v", e)
				}
			}
			return
		}
		n := len(p.Temperatures)
		if n < 3 || len(p.Lines) != n || len(p.Signals) != len(p.Channels) || len(p.Channels) == 0 {
			t.Fatalf("accepted %+v", p)
		}
		order := p.order()
		for c := range p.Channels {
			if len(p.Signals[c]) != n {
				t.Fatalf("channel %d: %d signals for %d points", c, len(p.Signals[c]), n)
			}
			for k := 1; k < n; k++ {
				if !(p.Signals[c][order[k]] > p.Signals[c][order[k-1]]) || !(p.Temperatures[order[k]] > p.Temperatures[order[k-1]]) {
					t.Fatalf("accepted points that do not rise: %+v", p)
				}
			}
		}
		// Whatever was accepted can be fitted or refused, never panics.
		_, _ = Calibrate(p, convert.C2ITS90)
	})
}
