package main

import (
	"bytes"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"glowgate/convert"
	"glowgate/daemon/config"
)

// calibrationFixtures holds the blackbody points written by
// blackbody_points.py (scipy.integrate.quad band radiance) and the bad
// tables.
const calibrationFixtures = "../../testdata/calibration"

// pastedConfig builds a configuration around the channel lines that
// calibrate printed, giving each a signal line, as a user would.
func pastedConfig(t *testing.T, out, c2 string) *config.Config {
	t.Helper()
	var b strings.Builder
	b.WriteString("gateway: pasted\n" + c2 + "mqtt: {brokers: [tcp://127.0.0.1:1883]}\nendpoints: [{name: ep, address: 127.0.0.1:15023}]\n")
	b.WriteString("heads:\n  - name: h\n    endpoint: ep\n    range: {min: 700degC, max: 1600degC}\n    channels:\n")
	n := 0
	for _, line := range strings.Split(out, "\n") {
		switch {
		case strings.HasPrefix(line, "- name: "):
			b.WriteString("      " + line + "\n")
		case strings.HasPrefix(line, "  sakuma_hattori: "):
			b.WriteString("      " + line + "\n")
			b.WriteString("        signal: {address: " + string(rune('0'+2*n)) + ", type: float32}\n")
			n++
		}
	}
	if n != 2 {
		t.Fatalf("calibrate printed %d sakuma_hattori lines, want 2:\n%s", n, out)
	}
	cfg, err := config.Parse("pasted.yaml", []byte(b.String()))
	if err != nil {
		t.Fatalf("pasted configuration: %v\n%s", err, b.String())
	}
	return cfg
}

// checkPasted checks that the pasted channels reproduce the fixture's
// points within 5 mK (PHYSICS.md after CCT-WG5 2008: a Sakuma–Hattori fit
// follows the band integral to milli-kelvin level).
func checkPasted(t *testing.T, cfg *config.Config, c2 float64) {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(calibrationFixtures, "two-channels.csv"))
	if err != nil {
		t.Fatal(err)
	}
	h := cfg.Heads[0]
	models := map[string]*convert.SakumaHattori{}
	for _, ch := range h.Channels {
		sh := ch.SakumaHattori
		m, err := convert.NewSakumaHattori(sh.A, sh.B, sh.C, c2)
		if err != nil {
			t.Fatal(err)
		}
		models[ch.Name] = m
	}
	rows := 0
	for _, line := range strings.Split(string(data), "\n") {
		if line == "" || line[0] == '#' || strings.HasPrefix(line, "temperature") {
			continue
		}
		var v [3]float64
		for i, f := range strings.Split(line, ",") {
			x, err := strconv.ParseFloat(f, 64)
			if err != nil || i > 2 {
				t.Fatalf("fixture line %q: %v", line, err)
			}
			v[i] = x
		}
		tc, s1, s2 := v[0], v[1], v[2]
		for name, s := range map[string]float64{"short": s1, "long": s2} {
			if d := models[name].Inverse(s) - (tc + 273.15); math.Abs(d) > 0.005 || math.IsNaN(d) {
				t.Errorf("%s at %g degC: pasted curve off by %.4f K", name, tc, d)
			}
		}
		rows++
	}
	if rows != 10 {
		t.Fatalf("read %d fixture rows, want 10", rows)
	}
}

func TestCalibrate(t *testing.T) {
	points := filepath.Join(calibrationFixtures, "two-channels.csv")
	code, out, errOut := runCLI("calibrate", "-points", points)
	if code != 0 {
		t.Fatalf("calibrate: status %d\n%s%s", code, out, errOut)
	}
	checkPasted(t, pastedConfig(t, out, ""), convert.C2ITS90)
	for _, want := range []string{"c2 = 0.014388 m·K (its90)", "residuals T − T_fit in K (tolerance 0.05 K)", "rms", "max |r|", "700.000degC", "1600.000degC"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}

	// CODATA 2018 c2, and the columns checked against demo.yaml's head.
	code, out, errOut = runCLI("calibrate", "-points", points, "-c2", "codata", "-config", "../../configs/demo.yaml", "-head", "caster1-strand")
	if code != 0 {
		t.Fatalf("calibrate -c2 codata: status %d\n%s%s", code, out, errOut)
	}
	if !strings.Contains(out, "c2: codata2018") {
		t.Errorf("output does not say which c2 to configure:\n%s", out)
	}
	checkPasted(t, pastedConfig(t, out, "c2: codata2018\n"), convert.C2CODATA2018)

	// The same points in K, other column order, comments and CRLF.
	code, out, errOut = runCLI("calibrate", "-points", filepath.Join(calibrationFixtures, "kelvin-comments.csv"))
	if code != 0 || !strings.Contains(out, "973.150K") {
		t.Fatalf("calibrate kelvin-comments.csv: status %d\n%s%s", code, out, errOut)
	}
	checkPasted(t, pastedConfig(t, out, ""), convert.C2ITS90)
}

func TestCalibrateTolerance(t *testing.T) {
	// A tolerance tighter than the fit (its residuals are some 0.1 mK):
	// the lines are printed, warnings name each point, exit status 1.
	code, out, errOut := runCLI("calibrate", "-points", filepath.Join(calibrationFixtures, "two-channels.csv"), "-tolerance", "0.000001K")
	if code != 1 {
		t.Fatalf("status %d, want 1\n%s%s", code, out, errOut)
	}
	if !strings.Contains(out, "sakuma_hattori:") || !strings.Contains(errOut, "two-channels.csv:4: column short: residual") ||
		!strings.Contains(errOut, "exceeds the tolerance 1e-06 K") || !strings.Contains(errOut, "residuals exceed the tolerance") {
		t.Errorf("output:\n%s\nerrors:\n%s", out, errOut)
	}

	// Three points: fitted exactly, with a warning that says so.
	three := filepath.Join(t.TempDir(), "three.csv")
	writeFile(t, three, "temperature_degC,short\n700,0.74973192795754262\n1100,88.905402157373572\n1600,1982.654538105319\n")
	code, out, errOut = runCLI("calibrate", "-points", three)
	if code != 0 || !strings.Contains(errOut, "3 points determine A, B and C exactly") {
		t.Errorf("three points: status %d\n%s%s", code, out, errOut)
	}
}

func TestCalibrateBadTables(t *testing.T) {
	bad := filepath.Join(calibrationFixtures, "bad")
	for _, c := range []struct {
		file  string
		extra []string
		want  string
	}{
		{"missing-header.csv", nil, "missing-header.csv:2: missing header: line 2 holds numbers"},
		{"unknown-first-column.csv", nil, "unknown-first-column.csv:1: column temp_C: unknown first column"},
		{"unknown-channel.csv", []string{"-config", "../../configs/demo.yaml", "-head", "caster1-strand"},
			`unknown-channel.csv:1: column mid: no channel "mid" in head caster1-strand (channels: short, long)`},
		{"not-a-number.csv", nil, `not-a-number.csv:5: column long: "13.3x" is not a number`},
		{"too-few.csv", nil, "too-few.csv:1: 2 blackbody points, need at least 3"},
		{"not-rising.csv", nil, "not-rising.csv:4: column long: signal 11 at 900degC is not above 13.3 at 800degC (line 3)"},
		{"ragged.csv", nil, "ragged.csv:3: 2 values, the header at line 1 names 3 columns"},
		{"empty.csv", nil, "empty.csv: no header"},
	} {
		path := filepath.Join(bad, c.file)
		code, out, errOut := runCLI(append([]string{"calibrate", "-points", path}, c.extra...)...)
		if code != 2 || !strings.Contains(errOut, filepath.Join(bad, c.want)) || out != "" {
			t.Errorf("%s: status %d, stdout %q, stderr:\n%s\nwant status 2 and %q", c.file, code, out, errOut, c.want)
		}
	}
	for _, args := range [][]string{
		{"calibrate"},
		{"calibrate", "-points", filepath.Join(t.TempDir(), "absent.csv")},
		{"calibrate", "-points", "x.csv", "-c2", "planck"},
		{"calibrate", "-points", "x.csv", "-tolerance", "5"},
		{"calibrate", "-points", "x.csv", "-tolerance", "-1K"},
		{"calibrate", "-points", "x.csv", "-plot", "residuals.bmp"},
		{"calibrate", "-points", "x.csv", "-head", "caster1-strand"},
		{"calibrate", "-points", "x.csv", "extra"},
	} {
		if code, _, errOut := runCLI(args...); code != 2 {
			t.Errorf("%q: status %d, want 2\n%s", args, code, errOut)
		}
	}
}

func TestCalibratePlot(t *testing.T) {
	png := filepath.Join(t.TempDir(), "residuals.png")
	code, out, errOut := runCLI("calibrate", "-points", filepath.Join(calibrationFixtures, "two-channels.csv"), "-plot", png)
	if code != 0 {
		t.Fatalf("status %d\n%s%s", code, out, errOut)
	}
	data, err := os.ReadFile(png)
	if err != nil {
		t.Fatal(err)
	}
	// PNG signature (ISO/IEC 15948, 5.2).
	if !bytes.HasPrefix(data, []byte("\x89PNG\r\n\x1a\n")) || len(data) < 5000 {
		t.Errorf("plot: %d bytes starting %q", len(data), data[:min(len(data), 8)])
	}
	svg := filepath.Join(t.TempDir(), "residuals.svg")
	if code, _, errOut := runCLI("calibrate", "-points", filepath.Join(calibrationFixtures, "two-channels.csv"), "-plot", svg); code != 0 {
		t.Fatalf("svg plot: status %d\n%s", code, errOut)
	}
	if data, err := os.ReadFile(svg); err != nil || !bytes.Contains(data, []byte("<svg")) {
		t.Errorf("svg plot: %v, %d bytes", err, len(data))
	}
}
