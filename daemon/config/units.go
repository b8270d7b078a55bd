package config

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"
	"time"
)

// A quantity is written as a number, optional spaces, and a unit, the way
// people write it on a data sheet: "0.90um", "1580 degC", "5K", "30K/s",
// "5%". Units are case-sensitive. The number is a decimal with an optional
// sign, fraction and exponent ("1.2e3"); hexadecimal, underscores, "inf"
// and "nan" are not numbers here.

// unit is one spelling of a unit: value_SI = number·10^exp·factor + offset.
// The power of ten is applied to the decimal text before it is rounded to
// binary, so "0.9um" is the double nearest 0.9e-6 exactly.
type unit struct {
	name           string
	exp            int
	factor, offset float64
}

// kind is a family of units for one physical quantity.
type kind struct {
	what    string // "a length such as 0.9um", used in messages
	want    string // "nm, um, mm or m", used in messages
	units   []unit
	percent bool // a bare number 0..1 is allowed (fractions)
}

// The SI prefixes are exact by definition (SI Brochure, 9th edition, 2019).
// 0 °C = 273.15 K exactly (ITS-90 and the SI Brochure).
var (
	lengthKind = kind{
		what: "a length such as 0.9um",
		want: "nm, um, mm or m",
		units: []unit{
			{"nm", -9, 1, 0}, {"um", -6, 1, 0}, {"µm", -6, 1, 0}, {"μm", -6, 1, 0},
			{"mm", -3, 1, 0}, {"m", 0, 1, 0},
		},
	}
	temperatureKind = kind{
		what:  "a temperature such as 1200degC or 1473K",
		want:  "K or degC",
		units: []unit{{"K", 0, 1, 0}, {"degC", 0, 1, 273.15}},
	}
	temperatureDifferenceKind = kind{
		what:  "a temperature difference such as 5K",
		want:  "K",
		units: []unit{{"K", 0, 1, 0}},
	}
	rateKind = kind{
		what:  "a rate such as 30K/s",
		want:  "K/s or K/min",
		units: []unit{{"K/s", 0, 1, 0}, {"K/min", 0, 1.0 / 60, 0}},
	}
	fractionKind = kind{
		what:    "a fraction such as 5% or 0.05",
		want:    "% or a bare number 0..1",
		units:   []unit{{"%", -2, 1, 0}},
		percent: true,
	}
	lengthTemperatureKind = kind{
		what: "a length·temperature such as 15.2umK",
		want: "umK or mK",
		units: []unit{
			{"umK", -6, 1, 0}, {"µmK", -6, 1, 0}, {"μmK", -6, 1, 0}, {"mK", 0, 1, 0},
		},
	}
)

// ParseLength parses a length ("0.9um", "900 nm", "0.0009mm") and returns
// metres. Units: nm, um (also µm), mm, m.
func ParseLength(s string) (float64, error) { return parseQuantity(s, &lengthKind) }

// ParseTemperature parses an absolute temperature ("1200degC", "1473.15K")
// and returns kelvin: T/K = t/°C + 273.15. The result must be above
// absolute zero.
func ParseTemperature(s string) (float64, error) {
	v, err := parseQuantity(s, &temperatureKind)
	if err != nil {
		return 0, err
	}
	if v <= 0 {
		return 0, errors.New("must be above absolute zero (0K, -273.15degC)")
	}
	return v, nil
}

// ParseTemperatureDifference parses a temperature difference ("5K") and
// returns kelvin. Only K is accepted: "5degC" would read as an absolute
// temperature to many people.
func ParseTemperatureDifference(s string) (float64, error) {
	return parseQuantity(s, &temperatureDifferenceKind)
}

// ParseRate parses a rate of temperature change ("30K/s", "120K/min") and
// returns K/s.
func ParseRate(s string) (float64, error) { return parseQuantity(s, &rateKind) }

// ParseFraction parses a fraction written as a percentage ("5%" = 0.05) or
// as a bare number from 0 to 1 ("0.05"). A bare number outside 0..1 is an
// error, since "5" most likely means 5 %. Percentages are not limited here;
// each setting checks its own range.
func ParseFraction(s string) (float64, error) { return parseQuantity(s, &fractionKind) }

// ParseLengthTemperature parses a length·temperature, the unit of the
// Sakuma–Hattori B coefficient ("15.2umK", "1.52e-5mK"), and returns m·K.
// Units: umK (also µmK), mK.
func ParseLengthTemperature(s string) (float64, error) {
	return parseQuantity(s, &lengthTemperatureKind)
}

// ParseDuration parses a Go duration ("500ms", "2s", "1m30s"; units ns, us,
// µs, ms, s, m, h). Spaces are ignored ("500 ms", "1m 30s"). A bare number
// is an error: "missing unit".
func ParseDuration(s string) (time.Duration, error) {
	const what = "a duration such as 500ms"
	compact := strings.Join(strings.Fields(s), "")
	if compact == "" {
		return 0, fmt.Errorf("missing value (want %s)", what)
	}
	_, rest, ok := splitNumber(compact)
	switch {
	case !ok:
		return 0, fmt.Errorf("%q is not a number with a unit (want %s)", s, what)
	case rest == "":
		return 0, fmt.Errorf("missing unit (want %s)", what)
	}
	d, err := time.ParseDuration(compact)
	if err == nil {
		return d, nil
	}
	u := rest
	if i := strings.IndexAny(u, "0123456789.+-"); i >= 0 {
		u = u[:i]
	}
	switch u {
	case "ns", "us", "µs", "μs", "ms", "s", "m", "h":
		return 0, fmt.Errorf("bad duration %q (want %s or 1m30s)", s, what)
	}
	return 0, fmt.Errorf("unknown unit %q (want ns, us, ms, s, m or h)", u)
}

// parseQuantity parses "number unit" for the given kind and converts the
// number to the kind's SI unit.
func parseQuantity(s string, k *kind) (float64, error) {
	s = strings.TrimSpace(s)
	if s == "" {
		return 0, fmt.Errorf("missing value (want %s)", k.what)
	}
	numText, rest, ok := splitNumber(s)
	if !ok {
		return 0, fmt.Errorf("%q is not a number with a unit (want %s)", s, k.what)
	}
	v, err := scaled(numText, 0)
	if err != nil {
		return 0, err
	}
	rest = strings.TrimSpace(rest)
	if rest == "" {
		if k.percent {
			return bareFraction(v)
		}
		return 0, fmt.Errorf("missing unit (want %s)", k.what)
	}
	for _, u := range k.units {
		if u.name == rest {
			x, err := scaled(numText, u.exp)
			if err != nil {
				return 0, err
			}
			out := x*u.factor + u.offset
			if math.IsInf(out, 0) || math.IsNaN(out) {
				return 0, fmt.Errorf("number %s is out of range", numText)
			}
			return out, nil
		}
	}
	return 0, fmt.Errorf("unknown unit %q (want %s)", rest, k.want)
}

// scaled parses a decimal number (as split by splitNumber) times 10^exp,
// rounding once.
func scaled(num string, exp int) (float64, error) {
	mant, e := num, 0
	if i := strings.IndexAny(num, "eE"); i >= 0 {
		n, err := strconv.Atoi(num[i+1:])
		if err != nil || n > 1e6 || n < -1e6 {
			return 0, fmt.Errorf("number %s is out of range", num)
		}
		mant, e = num[:i], n
	}
	v, err := strconv.ParseFloat(mant+"e"+strconv.Itoa(e+exp), 64)
	if err != nil || math.IsInf(v, 0) {
		return 0, fmt.Errorf("number %s is out of range", num)
	}
	return v, nil
}

// bareFraction checks a fraction written without a unit.
func bareFraction(v float64) (float64, error) {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, errors.New("must be a finite number")
	}
	if v < 0 || v > 1 {
		return 0, fmt.Errorf("bare fraction %s is outside 0..1 (write %s%% for a percentage)", fmtNum(v), fmtNum(v))
	}
	return v, nil
}

// splitNumber splits the leading decimal number off s. It accepts an
// optional sign, digits with an optional decimal point (at least one
// digit), and an exponent only when digits follow the e or E, so that a
// unit may follow directly ("1e3K", "5e").
func splitNumber(s string) (num, rest string, ok bool) {
	i := 0
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		i++
	}
	digits := 0
	for i < len(s) && isDigit(s[i]) {
		i++
		digits++
	}
	if i < len(s) && s[i] == '.' {
		i++
		for i < len(s) && isDigit(s[i]) {
			i++
			digits++
		}
	}
	if digits == 0 {
		return "", s, false
	}
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		j := i + 1
		if j < len(s) && (s[j] == '+' || s[j] == '-') {
			j++
		}
		if j < len(s) && isDigit(s[j]) {
			for j < len(s) && isDigit(s[j]) {
				j++
			}
			i = j
		}
	}
	return s[:i], s[i:], true
}

func isDigit(c byte) bool { return '0' <= c && c <= '9' }

// fmtNum formats a number in the shortest form that reads back exactly.
func fmtNum(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// fmtLength formats a length in metres for messages: in micrometres, or
// in metres from 1 mm up.
func fmtLength(m float64) string {
	if math.Abs(m) >= 1e-3 {
		return fmtNum(roundSig(m)) + "m"
	}
	return fmtNum(roundSig(m*1e6)) + "um"
}

// fmtTemperature formats a temperature in kelvin as °C for messages.
func fmtTemperature(k float64) string { return fmtNum(roundSig(k-273.15)) + "degC" }

// roundSig rounds to 12 significant digits, hiding the binary noise of unit
// conversions (0.9e-6*1e6 = 0.8999999999999999) in messages.
func roundSig(v float64) float64 {
	if v == 0 || math.IsNaN(v) || math.IsInf(v, 0) {
		return v
	}
	r, err := strconv.ParseFloat(strconv.FormatFloat(v, 'g', 12, 64), 64)
	if err != nil {
		return v
	}
	return r
}
