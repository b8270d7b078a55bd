package daemon

import (
	"bytes"
	"errors"
	"math"
	"strings"
	"testing"

	"glowgate/convert"
	"glowgate/daemon/config"
)

func TestReadTunePoints(t *testing.T) {
	chans := []string{"short", "long"}
	for _, text := range []string{
		"reference_degC,short,long\n1532,10,20\n# a comment\n\n1400,5,12\n",
		"\ufeff# exported\r\nreference_K, long, short\r\n1805.15, 20, 10\r\n1673.15, 12, 5\r\n",
	} {
		pts, err := ReadTunePoints("ref.csv", strings.NewReader(text), chans)
		if err != nil {
			t.Fatalf("%q: %v", text, err)
		}
		want := []convert.TunePoint{{Reference: 1805.15, Short: 10, Long: 20}, {Reference: 1673.15, Short: 5, Long: 12}}
		if len(pts) != 2 {
			t.Fatalf("%q: points %v", text, pts)
		}
		for i := range want {
			if math.Abs(pts[i].Reference-want[i].Reference) > 1e-9 || pts[i].Short != want[i].Short || pts[i].Long != want[i].Long {
				t.Errorf("%q: point %d is %+v, want %+v", text, i+1, pts[i], want[i])
			}
		}
	}
	for _, c := range []struct{ text, want string }{
		{"", "ref.csv: no header (want reference_degC or reference_K, then the channels short and long)"},
		{"reference_F,short,long\n1,2,3\n", "ref.csv:1: column reference_F: unknown first column (want reference_degC or reference_K, then one column per channel)"},
		{"reference_degC,short\n1,2\n", "ref.csv:1: no column for channel long (want reference_degC, then short and long)"},
		{"reference_degC,short,long,mid\n1,2,3,4\n", `ref.csv:1: column mid: no channel "mid" in this head (channels: short and long)`},
		{"reference_degC,short,long\n", "ref.csv:1: no points after the header"},
		{"reference_degC,short,long\n1500,2,x\n", `ref.csv:2: column long: "x" is not a number`},
		{"reference_degC,short,long\n1500,0,3\n-274,1,1\n", "ref.csv:2: column short: signal 0 must be positive\nref.csv:3: column reference_degC: -274 is not above absolute zero"},
		{"1500,2,3\n", "ref.csv:1: missing header: line 1 holds numbers (want reference_degC or reference_K, then one column per channel)"},
	} {
		pts, err := ReadTunePoints("ref.csv", strings.NewReader(c.text), chans)
		if err == nil || err.Error() != c.want || pts != nil {
			t.Errorf("%q:\n got %v\nwant %s", c.text, err, c.want)
		}
	}
}

func demoTuneConfig(t testing.TB) *config.Config {
	t.Helper()
	cfg, err := config.Load("../configs/demo.yaml")
	if err != nil {
		t.Fatal(err)
	}
	return cfg
}

func TestTuneRatioDemo(t *testing.T) {
	// Source: ../testdata/emissivity_ratio.csv (scipy quad + brentq): on
	// the 0.875–0.925 / 1.025–1.075 µm pair of configs/demo.yaml's head
	// caster1-strand, a target at 1273.15 K with ε_short/ε_long = 1.01
	// reads 1280.2977936885388 K with k = 1. Tuning against the
	// 1273.15 K reference finds k = 1.01, and Reads shows the 1280.30 K
	// the head reads now.
	cfg := demoTuneConfig(t)
	short, _ := convert.NewBand(0.875e-6, 0.925e-6, convert.C2ITS90)
	long, _ := convert.NewBand(1.025e-6, 1.075e-6, convert.C2ITS90)
	const tRef = 1273.15
	pts := []convert.TunePoint{{Reference: tRef, Short: 0.75 * 1.01 * short.Signal(tRef), Long: 0.75 * long.Signal(tRef)}}
	rep, err := TuneRatio(cfg, "caster1-strand", pts, 1)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(rep.Result.K/1.01-1) > 1e-9 || rep.Short != "short" || rep.Long != "long" || rep.Configured != 1 {
		t.Errorf("report %+v", rep)
	}
	if d := rep.Reads[0] - 1280.2977936885388; math.Abs(d) > 0.001 {
		t.Errorf("reads %.6f K now, scipy says 1280.2978 K", rep.Reads[0])
	}
}

func TestTuneRatioRefuses(t *testing.T) {
	cfg := demoTuneConfig(t)
	if _, err := TuneRatio(cfg, "nosuch", []convert.TunePoint{{Reference: 1500, Short: 1, Long: 1}}, 1); err == nil || !strings.Contains(err.Error(), `no head "nosuch"`) {
		t.Errorf("unknown head: %v", err)
	}
	if _, err := TuneRatio(cfg, "caster1-strand", nil, 1); err == nil || !strings.Contains(err.Error(), "no points") {
		t.Errorf("no points: %v", err)
	}
	three := &config.Config{File: "three.yaml", Heads: []config.Head{{Name: "kiln", Channels: make([]config.Channel, 3)}}}
	_, err := TuneChannels(three, "kiln")
	if err == nil || !strings.Contains(err.Error(), "head kiln has 3 channels: emissivity-ratio tuning sets emissivity_ratio, which applies to two-channel heads") {
		t.Errorf("three channels: %v", err)
	}
}

func FuzzReadTunePoints(f *testing.F) {
	f.Add([]byte("reference_degC,short,long\n1532,10,20\n"))
	f.Add([]byte("# c\nreference_K,long,short\r\n1805.15,20,10\r\n\r\n"))
	f.Add([]byte("reference_degC,short,long,mid\n1,2,3,4\n"))
	f.Add([]byte("1500,2,3\n1e400,-0,+.5e-3\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		pts, err := ReadTunePoints("fuzz.csv", bytes.NewReader(data), []string{"short", "long"})
		if err != nil {
			var errs TableErrors
			if pts != nil || !errors.As(err, &errs) || len(errs) == 0 {
				t.Fatalf("points %v, error %T %v", pts, err, err)
			}
			return
		}
		if len(pts) == 0 {
			t.Fatal("no points and no error")
		}
		for _, p := range pts {
			if !(p.Reference > 0) || !(p.Short > 0) || !(p.Long > 0) || math.IsInf(p.Reference, 0) || math.IsInf(p.Short, 0) || math.IsInf(p.Long, 0) {
				t.Fatalf("accepted %+v", p)
			}
		}
	})
}
