package mqtt_test

import (
	"bytes"
	"encoding/json"
	"math"
	"testing"
	"time"

	"glowgate/bus/mqtt"
)

func f(v float64) *float64 { return &v }

// refReading mirrors mqtt.Reading with the wire rules done by hand, so
// that encoding/json (Go standard library) can serve as the reference
// encoder: the time as a preformatted string, non-finite values as nil,
// nil Channels and Flags as empty arrays.
type refReading struct {
	Gateway          string                 `json:"gateway"`
	Head             string                 `json:"head"`
	Seq              uint64                 `json:"seq"`
	Time             *string                `json:"time"`
	Temperature      *float64               `json:"temperature"`
	RawTemperature   *float64               `json:"raw_temperature"`
	Unit             string                 `json:"unit"`
	Ratio            *float64               `json:"ratio"`
	EmissivityRatio  *float64               `json:"emissivity_ratio"`
	Channels         []refChannel           `json:"channels"`
	PairTemperatures []mqtt.PairTemperature `json:"pair_temperatures,omitempty"`
	Nongrey          *float64               `json:"nongrey,omitempty"`
	FitResidual      *float64               `json:"fit_residual,omitempty"`
	FitTemperature   *float64               `json:"fit_temperature,omitempty"`
	EmissivitySlope  *float64               `json:"emissivity_slope,omitempty"`
	Extras           []mqtt.NamedValue      `json:"extras,omitempty"`
	Uncertainty      *float64               `json:"uncertainty"`
	Quality          string                 `json:"quality"`
	StatusCode       uint32                 `json:"status_code"`
	Flags            []string               `json:"flags"`
	Replayed         bool                   `json:"replayed"`
}

type refChannel struct {
	Name                  string   `json:"name"`
	WavelengthUM          *float64 `json:"wavelength_um"`
	Signal                *float64 `json:"signal"`
	SignalFraction        *float64 `json:"signal_fraction"`
	BrightnessTemperature *float64 `json:"brightness_temperature"`
}

func fin(p *float64) *float64 {
	if p == nil || math.IsNaN(*p) || math.IsInf(*p, 0) {
		return nil
	}
	return p
}

func toRef(r *mqtt.Reading) refReading {
	var tm *string
	if u := r.Time.UTC(); u.Year() >= 0 && u.Year() <= 9999 {
		s := u.Format(mqtt.TimeLayout)
		tm = &s
	}
	ref := refReading{
		Gateway: r.Gateway, Head: r.Head, Seq: r.Seq, Time: tm,
		Temperature: fin(r.Temperature), RawTemperature: fin(r.RawTemperature),
		Unit: r.Unit, Ratio: fin(r.Ratio), EmissivityRatio: fin(&r.EmissivityRatio),
		Channels: []refChannel{}, Nongrey: fin(r.Nongrey), FitResidual: fin(r.FitResidual),
		FitTemperature: fin(r.FitTemperature), EmissivitySlope: fin(r.EmissivitySlope),
		Extras:      extrasRef(r.Extras),
		Uncertainty: fin(r.Uncertainty), Quality: r.Quality, StatusCode: r.StatusCode,
		Flags: []string{}, Replayed: r.Replayed,
	}
	for _, c := range r.Channels {
		ref.Channels = append(ref.Channels, refChannel{
			Name: c.Name, WavelengthUM: fin(&c.WavelengthUM), Signal: fin(c.Signal),
			SignalFraction: fin(c.SignalFraction), BrightnessTemperature: fin(c.BrightnessTemperature),
		})
	}
	for _, p := range r.PairTemperatures {
		ref.PairTemperatures = append(ref.PairTemperatures, mqtt.PairTemperature{Pair: p.Pair, Temperature: fin(p.Temperature)})
	}
	ref.Flags = append(ref.Flags, r.Flags...)
	return ref
}

// sampleReading is invented data shaped like a three-colour head.
func sampleReading() mqtt.Reading {
	return mqtt.Reading{
		Gateway: "caster2", Head: "mould-exit", Seq: 184467,
		Time:        time.Date(2026, 12, 1, 22, 0, 0, 123456789, time.UTC),
		Temperature: f(1523.4), RawTemperature: f(1524.125), Unit: "degC",
		Ratio: f(0.8731), EmissivityRatio: 1.02,
		Channels: []mqtt.Channel{
			{Name: "ch1", WavelengthUM: 0.75, Signal: f(21456.5), SignalFraction: f(0.62), BrightnessTemperature: f(1488.2)},
			{Name: "ch2", WavelengthUM: 0.9, Signal: f(33012), SignalFraction: f(0.64), BrightnessTemperature: f(1479.9)},
			{Name: "ch3", WavelengthUM: 1.05, Signal: nil, SignalFraction: nil, BrightnessTemperature: nil},
		},
		PairTemperatures: []mqtt.PairTemperature{{Pair: "ch1/ch2", Temperature: f(1523.4)}, {Pair: "ch2/ch3", Temperature: nil}},
		Nongrey:          f(3.5), FitResidual: f(0.0012), FitTemperature: f(1519.8), EmissivitySlope: f(-0.21),
		Extras:      []mqtt.NamedValue{{Name: "head_temperature", Value: f(41.5)}, {Name: "setting", Value: nil}},
		Uncertainty: f(4.8), Quality: "uncertain", StatusCode: 0x40930000,
		Flags: []string{"nongrey"}, Replayed: true,
	}
}

// A hand-checked payload: field order and names of the Reading contract,
// time in RFC 3339 UTC truncated to milliseconds (RFC 3339 section 5.6).
func TestReadingJSONLiteral(t *testing.T) {
	r := sampleReading()
	want := `{"gateway":"caster2","head":"mould-exit","seq":184467,"time":"2026-12-01T22:00:00.123Z",` +
		`"temperature":1523.4,"raw_temperature":1524.125,"unit":"degC","ratio":0.8731,"emissivity_ratio":1.02,` +
		`"channels":[{"name":"ch1","wavelength_um":0.75,"signal":21456.5,"signal_fraction":0.62,"brightness_temperature":1488.2},` +
		`{"name":"ch2","wavelength_um":0.9,"signal":33012,"signal_fraction":0.64,"brightness_temperature":1479.9},` +
		`{"name":"ch3","wavelength_um":1.05,"signal":null,"signal_fraction":null,"brightness_temperature":null}],` +
		`"pair_temperatures":[{"pair":"ch1/ch2","temperature":1523.4},{"pair":"ch2/ch3","temperature":null}],` +
		`"nongrey":3.5,"fit_residual":0.0012,"fit_temperature":1519.8,"emissivity_slope":-0.21,"extras":[{"name":"head_temperature","value":41.5},{"name":"setting","value":null}],"uncertainty":4.8,"quality":"uncertain","status_code":1083375616,` +
		`"flags":["nongrey"],"replayed":true}`
	if got := string(r.AppendJSON(nil)); got != want {
		t.Errorf("AppendJSON:\n got %s\nwant %s", got, want)
	}
}

func readingRows() map[string]mqtt.Reading {
	nan, inf := math.NaN(), math.Inf(1)
	berlin := time.FixedZone("CET", 3600)
	rows := map[string]mqtt.Reading{
		"sample": sampleReading(),
		"all null, nil slices": {
			Gateway: "gw", Head: "h1", Time: time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC),
			Unit: "K", Quality: "bad", StatusCode: 0x80310000,
		},
		"empty slices": {
			Gateway: "gw", Head: "h1", Time: time.Date(2026, 1, 2, 3, 4, 5, 999999999, time.UTC),
			Channels: []mqtt.Channel{}, PairTemperatures: []mqtt.PairTemperature{}, Flags: []string{},
			Quality: "good",
		},
		"negative, huge and small floats": {
			Gateway: "gw", Head: "h1", Seq: math.MaxUint64, Time: time.Date(2026, 6, 30, 23, 59, 59, 1000000, time.UTC),
			Temperature: f(-273.15), RawTemperature: f(1e21), Ratio: f(1e-7), EmissivityRatio: 9.999999999999999e20,
			Uncertainty: f(math.SmallestNonzeroFloat64), Nongrey: f(-1e-6), FitResidual: f(math.MaxFloat64),
			Channels: []mqtt.Channel{
				{Name: "a", WavelengthUM: 1e-6, Signal: f(-0.0000009999), SignalFraction: f(math.Copysign(0, -1)), BrightnessTemperature: f(123456789012345678)},
				{Name: "b", WavelengthUM: 0, Signal: f(-1.5e-300), SignalFraction: f(0.1 + 0.2), BrightnessTemperature: f(-1e300)},
			},
			Flags:      []string{"low_signal", "below_range", "stale"},
			StatusCode: math.MaxUint32,
		},
		"non-finite values": {
			Gateway: "gw", Head: "h1", Time: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC),
			Temperature: f(nan), RawTemperature: f(inf), Ratio: f(-inf), EmissivityRatio: nan,
			Nongrey: f(nan), FitResidual: f(inf), Uncertainty: f(nan),
			Channels:         []mqtt.Channel{{Name: "x", WavelengthUM: inf, Signal: f(nan)}},
			PairTemperatures: []mqtt.PairTemperature{{Pair: "x/y", Temperature: f(-inf)}},
		},
		"escapes": {
			Gateway: "gw \"1\" \\ <&>", Head: "tab\there\nnl\r\b\f\x01\x1f\x7f", Unit: "°C",
			Quality: "bad\xff\xfeutf8 \u2028\u2029 ok é 炉", Flags: []string{"", "a\u00a0b", "\U0001F525"},
			Time: time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC),
		},
		"zoned and zero times": {
			Gateway: "gw", Head: "h1", Time: time.Date(2026, 12, 1, 23, 0, 0, 500000000, berlin),
			Channels: []mqtt.Channel{{Name: "c"}},
		},
		"zero time":         {Gateway: "gw", Head: "h1"},
		"year out of range": {Gateway: "gw", Head: "h1", Time: time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC)},
		"negative year":     {Gateway: "gw", Head: "h1", Time: time.Date(-1, 1, 1, 0, 0, 0, 0, time.UTC)},
	}
	return rows
}

// AppendJSON writes what encoding/json writes for the reference mirror.
func TestReadingAppendJSONMatchesEncodingJSON(t *testing.T) {
	for name, r := range readingRows() {
		t.Run(name, func(t *testing.T) {
			want, err := json.Marshal(toRef(&r))
			if err != nil {
				t.Fatal(err)
			}
			got := r.AppendJSON(nil)
			if !bytes.Equal(got, want) {
				t.Errorf("AppendJSON:\n got %s\nwant %s", got, want)
			}
			// MarshalJSON goes through encoding/json, which checks validity
			// and compacts: the bytes must come out unchanged.
			viaMarshal, err := json.Marshal(r)
			if err != nil {
				t.Fatalf("json.Marshal: %v", err)
			}
			if !bytes.Equal(viaMarshal, got) {
				t.Errorf("json.Marshal:\n got %s\nwant %s", viaMarshal, got)
			}
			prefix := []byte("prefix:")
			if appended := r.AppendJSON(prefix); !bytes.Equal(appended, append([]byte("prefix:"), got...)) {
				t.Errorf("AppendJSON(prefix) = %s", appended)
			}
		})
	}
}

func TestReadingTimeFormat(t *testing.T) {
	for _, c := range []struct {
		in   time.Time
		want string
	}{
		{time.Date(2026, 12, 1, 22, 0, 0, 123000000, time.UTC), `"2026-12-01T22:00:00.123Z"`},
		{time.Date(2026, 12, 1, 22, 0, 0, 0, time.UTC), `"2026-12-01T22:00:00.000Z"`},
		{time.Date(2026, 12, 1, 22, 0, 0, 999999999, time.UTC), `"2026-12-01T22:00:00.999Z"`}, // truncated, not rounded
		{time.Date(2026, 12, 1, 23, 30, 0, 5000000, time.FixedZone("", 5400)), `"2026-12-01T22:00:00.005Z"`},
		{time.Time{}, `"0001-01-01T00:00:00.000Z"`},
		{time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC), `null`},
	} {
		r := mqtt.Reading{Time: c.in}
		var got struct {
			Time json.RawMessage `json:"time"`
		}
		if err := json.Unmarshal(r.AppendJSON(nil), &got); err != nil {
			t.Fatal(err)
		}
		if string(got.Time) != c.want {
			t.Errorf("time %v: got %s, want %s", c.in, got.Time, c.want)
		}
	}
}

// encoding/json reads a payload back into the same Reading, the time cut
// to milliseconds.
func TestReadingRoundTrip(t *testing.T) {
	r := sampleReading()
	var back mqtt.Reading
	if err := json.Unmarshal(r.AppendJSON(nil), &back); err != nil {
		t.Fatal(err)
	}
	want := r
	want.Time = r.Time.Truncate(time.Millisecond)
	if !back.Time.Equal(want.Time) {
		t.Errorf("time: got %v, want %v", back.Time, want.Time)
	}
	back.Time, want.Time = time.Time{}, time.Time{}
	a, _ := json.Marshal(toRef(&back))
	b, _ := json.Marshal(toRef(&want))
	if !bytes.Equal(a, b) {
		t.Errorf("round trip:\n got %s\nwant %s", a, b)
	}
}

func TestReadingAppendJSONNoAllocs(t *testing.T) {
	r := sampleReading()
	buf := make([]byte, 0, 4096)
	if n := testing.AllocsPerRun(100, func() { buf = r.AppendJSON(buf[:0]) }); n != 0 {
		t.Errorf("AppendJSON allocates %v times per call with room in dst", n)
	}
}

func FuzzReadingAppendJSON(f *testing.F) {
	f.Add("caster2", "mould-exit", "nongrey", 1523.4, 1e-7, int64(1796162400123456789), uint64(7))
	f.Add("<&>", "\xff\u2028", "", math.Inf(1), math.NaN(), int64(-62135596800000000), uint64(0))
	f.Fuzz(func(t *testing.T, gateway, head, flag string, a, b float64, unixNano int64, seq uint64) {
		r := mqtt.Reading{
			Gateway: gateway, Head: head, Seq: seq, Time: time.Unix(0, unixNano),
			Temperature: &a, Ratio: &b, EmissivityRatio: a, Nongrey: &b,
			Channels: []mqtt.Channel{{Name: flag, WavelengthUM: b, Signal: &a}},
			Flags:    []string{flag},
		}
		got := r.AppendJSON(nil)
		want, err := json.Marshal(toRef(&r))
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(got, want) {
			t.Fatalf("AppendJSON:\n got %s\nwant %s", got, want)
		}
	})
}

func BenchmarkReadingAppendJSON(b *testing.B) {
	r := sampleReading()
	buf := make([]byte, 0, 4096)
	b.ReportAllocs()
	for b.Loop() {
		buf = r.AppendJSON(buf[:0])
	}
	b.SetBytes(int64(len(buf)))
}

// For comparison: encoding/json on the same Reading.
func BenchmarkReadingEncodingJSON(b *testing.B) {
	sample := sampleReading()
	r := toRef(&sample)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := json.Marshal(&r); err != nil {
			b.Fatal(err)
		}
	}
}

func extrasRef(xs []mqtt.NamedValue) []mqtt.NamedValue {
	if len(xs) == 0 {
		return nil
	}
	out := make([]mqtt.NamedValue, len(xs))
	for i, x := range xs {
		out[i] = mqtt.NamedValue{Name: x.Name, Value: fin(x.Value)}
	}
	return out
}
