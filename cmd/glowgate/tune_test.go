package main

import (
	"fmt"
	"math"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"glowgate/convert"
)

// casterBands are the channel models of configs/demo.yaml's head
// caster1-strand: ideal bands 0.875–0.925 and 1.025–1.075 µm.
func casterBands(t *testing.T) (short, long *convert.Band) {
	t.Helper()
	short, err := convert.NewBand(0.875e-6, 0.925e-6, convert.C2ITS90)
	if err != nil {
		t.Fatal(err)
	}
	long, err = convert.NewBand(1.025e-6, 1.075e-6, convert.C2ITS90)
	if err != nil {
		t.Fatal(err)
	}
	return short, long
}

var pasteLine = regexp.MustCompile(`(?m)^    emissivity_ratio: ([0-9.]+)$`)

// pastedK returns the k of the emissivity_ratio line tune-ratio printed.
func pastedK(t *testing.T, out string) float64 {
	t.Helper()
	m := pasteLine.FindStringSubmatch(out)
	if m == nil {
		t.Fatalf("no emissivity_ratio line in:\n%s", out)
	}
	k, err := strconv.ParseFloat(m[1], 64)
	if err != nil {
		t.Fatal(err)
	}
	return k
}

func TestTuneRatioReference(t *testing.T) {
	// Signals of a target at 1532 °C with ε_short = 0.6·1.0234 and
	// ε_long = 0.6 on caster1-strand's bands (synthesised with
	// convert.NewBand, which matches scipy's band integral to 1e-12): the
	// emissivity ratio found is 1.0234 (invented scenario).
	short, long := casterBands(t)
	tk := 1532 + 273.15
	var args []string
	for _, g := range []float64{0.6, 0.55, 0.62} { // three dips, grey losses differ
		args = append(args, fmt.Sprint(g*1.0234*short.Signal(tk)), fmt.Sprint(g*long.Signal(tk)))
	}
	code, out, errOut := runCLI(append([]string{"tune-ratio", "-config", "../../configs/demo.yaml", "-head", "caster1-strand", "-reference", "1532degC"}, args...)...)
	if code != 0 {
		t.Fatalf("status %d\n%s%s", code, out, errOut)
	}
	if k := pastedK(t, out); math.Abs(k-1.0234) > 1e-6 {
		t.Errorf("pasted k %g, want 1.0234\n%s", k, out)
	}
	for _, want := range []string{"head caster1-strand", "from 3 points", "1532.00degC", "reads now (k = 1)", "standard uncertainty", "not tested", "(now 1)"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	// With k = 1 the head reads hot: about 1532 °C + (ΛT²/c2)·ln 1.0234
	// ≈ 1532 + 35 K in Wien's approximation (PHYSICS.md).
	if !regexp.MustCompile(`156[5-9]\.\d\ddegC`).MatchString(out) {
		t.Errorf("reads-now column does not show about 1567 degC:\n%s", out)
	}
	if strings.Contains(out, "warning") {
		t.Errorf("warning for a reference inside the measuring range:\n%s", out)
	}

	// reheat-exit measures 800–1350 °C: a 1532 °C reference is flagged.
	code, out, errOut = runCLI(append([]string{"tune-ratio", "-config", "../../configs/demo.yaml", "-head", "reheat-exit", "-reference", "1532degC"}, args...)...)
	if code != 0 || !strings.Contains(out, "warning: 3 reference temperatures (marked !) lie outside the head's measuring range 800.00degC to 1350.00degC") {
		t.Errorf("reference outside the range: status %d\n%s%s", code, out, errOut)
	}
}

func TestTuneRatioPoints(t *testing.T) {
	short, long := casterBands(t)
	dir := t.TempDir()
	write := func(name string, kOf func(tc float64) float64) string {
		var b strings.Builder
		b.WriteString("# dips at three casting speeds\nreference_degC,long,short\n")
		for _, tc := range []float64{1450, 1480, 1510, 1540, 1570, 1600} {
			tk := tc + 273.15
			fmt.Fprintf(&b, "%g,%.17g,%.17g\n", tc, 0.7*long.Signal(tk), 0.7*kOf(tc)*short.Signal(tk))
		}
		path := filepath.Join(dir, name)
		writeFile(t, path, b.String())
		return path
	}
	// Constant k = 0.985: recovered, no temperature dependence.
	flat := write("flat.csv", func(float64) float64 { return 0.985 })
	code, out, errOut := runCLI("tune-ratio", "-config", "../../configs/demo.yaml", "-head", "caster1-strand", "-points", flat, "-u-reference", "2K")
	if code != 0 {
		t.Fatalf("status %d\n%s%s", code, out, errOut)
	}
	if k := pastedK(t, out); math.Abs(k-0.985) > 1e-6 {
		t.Errorf("pasted k %g, want 0.985\n%s", k, out)
	}
	if !strings.Contains(out, "none shown") || !strings.Contains(out, "uncertainty 2 K") {
		t.Errorf("constant k:\n%s", out)
	}
	// k rising by 0.01 per 100 K: reported as temperature dependent.
	rising := write("rising.csv", func(tc float64) float64 { return 0.985 + 1e-4*(tc-1525) })
	code, out, errOut = runCLI("tune-ratio", "-config", "../../configs/demo.yaml", "-head", "caster1-strand", "-points", rising)
	if code != 0 || !strings.Contains(out, "k depends on temperature") || !strings.Contains(out, "+0.0100") {
		t.Errorf("rising k: status %d\n%s%s", code, out, errOut)
	}
}

func TestTuneRatioErrors(t *testing.T) {
	dir := t.TempDir()
	badCSV := filepath.Join(dir, "bad.csv")
	writeFile(t, badCSV, "reference_degC,short,long\n1532,12.5,abc\n")
	unknownCol := filepath.Join(dir, "unknown.csv")
	writeFile(t, unknownCol, "reference_degC,short,middle\n1532,12.5,20\n")
	base := []string{"tune-ratio", "-config", "../../configs/demo.yaml", "-head", "caster1-strand"}
	for _, c := range []struct {
		args []string
		want string
	}{
		{append(base, "-reference", "1532degC", "1", "2", "3"), "want signal pairs"},
		{append(base, "-reference", "1532degC"), "want signal pairs"},
		{append(base, "-reference", "1532", "1", "2"), "-reference"},
		{append(base, "-reference", "1532degC", "1", "-2"), "signal 2"},
		{append(base, "1", "2"), "give -reference TEMP with signal pairs, or -points FILE.csv"},
		{append(base, "-reference", "1532degC", "-points", badCSV, "1", "2"), "give -reference"},
		{append(base, "-points", badCSV), badCSV + `:2: column long: "abc" is not a number`},
		{append(base, "-points", unknownCol), unknownCol + `:1: column middle: no channel "middle" in this head (channels: short and long)`},
		{append(base, "-points", badCSV, "extra"), "unexpected arguments"},
		{append(base, "-reference", "1532degC", "-u-reference", "-1K", "1", "2"), "-u-reference"},
		{[]string{"tune-ratio", "-config", "../../configs/demo.yaml", "-head", "nosuch", "-reference", "1532degC", "1", "2"}, `no head "nosuch"`},
		{[]string{"tune-ratio", "-config", "../../configs/demo.yaml", "-reference", "1532degC", "1", "2"}, "-head NAME is required"},
		{[]string{"tune-ratio", "-head", "caster1-strand", "-reference", "1532degC", "1", "2"}, "-config FILE is required"},
	} {
		code, out, errOut := runCLI(c.args...)
		if code != 2 || !strings.Contains(errOut, c.want) || out != "" {
			t.Errorf("%q: status %d, stdout %q, stderr:\n%s\nwant status 2 and %q", c.args, code, out, errOut, c.want)
		}
	}
}

func TestCommissioningHelp(t *testing.T) {
	for _, c := range []struct{ cmd, want string }{
		{"calibrate", "Exit status: 0 when every residual is within -tolerance"},
		{"tune-ratio", "Heads with more than two channels are refused"},
	} {
		code, out, errOut := runCLI(c.cmd, "-h")
		if code != 0 || !strings.Contains(errOut, c.want) || !strings.Contains(errOut, "usage: glowgate "+c.cmd) {
			t.Errorf("%s -h: status %d\n%s%s", c.cmd, code, out, errOut)
		}
	}
	if _, out, _ := runCLI("help"); !strings.Contains(out, "calibrate") || !strings.Contains(out, "tune-ratio") {
		t.Errorf("help does not list calibrate and tune-ratio:\n%s", out)
	}
}

func TestKDecimals(t *testing.T) {
	for _, c := range []struct {
		u    float64
		want int
	}{{0.01, 4}, {0.0005, 4}, {0.0004, 5}, {0.00005, 5}, {0.00001, 6}, {0, 6}} {
		if got := kDecimals(c.u); got != c.want {
			t.Errorf("kDecimals(%g) = %d, want %d", c.u, got, c.want)
		}
	}
}
