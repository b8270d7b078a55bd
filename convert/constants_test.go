package convert

import (
	"math"
	"strings"
	"testing"
)

func TestConstantsMatchScipy(t *testing.T) {
	// Source: ../testdata/constants_reference.csv, written by
	// constants_reference.py from scipy.constants (CODATA 2018; Tiesinga et
	// al., Rev. Mod. Phys. 93, 025010, 2021).
	tb := readRefTable(t, "constants_reference.csv")
	if !strings.Contains(tb.comments[0], "scipy ") {
		t.Errorf("constants_reference.csv header does not name the scipy version: %q", tb.comments[0])
	}
	row := tb.rows[0]
	val := func(name string) float64 { return row[tb.col(t, name)] }
	for _, c := range []struct {
		name      string
		got, want float64
		rel       float64
	}{
		// The tabulated CODATA values, digit for digit.
		{"c2 = hc/k (table)", C2CODATA2018, val("c2_table"), 0},
		{"c1L = 2hc² (table)", C1L, val("c1L_table"), 0},
		// The same from the exact SI h, c, k: the constants carry ten
		// significant digits, so half a unit in the tenth is ≤ 5e-10.
		{"c2 = hc/k (computed)", C2CODATA2018, val("c2_computed"), 5e-10},
		{"c1L = 2hc² (computed)", C1L, val("c1L_computed"), 5e-10},
		// The values the tests use for Wien's displacement law and σ.
		{"Stefan–Boltzmann σ", sigmaSB, val("sigma_table"), 0},
		{"Wien b", wienB, val("wien_b_table"), 0},
	} {
		if rel := math.Abs(c.got/c.want - 1); !(rel <= c.rel) {
			t.Errorf("%s: glowgate %.16g, scipy.constants %.16g (rel %.2g > %g)", c.name, c.got, c.want, rel, c.rel)
		}
	}
}

func TestC2ITS90(t *testing.T) {
	// ITS-90 defines radiation thermometry with c2 = 0.014388 m·K
	// (Preston-Thomas, Metrologia 27, 3, 1990).
	if C2ITS90 != 0.014388 {
		t.Errorf("C2ITS90 = %.17g, want 0.014388", C2ITS90)
	}
}

func TestC2ByName(t *testing.T) {
	for _, c := range []struct {
		name string
		want float64
	}{
		{"its90", C2ITS90}, {"ITS90", C2ITS90},
		{"codata2018", C2CODATA2018}, {"codata", C2CODATA2018}, {"CODATA2018", C2CODATA2018},
	} {
		got, err := C2ByName(c.name)
		if err != nil || got != c.want {
			t.Errorf("C2ByName(%q) = %g, %v; want %g", c.name, got, err, c.want)
		}
	}
	for _, name := range []string{"", "its-90", "codata2014", "1.4388e-2", " its90"} {
		if got, err := C2ByName(name); err == nil || !strings.Contains(err.Error(), "its90, codata2018 or codata") {
			t.Errorf("C2ByName(%q) = %g, %v; want an error listing the names", name, got, err)
		}
	}
}
