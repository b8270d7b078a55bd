package mqtt

import (
	"math"
	"strconv"
	"time"
	"unicode/utf8"
)

// Reading is the JSON payload of <root>/<gateway>/<head>/reading and the
// output of the convert command. Field names and meanings are the Reading
// contract of the design: temperatures and the uncertainty are in Unit
// ("degC" or "K"), wavelengths in micrometres, Uncertainty is expanded with
// coverage factor k = 2, StatusCode is an OPC UA StatusCode number.
//
// A value that could not be computed is nil and appears as null. A
// non-finite value (NaN, ±Inf) is treated the same way: JSON has no such
// numbers, so it is written as null, or left out where the field is
// omitted when empty.
type Reading struct {
	Gateway          string            `json:"gateway"`
	Head             string            `json:"head"`
	Seq              uint64            `json:"seq"`
	Time             time.Time         `json:"time"`
	Temperature      *float64          `json:"temperature"`
	RawTemperature   *float64          `json:"raw_temperature"`
	Unit             string            `json:"unit"`
	Ratio            *float64          `json:"ratio"`
	EmissivityRatio  float64           `json:"emissivity_ratio"`
	Channels         []Channel         `json:"channels"`
	PairTemperatures []PairTemperature `json:"pair_temperatures,omitempty"`
	Nongrey          *float64          `json:"nongrey,omitempty"`
	FitResidual      *float64          `json:"fit_residual,omitempty"`
	FitTemperature   *float64          `json:"fit_temperature,omitempty"`
	EmissivitySlope  *float64          `json:"emissivity_slope,omitempty"`
	Extras           []NamedValue      `json:"extras,omitempty"`
	Uncertainty      *float64          `json:"uncertainty"`
	Quality          string            `json:"quality"`
	StatusCode       uint32            `json:"status_code"`
	Flags            []string          `json:"flags"`
	Replayed         bool              `json:"replayed"`
}

// Channel is one spectral channel of a Reading.
type Channel struct {
	Name                  string   `json:"name"`
	WavelengthUM          float64  `json:"wavelength_um"`
	Signal                *float64 `json:"signal"`
	SignalFraction        *float64 `json:"signal_fraction"`
	BrightnessTemperature *float64 `json:"brightness_temperature"`
}

// NamedValue is one of a head's extra values (its internal temperature, a
// setting read back), named as in the configuration.
type NamedValue struct {
	Name  string   `json:"name"`
	Value *float64 `json:"value"`
}

// PairTemperature is the ratio temperature of one pair of channels, named
// like "ch1/ch2".
type PairTemperature struct {
	Pair        string   `json:"pair"`
	Temperature *float64 `json:"temperature"`
}

// TimeLayout is the layout of Reading.Time on the wire: RFC 3339 in UTC
// with exactly three fractional digits (milliseconds, truncated), e.g.
// 2026-12-01T22:00:00.123Z.
const TimeLayout = "2006-01-02T15:04:05.000Z07:00"

// MarshalJSON returns r.AppendJSON(nil), so that encoding/json writes a
// Reading the same way as AppendJSON.
func (r Reading) MarshalJSON() ([]byte, error) {
	return r.AppendJSON(nil), nil
}

// AppendJSON appends r as one compact JSON object to dst and returns the
// extended slice. The bytes are what encoding/json.Marshal writes for the
// struct with these rules on top:
//   - Time is written with TimeLayout in UTC; a time whose year lies outside
//     0000..9999 cannot be written in RFC 3339 and is written as null;
//   - Channels and Flags are always arrays ([] when nil);
//   - a non-finite float is written as null, and a pointer to one counts as
//     nil (so omitted for nongrey, fit_residual, fit_temperature and
//     emissivity_slope).
//
// Strings are escaped as encoding/json does by default (HTML-safe, invalid
// UTF-8 replaced by U+FFFD). AppendJSON does not allocate when dst has room.
func (r *Reading) AppendJSON(dst []byte) []byte {
	dst = append(dst, `{"gateway":`...)
	dst = appendString(dst, r.Gateway)
	dst = append(dst, `,"head":`...)
	dst = appendString(dst, r.Head)
	dst = append(dst, `,"seq":`...)
	dst = strconv.AppendUint(dst, r.Seq, 10)
	dst = append(dst, `,"time":`...)
	dst = appendTime(dst, r.Time)
	dst = append(dst, `,"temperature":`...)
	dst = appendFloatPtr(dst, r.Temperature)
	dst = append(dst, `,"raw_temperature":`...)
	dst = appendFloatPtr(dst, r.RawTemperature)
	dst = append(dst, `,"unit":`...)
	dst = appendString(dst, r.Unit)
	dst = append(dst, `,"ratio":`...)
	dst = appendFloatPtr(dst, r.Ratio)
	dst = append(dst, `,"emissivity_ratio":`...)
	dst = appendFloat(dst, r.EmissivityRatio)
	dst = append(dst, `,"channels":[`...)
	for i := range r.Channels {
		c := &r.Channels[i]
		if i > 0 {
			dst = append(dst, ',')
		}
		dst = append(dst, `{"name":`...)
		dst = appendString(dst, c.Name)
		dst = append(dst, `,"wavelength_um":`...)
		dst = appendFloat(dst, c.WavelengthUM)
		dst = append(dst, `,"signal":`...)
		dst = appendFloatPtr(dst, c.Signal)
		dst = append(dst, `,"signal_fraction":`...)
		dst = appendFloatPtr(dst, c.SignalFraction)
		dst = append(dst, `,"brightness_temperature":`...)
		dst = appendFloatPtr(dst, c.BrightnessTemperature)
		dst = append(dst, '}')
	}
	dst = append(dst, ']')
	if len(r.PairTemperatures) > 0 {
		dst = append(dst, `,"pair_temperatures":[`...)
		for i := range r.PairTemperatures {
			pt := &r.PairTemperatures[i]
			if i > 0 {
				dst = append(dst, ',')
			}
			dst = append(dst, `{"pair":`...)
			dst = appendString(dst, pt.Pair)
			dst = append(dst, `,"temperature":`...)
			dst = appendFloatPtr(dst, pt.Temperature)
			dst = append(dst, '}')
		}
		dst = append(dst, ']')
	}
	if finite(r.Nongrey) {
		dst = append(dst, `,"nongrey":`...)
		dst = appendFloat(dst, *r.Nongrey)
	}
	if finite(r.FitResidual) {
		dst = append(dst, `,"fit_residual":`...)
		dst = appendFloat(dst, *r.FitResidual)
	}
	if finite(r.FitTemperature) {
		dst = append(dst, `,"fit_temperature":`...)
		dst = appendFloat(dst, *r.FitTemperature)
	}
	if finite(r.EmissivitySlope) {
		dst = append(dst, `,"emissivity_slope":`...)
		dst = appendFloat(dst, *r.EmissivitySlope)
	}
	if len(r.Extras) > 0 {
		dst = append(dst, `,"extras":[`...)
		for i := range r.Extras {
			if i > 0 {
				dst = append(dst, ',')
			}
			dst = append(dst, `{"name":`...)
			dst = appendString(dst, r.Extras[i].Name)
			dst = append(dst, `,"value":`...)
			dst = appendFloatPtr(dst, r.Extras[i].Value)
			dst = append(dst, '}')
		}
		dst = append(dst, ']')
	}
	dst = append(dst, `,"uncertainty":`...)
	dst = appendFloatPtr(dst, r.Uncertainty)
	dst = append(dst, `,"quality":`...)
	dst = appendString(dst, r.Quality)
	dst = append(dst, `,"status_code":`...)
	dst = strconv.AppendUint(dst, uint64(r.StatusCode), 10)
	dst = append(dst, `,"flags":[`...)
	for i, f := range r.Flags {
		if i > 0 {
			dst = append(dst, ',')
		}
		dst = appendString(dst, f)
	}
	dst = append(dst, `],"replayed":`...)
	dst = strconv.AppendBool(dst, r.Replayed)
	return append(dst, '}')
}

func finite(p *float64) bool {
	return p != nil && !math.IsNaN(*p) && !math.IsInf(*p, 0)
}

func appendFloatPtr(dst []byte, p *float64) []byte {
	if p == nil {
		return append(dst, "null"...)
	}
	return appendFloat(dst, *p)
}

// appendFloat writes f as encoding/json writes a float64: the shortest
// representation that reads back to the same value, in plain decimal
// notation for 1e-6 <= |f| < 1e21 and in exponent notation outside, with
// a two-digit negative exponent shortened (1e-07 becomes 1e-7). Non-finite
// values become null.
func appendFloat(dst []byte, f float64) []byte {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return append(dst, "null"...)
	}
	format := byte('f')
	if abs := math.Abs(f); abs != 0 && (abs < 1e-6 || abs >= 1e21) {
		format = 'e'
	}
	dst = strconv.AppendFloat(dst, f, format, -1, 64)
	if format == 'e' {
		n := len(dst)
		if n >= 4 && dst[n-4] == 'e' && dst[n-3] == '-' && dst[n-2] == '0' {
			dst[n-2] = dst[n-1]
			dst = dst[:n-1]
		}
	}
	return dst
}

// appendTime writes t in UTC with TimeLayout, quoted, or null when its year
// has no four-digit RFC 3339 form.
func appendTime(dst []byte, t time.Time) []byte {
	t = t.UTC()
	year, month, day := t.Date()
	if year < 0 || year > 9999 {
		return append(dst, "null"...)
	}
	hour, minute, sec := t.Clock()
	ms := t.Nanosecond() / 1e6
	// Written by hand: the same bytes as t.AppendFormat(dst, TimeLayout),
	// without parsing the layout on every reading.
	return append(dst, '"',
		byte('0'+year/1000), byte('0'+year/100%10), byte('0'+year/10%10), byte('0'+year%10), '-',
		byte('0'+month/10), byte('0'+month%10), '-',
		byte('0'+day/10), byte('0'+day%10), 'T',
		byte('0'+hour/10), byte('0'+hour%10), ':',
		byte('0'+minute/10), byte('0'+minute%10), ':',
		byte('0'+sec/10), byte('0'+sec%10), '.',
		byte('0'+ms/100), byte('0'+ms/10%10), byte('0'+ms%10), 'Z', '"')
}

const hexDigits = "0123456789abcdef"

// htmlSafe[b] is true for the ASCII bytes encoding/json copies unchanged
// in its default, HTML-safe mode: printable ASCII except '"', '\\', '<',
// '>' and '&'.
var htmlSafe = func() (t [utf8.RuneSelf]bool) {
	for b := byte(0x20); b < utf8.RuneSelf; b++ {
		t[b] = b != '"' && b != '\\' && b != '<' && b != '>' && b != '&'
	}
	return t
}()

// appendString writes s as a JSON string the way encoding/json.Marshal
// does: short escapes for '"', '\\', \b, \f, \n, \r, \t; \u00XX for the
// other control characters and for '<', '>', '&'; \ufffd for each byte of
// invalid UTF-8; \u2028 and \u2029 escaped for JavaScript.
func appendString(dst []byte, s string) []byte {
	dst = append(dst, '"')
	start := 0
	for i := 0; i < len(s); {
		if b := s[i]; b < utf8.RuneSelf {
			if htmlSafe[b] {
				i++
				continue
			}
			dst = append(dst, s[start:i]...)
			switch b {
			case '\\', '"':
				dst = append(dst, '\\', b)
			case '\b':
				dst = append(dst, '\\', 'b')
			case '\f':
				dst = append(dst, '\\', 'f')
			case '\n':
				dst = append(dst, '\\', 'n')
			case '\r':
				dst = append(dst, '\\', 'r')
			case '\t':
				dst = append(dst, '\\', 't')
			default:
				dst = append(dst, '\\', 'u', '0', '0', hexDigits[b>>4], hexDigits[b&0xf])
			}
			i++
			start = i
			continue
		}
		c, size := utf8.DecodeRuneInString(s[i:])
		if c == utf8.RuneError && size == 1 {
			dst = append(dst, s[start:i]...)
			dst = append(dst, `\ufffd`...)
			i += size
			start = i
			continue
		}
		if c == '\u2028' || c == '\u2029' {
			dst = append(dst, s[start:i]...)
			dst = append(dst, '\\', 'u', '2', '0', '2', hexDigits[c&0xf])
			i += size
			start = i
			continue
		}
		i += size
	}
	dst = append(dst, s[start:]...)
	return append(dst, '"')
}
