package config

import (
	"math"
	"testing"
	"time"
)

// The expected values follow from the definitions of the units: SI
// prefixes are exact powers of ten and 0 °C = 273.15 K exactly (SI
// Brochure, 9th edition, 2019; ITS-90). Each is the double nearest the
// decimal value, so they compare exactly.

type quantityCase struct {
	in   string
	want float64
	err  string // exact message; empty when the parse succeeds
}

func checkQuantities(t *testing.T, parse func(string) (float64, error), cases []quantityCase) {
	t.Helper()
	for _, c := range cases {
		got, err := parse(c.in)
		switch {
		case c.err != "":
			if err == nil {
				t.Errorf("%q: got %v, want error %q", c.in, got, c.err)
			} else if err.Error() != c.err {
				t.Errorf("%q: error %q, want %q", c.in, err, c.err)
			}
		case err != nil:
			t.Errorf("%q: unexpected error %v", c.in, err)
		case got != c.want:
			t.Errorf("%q: got %v, want %v", c.in, got, c.want)
		}
	}
}

func TestParseLength(t *testing.T) {
	checkQuantities(t, ParseLength, []quantityCase{
		{"0.9um", 0.9e-6, ""},
		{"0.90um", 0.9e-6, ""},
		{"0.9 um", 0.9e-6, ""},
		{" 0.9um ", 0.9e-6, ""},
		{"0.9µm", 0.9e-6, ""}, // U+00B5 MICRO SIGN
		{"0.9μm", 0.9e-6, ""}, // U+03BC GREEK SMALL LETTER MU
		{"900nm", 900e-9, ""},
		{"1.045238um", 1.045238e-6, ""},
		{"0.0009mm", 0.0009e-3, ""},
		{"9e-7m", 9e-7, ""},
		{"9E-7m", 9e-7, ""},
		{"+0.9um", 0.9e-6, ""},
		{"-0.9um", -0.9e-6, ""}, // the sign is the field's business
		{".5um", 0.5e-6, ""},
		{"5.um", 5e-6, ""},
		{"0um", 0, ""},
		{"1.5e3nm", 1.5e-6, ""},
		{"0.9", 0, "missing unit (want a length such as 0.9um)"},
		{"0.9UM", 0, `unknown unit "UM" (want nm, um, mm or m)`},
		{"0.9 micron", 0, `unknown unit "micron" (want nm, um, mm or m)`},
		{"0.9K", 0, `unknown unit "K" (want nm, um, mm or m)`},
		{"um", 0, `"um" is not a number with a unit (want a length such as 0.9um)`},
		{"", 0, "missing value (want a length such as 0.9um)"},
		{"nan um", 0, `"nan um" is not a number with a unit (want a length such as 0.9um)`},
		{"inf m", 0, `"inf m" is not a number with a unit (want a length such as 0.9um)`},
		{"0x10um", 0, `unknown unit "x10um" (want nm, um, mm or m)`},
		{"1e999m", 0, "number 1e999 is out of range"},
		{"1e99999999999m", 0, "number 1e99999999999 is out of range"},
		{"1,5um", 0, `unknown unit ",5um" (want nm, um, mm or m)`},
	})
}

// celsius is t/°C + 273.15 in float64 arithmetic, as the parser does it.
func celsius(t float64) float64 { return t + 273.15 }

func TestParseTemperature(t *testing.T) {
	checkQuantities(t, ParseTemperature, []quantityCase{
		{"1200degC", celsius(1200), ""},
		{"1580 degC", celsius(1580), ""},
		{"1473.15K", 1473.15, ""},
		{"0degC", 273.15, ""},
		{"-273degC", celsius(-273), ""},
		{"5e-3K", 0.005, ""},
		{"0K", 0, "must be above absolute zero (0K, -273.15degC)"},
		{"-273.15degC", 0, "must be above absolute zero (0K, -273.15degC)"},
		{"-300degC", 0, "must be above absolute zero (0K, -273.15degC)"},
		{"1200", 0, "missing unit (want a temperature such as 1200degC or 1473K)"},
		{"1200kelvin", 0, `unknown unit "kelvin" (want K or degC)`},
		{"1200°C", 0, `unknown unit "°C" (want K or degC)`},
		{"1200degc", 0, `unknown unit "degc" (want K or degC)`},
		{"1200k", 0, `unknown unit "k" (want K or degC)`},
	})
}

func TestParseTemperatureDifference(t *testing.T) {
	checkQuantities(t, ParseTemperatureDifference, []quantityCase{
		{"5K", 5, ""},
		{"0.5 K", 0.5, ""},
		{"5", 0, "missing unit (want a temperature difference such as 5K)"},
		{"5degC", 0, `unknown unit "degC" (want K)`},
	})
}

func TestParseRate(t *testing.T) {
	checkQuantities(t, ParseRate, []quantityCase{
		{"30K/s", 30, ""},
		{"120K/min", 2, ""},
		{"90 K/min", 1.5, ""},
		{"30", 0, "missing unit (want a rate such as 30K/s)"},
		{"30K", 0, `unknown unit "K" (want K/s or K/min)`},
		{"30K/h", 0, `unknown unit "K/h" (want K/s or K/min)`},
	})
}

func TestParseFraction(t *testing.T) {
	checkQuantities(t, ParseFraction, []quantityCase{
		{"5%", 0.05, ""},
		{"0.3%", 0.003, ""},
		{"100%", 1, ""},
		{"150%", 1.5, ""}, // each setting checks its own range
		{"5 %", 0.05, ""},
		{"0.05", 0.05, ""},
		{"1", 1, ""},
		{"0", 0, ""},
		{"5", 0, "bare fraction 5 is outside 0..1 (write 5% for a percentage)"},
		{"-0.1", 0, "bare fraction -0.1 is outside 0..1 (write -0.1% for a percentage)"},
		{"5pct", 0, `unknown unit "pct" (want % or a bare number 0..1)`},
	})
}

func TestParseLengthTemperature(t *testing.T) {
	checkQuantities(t, ParseLengthTemperature, []quantityCase{
		{"15.2umK", 15.2e-6, ""},
		{"15.2µmK", 15.2e-6, ""},
		{"7.4012umK", 7.4012e-6, ""},
		{"-3umK", -3e-6, ""},
		{"1.52e-5mK", 1.52e-5, ""},
		{"15.2", 0, "missing unit (want a length·temperature such as 15.2umK)"},
		{"15.2um", 0, `unknown unit "um" (want umK or mK)`},
		{"15.2 um K", 0, `unknown unit "um K" (want umK or mK)`},
	})
}

func TestParseDuration(t *testing.T) {
	cases := []struct {
		in   string
		want time.Duration
		err  string
	}{
		{"500ms", 500 * time.Millisecond, ""},
		{"2s", 2 * time.Second, ""},
		{"1m30s", 90 * time.Second, ""},
		{"1m 30s", 90 * time.Second, ""},
		{"500 ms", 500 * time.Millisecond, ""},
		{"1.5s", 1500 * time.Millisecond, ""},
		{"250us", 250 * time.Microsecond, ""},
		{"250µs", 250 * time.Microsecond, ""},
		{"-1s", -time.Second, ""}, // the sign is the field's business
		{"0s", 0, ""},
		{"500", 0, "missing unit (want a duration such as 500ms)"},
		{"0", 0, "missing unit (want a duration such as 500ms)"},
		{"", 0, "missing value (want a duration such as 500ms)"},
		{"5sec", 0, `unknown unit "sec" (want ns, us, ms, s, m or h)`},
		{"2 days", 0, `unknown unit "days" (want ns, us, ms, s, m or h)`},
		{"ms", 0, `"ms" is not a number with a unit (want a duration such as 500ms)`},
		{"1m30", 0, `bad duration "1m30" (want a duration such as 500ms or 1m30s)`},
		{"99999999999h", 0, `bad duration "99999999999h" (want a duration such as 500ms or 1m30s)`},
	}
	for _, c := range cases {
		got, err := ParseDuration(c.in)
		switch {
		case c.err != "":
			if err == nil || err.Error() != c.err {
				t.Errorf("%q: got %v, %v; want error %q", c.in, got, err, c.err)
			}
		case err != nil:
			t.Errorf("%q: unexpected error %v", c.in, err)
		case got != c.want:
			t.Errorf("%q: got %v, want %v", c.in, got, c.want)
		}
	}
}

// TestParseNeverNonFinite runs odd inputs through every parser: a value
// that parses is always finite.
func TestParseNeverNonFinite(t *testing.T) {
	inputs := []string{"1e308m", "1e308umK", "1.7e308degC", "1e-400um", "-1e308K/min", "1e308%", "9e307 K"}
	parsers := map[string]func(string) (float64, error){
		"length": ParseLength, "temperature": ParseTemperature, "difference": ParseTemperatureDifference,
		"rate": ParseRate, "fraction": ParseFraction, "length·temperature": ParseLengthTemperature,
	}
	for name, parse := range parsers {
		for _, in := range inputs {
			if v, err := parse(in); err == nil && (math.IsNaN(v) || math.IsInf(v, 0)) {
				t.Errorf("%s(%q) = %v", name, in, v)
			}
		}
	}
}

func TestFormatting(t *testing.T) {
	for _, c := range []struct{ got, want string }{
		{fmtLength(0.9e-6), "0.9um"},
		{fmtLength(1.05e-6), "1.05um"},
		{fmtLength(1.025), "1.025m"},
		{fmtTemperature(973.15), "700degC"},
		{fmtTemperature(1473.15), "1200degC"},
	} {
		if c.got != c.want {
			t.Errorf("got %q, want %q", c.got, c.want)
		}
	}
}
