package config

import (
	"bytes"
	"errors"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"

	"glowgate/configs"
)

// TestShippedConfigs loads every example configuration the project ships:
// each must load clean.
func TestShippedConfigs(t *testing.T) {
	files, err := filepath.Glob("../../configs/*.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if len(files) == 0 {
		t.Fatal("no configurations under ../../configs")
	}
	for _, f := range files {
		t.Run(filepath.Base(f), func(t *testing.T) {
			cfg, err := Load(f)
			if err != nil {
				t.Fatal(err)
			}
			if cfg.File != f {
				t.Errorf("File = %q, want %q", cfg.File, f)
			}
		})
	}
}

// TestDemoEmbedded checks that the embedded demo is the shipped file and
// that it sets up what the demo promises.
func TestDemoEmbedded(t *testing.T) {
	onDisk, err := os.ReadFile("../../configs/demo.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(onDisk, configs.Demo) {
		t.Fatal("configs.Demo differs from configs/demo.yaml")
	}
	cfg, err := Parse("demo.yaml", configs.Demo)
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Gateway != "brackwater-gw1" || len(cfg.Endpoints) != 1 || cfg.Endpoints[0].Address != "127.0.0.1:15020" {
		t.Errorf("gateway %q, endpoints %+v", cfg.Gateway, cfg.Endpoints)
	}
	if !reflect.DeepEqual(cfg.MQTT.Brokers, []string{"tcp://127.0.0.1:1883"}) {
		t.Errorf("brokers %v", cfg.MQTT.Brokers)
	}
	if len(cfg.Heads) < 3 {
		t.Fatalf("%d heads, want at least 3", len(cfg.Heads))
	}
	units := map[uint8]string{}
	for _, h := range cfg.Heads {
		if !h.Sim.Set {
			t.Errorf("head %s has no sim section", h.Name)
		}
		if h.Endpoint != cfg.Endpoints[0].Name {
			t.Errorf("head %s on endpoint %q", h.Name, h.Endpoint)
		}
		if other, dup := units[h.UnitID]; dup {
			t.Errorf("heads %s and %s share unit id %d", other, h.Name, h.UnitID)
		}
		units[h.UnitID] = h.Name
	}
}

// Planck's law and the constants for the demo signal checks:
// L(λ,T) = c1L λ⁻⁵ / (exp(c2/λT) − 1), c1L = 2hc² (h, c exact, SI 2019),
// c2 = 0.014388 m·K (ITS-90, Preston-Thomas, Metrologia 27, 3, 1990).
const (
	testC1L = 1.191042972e-16 // W·m²·sr⁻¹
	testC2  = 0.014388        // m·K
)

// bandRadiance is ∫ L(λ,T) dλ over [lo, hi] by composite Simpson's rule,
// W·m⁻²·sr⁻¹.
func bandRadiance(lo, hi, t float64) float64 {
	const n = 200
	h := (hi - lo) / n
	l := func(x float64) float64 { return testC1L / math.Pow(x, 5) / math.Expm1(testC2/(x*t)) }
	sum := l(lo) + l(hi)
	for i := 1; i < n; i++ {
		w := 2.0
		if i%2 == 1 {
			w = 4
		}
		sum += w * l(lo+float64(i)*h)
	}
	return sum * h / 3
}

func TestBandRadiance(t *testing.T) {
	// scipy.integrate.quad of Planck's law with scipy.constants h and c and
	// c2 = 0.014388 m·K, scipy 1.x (Debian python3-scipy): the last section
	// of configs/demo_values.py.
	for _, c := range []struct{ lo, hi, tc, want float64 }{
		{0.875e-6, 0.925e-6, 1200, 195.7469682},
		{1.025e-6, 1.075e-6, 700, 3.598378252},
		{0.850e-6, 0.900e-6, 800, 2.600753681},
		{1.000e-6, 1.050e-6, 1350, 923.8489755},
	} {
		got := bandRadiance(c.lo, c.hi, c.tc+273.15)
		if math.Abs(got/c.want-1) > 1e-8 {
			t.Errorf("band %g..%g at %g degC: %.10g, want %.10g", c.lo, c.hi, c.tc, got, c.want)
		}
	}
}

// TestDemoSignals checks that the demo's register types and scales hold
// its simulated signals: a blackbody at the top of the range must not
// overflow the register, and the weakest signal the scenario produces
// (bottom of the range, lowest emissivity and transmission) must still be
// worth at least 1000 counts, so one count is under 0.1 % of the signal.
func TestDemoSignals(t *testing.T) {
	cfg, err := Parse("demo.yaml", configs.Demo)
	if err != nil {
		t.Fatal(err)
	}
	limits := map[string]float64{"uint16": 65535, "int16": 32767, "uint32": 4294967295, "int32": 2147483647}
	for _, h := range cfg.Heads {
		tmin, tmax := h.RangeMin, h.RangeMax
		for _, s := range h.Sim.Temperature.Segments {
			tmin, tmax = min(tmin, s.Value), max(tmax, s.Value)
		}
		tau := h.Sim.Transmission.Start
		for _, s := range h.Sim.Transmission.Segments {
			tau = min(tau, s.Value)
		}
		for i, ch := range h.Channels {
			var signal func(float64) float64
			switch {
			case ch.Band != nil:
				signal = func(t float64) float64 { return bandRadiance(ch.Band.From, ch.Band.To, t) }
			case ch.SakumaHattori != nil:
				sh := ch.SakumaHattori
				signal = func(t float64) float64 { return sh.C / math.Expm1(testC2/(sh.A*t+sh.B)) }
			}
			limit, integer := limits[ch.Signal.Type]
			if !integer {
				continue
			}
			top := (signal(tmax) - ch.Signal.Offset) / ch.Signal.Scale
			bottom := (signal(tmin)*h.Sim.Emissivity[i]*tau - ch.Signal.Offset) / ch.Signal.Scale
			t.Logf("%s/%s: raw %.4g .. %.4g (%s)", h.Name, ch.Name, bottom, top, ch.Signal.Type)
			if top > limit {
				t.Errorf("%s/%s: raw %.4g at %s overflows %s", h.Name, ch.Name, top, fmtTemperature(tmax), ch.Signal.Type)
			}
			if bottom < 1000 {
				t.Errorf("%s/%s: raw %.4g at %s is too coarse", h.Name, ch.Name, bottom, fmtTemperature(tmin))
			}
		}
	}
}

// TestDemoSakumaHattori checks the ladle head's A and B against the
// Saunders & White approximation for its rectangular filter bands
// (Metrologia 40, 195, 2003): A = λ0(1 − 6σ²/λ0²), B = c2σ²/(2λ0²), with
// λ0 the band centre and σ² = w²/12 for a band of width w.
func TestDemoSakumaHattori(t *testing.T) {
	cfg, err := Parse("demo.yaml", configs.Demo)
	if err != nil {
		t.Fatal(err)
	}
	h, ok := cfg.Head("ladle-stream")
	if !ok {
		t.Fatal("no ladle-stream head")
	}
	bands := [][2]float64{{0.85e-6, 0.95e-6}, {1.00e-6, 1.10e-6}} // as the demo's comment states
	for i, ch := range h.Channels {
		sh := ch.SakumaHattori
		if sh == nil {
			t.Fatalf("channel %s is not Sakuma–Hattori", ch.Name)
		}
		l0, w := (bands[i][0]+bands[i][1])/2, bands[i][1]-bands[i][0]
		s2 := w * w / 12
		a, b := l0*(1-6*s2/(l0*l0)), testC2*s2/(2*l0*l0)
		// the file gives A to 7 and B to 5 significant digits
		if math.Abs(sh.A/a-1) > 1e-6 || math.Abs(sh.B/b-1) > 1e-4 {
			t.Errorf("channel %s: A %g, B %g; Saunders & White give %g, %g", ch.Name, sh.A, sh.B, a, b)
		}
	}
}

const minimal = `
gateway: gw
endpoints:
  - {name: net, address: "127.0.0.1:502"}
heads:
  - name: h1
    endpoint: net
    range: {min: 700degC, max: 1600degC}
    channels:
      - {name: a, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
      - {name: b, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
`

func TestDefaults(t *testing.T) {
	cfg, err := Parse("minimal.yaml", []byte(minimal))
	if err != nil {
		t.Fatal(err)
	}
	want := &Config{
		File:     "minimal.yaml",
		Gateway:  "gw",
		Unit:     "degC",
		C2:       0.014388, // ITS-90 (Preston-Thomas, Metrologia 27, 3, 1990)
		C2Name:   "its90",
		Commands: Commands{Enabled: true, ReplayWindow: 30 * time.Second},
		HTTP:     HTTP{Listen: "127.0.0.1:8080"},
		MQTT: MQTT{
			Root:           "glowgate",
			ClientID:       "glowgate-gw",
			KeepAlive:      30 * time.Second,
			ConnectTimeout: 5 * time.Second,
			Queue:          10000,
			QoS:            1,
			Outbox:         Outbox{MaxEntries: 1000000, CommitInterval: 50 * time.Millisecond},
		},
		Endpoints: []Endpoint{{Name: "net", Address: "127.0.0.1:502", Timeout: 500 * time.Millisecond, BackoffMax: 10 * time.Second, InFlight: 1}},
		Heads: []Head{{
			Name:            "h1",
			Endpoint:        "net",
			UnitID:          1,
			Registers:       "input",
			Period:          time.Second,
			RangeMin:        celsius(700),
			RangeMax:        celsius(1600),
			EmissivityRatio: 1,
			Emissivity:      []float64{1, 1},
			LowSignal:       0.02,
			Channels: []Channel{
				{Name: "a", Band: &Band{0.875e-6, 0.925e-6}, Signal: Signal{Address: 0, Type: "float32", WordOrder: "high_first", ByteOrder: "big", Scale: 1}},
				{Name: "b", Band: &Band{1.025e-6, 1.075e-6}, Signal: Signal{Address: 2, Type: "float32", WordOrder: "high_first", ByteOrder: "big", Scale: 1}},
			},
			Publish:      Publish{Kind: "pair", I: 0, J: 1},
			NongreyLimit: 10,
			FitTerms:     1,
			Processing:   Processing{Hold: "none"},
			Loss:         Loss{Window: 10 * time.Second, Drop: 0.3, Significance: 0.01, Steady: 2, Reflection: 1.2},
			Sim: Sim{
				Seed:         seedOf("h1"),
				Emissivity:   []float64{1, 1},
				Temperature:  Profile{Start: (celsius(700) + celsius(1600)) / 2},
				Transmission: Profile{Start: 1},
			},
		}},
	}
	if !reflect.DeepEqual(cfg, want) {
		t.Errorf("got  %+v\nwant %+v", cfg, want)
	}
	if seedOf("h1") < 0 {
		t.Error("derived seed is negative")
	}
}

// TestEveryField sets every key to a value other than its default.
func TestEveryField(t *testing.T) {
	cfg, err := Load("testdata/valid/every-field.yaml")
	if err != nil {
		t.Fatal(err)
	}
	m := cfg.MQTT
	if cfg.Unit != "K" || cfg.Gateway != "kiln-gw" {
		t.Errorf("unit %q gateway %q", cfg.Unit, cfg.Gateway)
	}
	wantMQTT := MQTT{
		Brokers:        []string{"ssl://broker.example:8883", "ws://[::1]:9001/mqtt"},
		Root:           "plant",
		ClientID:       "kiln-gateway",
		KeepAlive:      time.Minute,
		ConnectTimeout: 1500 * time.Millisecond,
		Queue:          500,
		QoS:            0,
		Username:       "kiln",
		Outbox:         Outbox{MaxEntries: 1000000, CommitInterval: 50 * time.Millisecond},
	}
	if !reflect.DeepEqual(m, wantMQTT) {
		t.Errorf("mqtt %+v\nwant %+v", m, wantMQTT)
	}
	ep, ok := cfg.Endpoint("line-a")
	if !ok || *ep != (Endpoint{Name: "line-a", Address: "kiln-gw.local:1502", Timeout: time.Second, BackoffMax: 30 * time.Second, InFlight: 16}) {
		t.Errorf("endpoint %+v", ep)
	}
	if _, ok := cfg.Endpoint("nowhere"); ok {
		t.Error("found an endpoint that is not there")
	}
	h, ok := cfg.Head("firing-zone")
	if !ok {
		t.Fatal("no head firing-zone")
	}
	if h.UnitID != 247 || h.Registers != "holding" || h.Period != 50*time.Millisecond ||
		h.RangeMin != 900 || h.RangeMax != 2100 || h.EmissivityRatio != 0.97 || h.LowSignal != 0.1 ||
		h.Description != "kiln 3, firing zone" {
		t.Errorf("head %+v", h)
	}
	short, long := h.Channels[0], h.Channels[1]
	if *short.SakumaHattori != (SakumaHattori{A: 0.899e-6, B: 15.2e-6, C: 2.5e6}) || short.Band != nil {
		t.Errorf("short channel %+v %+v", short, short.SakumaHattori)
	}
	if short.Signal != (Signal{Address: 10, Type: "uint16", WordOrder: "high_first", ByteOrder: "little", Scale: 0.5, Offset: -3}) {
		t.Errorf("short signal %+v", short.Signal)
	}
	if *long.Band != (Band{From: 1.5e-6, To: 1.6e-6}) {
		t.Errorf("long band %+v", long.Band)
	}
	if long.Signal != (Signal{Address: 11, Type: "int32", WordOrder: "low_first", ByteOrder: "big", Scale: 1e-3}) {
		t.Errorf("long signal %+v", long.Signal)
	}
	if short.Wavelength() != 0.899e-6 || long.Wavelength() != (1.5e-6+1.6e-6)/2 {
		t.Errorf("wavelengths %g %g", short.Wavelength(), long.Wavelength())
	}
	wantSim := Sim{
		Set:        true,
		Seed:       -42,
		Noise:      0.003,
		Emissivity: []float64{0.4, 0.38},
		Temperature: Profile{Start: celsius(1520), Repeat: true, Segments: []Segment{
			{"hold", celsius(1520), 20 * time.Second},
			{"ramp", celsius(1560), 15 * time.Second},
			{"step", celsius(1490), 0},
			{"hold", celsius(1490), 5 * time.Second},
		}},
		Transmission: Profile{Start: 1, Segments: []Segment{
			{"hold", 1, 30 * time.Second},
			{"ramp", 0.15, 2 * time.Second},
			{"ramp", 0.5, time.Second},
		}},
	}
	if !reflect.DeepEqual(h.Sim, wantSim) {
		t.Errorf("sim %+v\nwant %+v", h.Sim, wantSim)
	}
	if second, ok := cfg.Head("drying-zone"); !ok || second.Sim.Set || len(second.Sim.Emissivity) != 2 {
		t.Errorf("second head %+v", second)
	}
}

// TestAliases uses anchors, aliases and merge keys: shared signal settings
// and a shared head template.
func TestAliases(t *testing.T) {
	const doc = `
gateway: gw
endpoints: [{name: net, address: "127.0.0.1:502"}]
templates: &head
  endpoint: net
  range: {min: 700degC, max: 1600degC}
  channels:
    - {name: a, band: {from: 0.875um, to: 0.925um}, signal: {address: 0, type: float32}}
    - {name: b, band: {from: 1.025um, to: 1.075um}, signal: {address: 2, type: float32}}
heads:
  - <<: *head
    name: h1
  - <<: *head
    name: h2
    unit_id: 2
`
	// templates is no schema key: the merge works, the extra key is refused.
	_, err := Parse("aliases.yaml", []byte(doc))
	if err == nil || err.Error() != "aliases.yaml:4: templates: unknown key (want gateway, unit, c2, state_dir, mqtt, commands, http, endpoints, lines or heads)" {
		t.Fatalf("got %v", err)
	}
	const ok = `
gateway: gw
endpoints: [{name: net, address: "127.0.0.1:502"}]
heads:
  - &head
    name: h1
    endpoint: net
    range: {min: 700degC, max: 1600degC}
    channels:
      - {name: a, band: {from: 0.875um, to: 0.925um}, signal: &sig {address: 0, type: uint32, word_order: low_first}}
      - {name: b, band: {from: 1.025um, to: 1.075um}, signal: {<<: *sig, address: 2}}
  - <<: *head
    name: h2
    unit_id: 2
`
	cfg, err := Parse("aliases.yaml", []byte(ok))
	if err != nil {
		t.Fatal(err)
	}
	if len(cfg.Heads) != 2 || cfg.Heads[1].Name != "h2" || cfg.Heads[1].UnitID != 2 || cfg.Heads[1].Endpoint != "net" {
		t.Fatalf("heads %+v", cfg.Heads)
	}
	if s := cfg.Heads[1].Channels[1].Signal; s.Address != 2 || s.Type != "uint32" || s.WordOrder != "low_first" {
		t.Errorf("merged signal %+v", s)
	}
}

// TestMergeCycle: a mapping that merges itself must not loop.
func TestMergeCycle(t *testing.T) {
	doc := "gateway: gw\nmqtt: &m {<<: [*m, *m], root: r}\n"
	_, err := Parse("cycle.yaml", []byte(doc))
	// yaml.v3 refuses the self-reference, or the decoder stops at it; either
	// way an error, not a hang.
	if err == nil {
		t.Fatal("no error")
	}
}

// TestAliasBudget: aliases that expand a small file into a huge one are
// refused instead of being walked.
func TestAliasBudget(t *testing.T) {
	var b strings.Builder
	b.WriteString("gateway: gw\nendpoints: [{name: net, address: \"127.0.0.1:502\"}]\n")
	b.WriteString("x: &e [")
	for i := range 2000 {
		if i > 0 {
			b.WriteString(", ")
		}
		b.WriteString("1")
	}
	b.WriteString("]\nheads:\n  - &h {name: h, endpoint: net, range: {min: 1000K, max: 2000K}, channels: [], sim: {emissivity: *e}}\n")
	for range 100 {
		b.WriteString("  - *h\n")
	}
	_, err := Parse("bomb.yaml", []byte(b.String()))
	if err == nil || !strings.Contains(err.Error(), "aliases expand to more than") {
		t.Fatalf("got %v", err)
	}
}

func TestTrailingDocumentMarker(t *testing.T) {
	if _, err := Parse("trailing.yaml", []byte(minimal+"---\n")); err != nil {
		t.Error(err)
	}
}

func TestNullIsAbsent(t *testing.T) {
	doc := strings.Replace(minimal, "gateway: gw\n", "gateway: gw\nunit:\nmqtt:\n", 1)
	cfg, err := Parse("null.yaml", []byte(doc))
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Unit != "degC" || cfg.MQTT.Root != "glowgate" {
		t.Errorf("defaults not applied: %+v", cfg)
	}
}

func TestErrorFormat(t *testing.T) {
	for _, c := range []struct {
		e    Error
		want string
	}{
		{Error{"a.yaml", 14, "heads[1].channels[0].band.from", "missing unit"}, "a.yaml:14: heads[1].channels[0].band.from: missing unit"},
		{Error{"a.yaml", 3, "", "YAML syntax error: x"}, "a.yaml:3: YAML syntax error: x"},
		{Error{"a.yaml", 0, "", "empty configuration"}, "a.yaml: empty configuration"},
	} {
		if got := c.e.Error(); got != c.want {
			t.Errorf("got %q, want %q", got, c.want)
		}
	}
	es := Errors{{"a.yaml", 1, "gateway", "required"}, {"a.yaml", 2, "unit", "bad"}}
	if got := es.Error(); got != "a.yaml:1: gateway: required\na.yaml:2: unit: bad" {
		t.Errorf("got %q", got)
	}
}

func TestLoad(t *testing.T) {
	_, err := Load("testdata/no-such-file.yaml")
	if !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("missing file: %v", err)
	}
	var errs Errors
	if errors.As(err, &errs) {
		t.Error("an I/O failure came back as configuration Errors")
	}
	// Messages name the file as given to Load.
	_, err = Load("testdata/invalid/zero-period.yaml")
	if err == nil || !strings.HasPrefix(err.Error(), "testdata/invalid/zero-period.yaml:11: heads[0].period: ") {
		t.Errorf("got %v", err)
	}
}

func TestCheckBrokerURLs(t *testing.T) {
	for _, c := range []struct {
		urls []string
		err  string
	}{
		{[]string{"tcp://127.0.0.1:1883"}, ""},
		{[]string{"mqtt://broker:1883", "ssl://broker:8883", "tls://broker:8883"}, ""},
		{[]string{"ws://broker:9001/mqtt", "wss://[::1]:443/"}, ""},
		{nil, "no broker URL"},
		{[]string{"127.0.0.1:1883"}, `bad broker URL "127.0.0.1:1883" (want scheme://host:port such as tcp://127.0.0.1:1883)`},
		{[]string{"broker"}, `bad broker URL "broker" (want scheme://host:port such as tcp://127.0.0.1:1883)`},
		{[]string{"//broker:1883"}, `bad broker URL "//broker:1883" (want scheme://host:port such as tcp://127.0.0.1:1883)`},
		{[]string{"://broker:1883"}, `bad broker URL "://broker:1883" (want scheme://host:port such as tcp://127.0.0.1:1883)`},
		{[]string{"tcp://:1883"}, `missing host in broker URL "tcp://:1883"`},
		{[]string{"tcp://broker"}, `missing port in "tcp://broker"`},
		{[]string{"tcp://broker:0"}, `port "0" in "tcp://broker:0" is outside 1..65535`},
		{[]string{"tcp://broker:70000"}, `port "70000" in "tcp://broker:70000" is outside 1..65535`},
		{[]string{"tcp://broker:x"}, `bad broker URL "tcp://broker:x" (want scheme://host:port such as tcp://127.0.0.1:1883)`},
		{[]string{"tcp://user:pw@broker:1883"}, `broker URL "tcp://user:pw@broker:1883" carries credentials (use mqtt.username)`},
		{[]string{"tcp://broker:1883/x"}, `broker URL "tcp://broker:1883/x" has a path (only ws and wss take one)`},
		{[]string{"tcp://broker:1883?a=b"}, `broker URL "tcp://broker:1883?a=b" has a query or fragment`},
		{[]string{"tcp:broker:1883"}, `bad broker URL "tcp:broker:1883" (want scheme://host:port such as tcp://127.0.0.1:1883)`},
		{[]string{"tcp://a:1", "http://b:2", "tcp://c"}, "unknown scheme \"http\" in broker URL \"http://b:2\" (want tcp, mqtt, ssl, tls, ws or wss)\nmissing port in \"tcp://c\""},
	} {
		err := CheckBrokerURLs(c.urls)
		switch {
		case c.err == "" && err != nil:
			t.Errorf("%q: %v", c.urls, err)
		case c.err != "" && (err == nil || err.Error() != c.err):
			t.Errorf("%q: got %v, want %q", c.urls, err, c.err)
		}
	}
}

func TestSignalRegisters(t *testing.T) {
	for typ, want := range map[string]int{"uint16": 1, "int16": 1, "uint32": 2, "int32": 2, "float32": 2, "float64": 0} {
		if got := (Signal{Type: typ}).Registers(); got != want {
			t.Errorf("%s: %d registers, want %d", typ, got, want)
		}
	}
	if (Channel{}).Wavelength() != 0 {
		t.Error("a channel without a model has a wavelength")
	}
}

// TestKilnExample: configs/kiln.yaml's channel models come out as meant. The
// calibration table (ideal 0.85-0.95 um band points, configs/kiln_values.py,
// scipy.integrate.quad) fits a Sakuma–Hattori curve whose A lies near the
// Saunders & White value λ0(1 − 6σ²/λ0²) = 0.89444 um (Metrologia 40, 195,
// 2003; σ² = (0.1 um)²/12 for a rectangular band); the triangular
// responsivity's centroid is its peak, 1.05 um (symmetry).
func TestKilnExample(t *testing.T) {
	cfg, err := Load("../../configs/kiln.yaml")
	if err != nil {
		t.Fatal(err)
	}
	exit, ok := cfg.Head("kiln-exit")
	if !ok {
		t.Fatal("no kiln-exit head")
	}
	sh := exit.Channels[0].SakumaHattori
	if sh == nil || math.Abs(sh.A/0.89444e-6-1) > 2e-3 {
		t.Errorf("calibrated short channel: %+v, want A near 0.89444um", sh)
	}
	if c := exit.Channels[1].Wavelength(); math.Abs(c-1.05e-6) > 1e-15 {
		t.Errorf("responsivity centroid %g m, want 1.05e-6", c)
	}
	zone, _ := cfg.Head("burning-zone")
	if zone.Publish != (Publish{Kind: "outer", I: 0, J: 2}) || zone.FitTerms != 2 || zone.NongreyLimit != 8 {
		t.Errorf("burning-zone settings: %+v %d %g", zone.Publish, zone.FitTerms, zone.NongreyLimit)
	}
}
