package config

import (
	"errors"
	"fmt"
	"io"
	"os"
	"time"
)

// Config is one validated configuration file. Every quantity is in SI
// units (metres, kelvin, fractions, time.Duration) and every default is
// filled in.
type Config struct {
	File      string // name the config was loaded from, as given
	Gateway   string
	Unit      string  // "degC" or "K": the unit readings are published in
	C2        float64 // second radiation constant of every channel model, m·K
	C2Name    string  // "its90" (default) or "codata2018"
	StateDir  string  // durable state (outbox, alarm states); empty: none, readings wait in memory
	Commands  Commands
	HTTP      HTTP
	MQTT      MQTT
	Endpoints []Endpoint
	Lines     []Line
	Heads     []Head
}

// MQTT is the connection to the message broker.
type MQTT struct {
	Brokers        []string // URLs such as tcp://127.0.0.1:1883; may be empty (see the package doc)
	Root           string   // first topic level, default "glowgate"
	ClientID       string   // default "glowgate-<gateway>"
	KeepAlive      time.Duration
	ConnectTimeout time.Duration
	Queue          int // in-memory publish queue length
	// QoS is the MQTT QoS of readings, 1 (the default) or 0. Events and
	// states always go at QoS 1.
	QoS      int
	Username string
	// Password comes from password_file or password_env, never from the
	// configuration itself; it is never logged or printed.
	Password               string
	AllowPlaintextPassword bool
	TLS                    *TLS // nil: plain TCP (or the URL's scheme)
	Outbox                 Outbox
}

// Endpoint is one Modbus TCP endpoint (a head's own port or a serial
// gateway's).
type Endpoint struct {
	Name       string
	Address    string        // host:port
	Timeout    time.Duration // per transaction
	BackoffMax time.Duration // cap of a failing head's retry backoff
	// InFlight is how many requests may be in flight at once on the
	// connection (1: one transaction at a time).
	InFlight int
}

// Head is one pyrometer head.
type Head struct {
	Name            string
	Endpoint        string // the name of an Endpoint of the same Config, or
	Line            string // the name of a Line (exactly one of the two is set)
	UnitID          uint8
	Registers       string // "input" or "holding"
	Period          time.Duration
	RangeMin        float64 // measuring range, K
	RangeMax        float64 // K
	EmissivityRatio float64 // k = ε(short channel) / ε(long channel) of the published pair
	// Emissivity is the relative emissivity per channel: a pair (i, j)
	// uses k = Emissivity[i]/Emissivity[j]. For two channels it is
	// [emissivity_ratio, 1].
	Emissivity   []float64
	LowSignal    float64 // signal-fraction limit of the low_signal flag, fraction
	Description  string
	Channels     []Channel // 2 to 8, short wavelength first
	Publish      Publish   // which temperature is published
	NongreyLimit float64   // K: spread of the pair temperatures that flags nongrey
	FitTerms     int       // emissivity parameters of the multi-colour fit: 1 or 2
	Processing   Processing
	Loss         Loss
	Uncertainty  Uncertainty
	Status       *Status // optional status word
	Extras       []Extra // optional extra values
	Alarms       []AlarmRule
	Sim          Sim
}

// Channel is one spectral channel of a head: its blackbody response model
// (one of Band, SakumaHattori and Responsivity; a Calibration table comes
// with the SakumaHattori fitted to it) and where its signal is read.
type Channel struct {
	Name          string
	Band          *Band
	SakumaHattori *SakumaHattori // given, or fitted to Calibration
	Responsivity  *Responsivity
	Calibration   *Calibration // when set, SakumaHattori holds its fit
	Saturation    float64      // signal at or above which the channel is saturated; 0: none
	Signal        Signal
}

// Band is an ideal rectangular spectral band, From < To, in metres. Its
// signal is the band radiance ∫ L(λ,T) dλ over [From, To], W·m⁻²·sr⁻¹.
type Band struct{ From, To float64 }

// SakumaHattori holds the coefficients of the Sakuma–Hattori equation
//
//	S(T) = C / (exp(c2 / (A·T + B)) − 1)
//
// with A in m, B in m·K and C in signal units (Sakuma & Hattori 1982; the
// form recommended by CCT-WG5, 2008).
type SakumaHattori struct{ A, B, C float64 }

// Signal is where a channel signal lives in the head's register table and
// how to read it: signal = raw·Scale + Offset.
type Signal struct {
	Address   uint16
	Type      string // uint16, int16, uint32, int32 or float32
	WordOrder string // high_first or low_first (32-bit types)
	ByteOrder string // big or little (bytes within each register)
	Scale     float64
	Offset    float64
}

// Sim is a head's simulation scenario, used by the simulator and the demo.
// Its defaults are filled in for every head, with or without a sim
// section.
type Sim struct {
	Set          bool      // the head had a sim section
	Seed         int64     // noise seed
	Noise        float64   // relative 1-σ signal noise per channel, fraction
	Emissivity   []float64 // per channel, in (0, 1]
	Temperature  Profile   // target temperature, K
	Transmission Profile   // sight-path transmission, fraction 0..1
	Faults       []Fault
	StatusFlags  []BitEpisode       // status-word flags set for windows of time
	Extras       map[string]Profile // values of the head's extras, by name
}

// Profile is a value over time: Start, then each segment in turn; with
// Repeat the segments run again from the start value once the last ends,
// otherwise the last value holds.
type Profile struct {
	Start    float64
	Repeat   bool
	Segments []Segment
}

// Segment is one piece of a Profile.
//
//	Kind "hold": keep Value (the value reached so far) for Duration.
//	Kind "ramp": change linearly to Value over Duration.
//	Kind "step": jump to Value; Duration is 0.
type Segment struct {
	Kind     string
	Value    float64
	Duration time.Duration
}

// maxFileSize bounds what Load reads: configurations are a few kilobytes.
const maxFileSize = 4 << 20

// Load reads and parses the configuration file at path. Messages name the
// file as path is given. An I/O failure is returned wrapped; problems in
// the content are returned as Errors.
func Load(path string) (*Config, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("read config: %w", err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, maxFileSize+1))
	if err != nil {
		return nil, fmt.Errorf("read config: %w", err)
	}
	if len(data) > maxFileSize {
		return nil, fmt.Errorf("read config %s: larger than %d MiB", path, maxFileSize>>20)
	}
	return Parse(path, data)
}

// Parse decodes and validates a configuration. name is used in messages
// and stored in Config.File. On any problem it returns a nil Config and
// Errors holding every problem found, sorted by line.
func Parse(name string, data []byte) (*Config, error) {
	d := newDecoder(name)
	var cfg *Config
	if root, ok := d.document(data); ok {
		cfg = d.config(root)
		d.validate(cfg)
	}
	if len(d.errs) > 0 {
		return nil, d.sorted()
	}
	return cfg, nil
}

// Head returns the head named name.
func (c *Config) Head(name string) (*Head, bool) {
	for i := range c.Heads {
		if c.Heads[i].Name == name {
			return &c.Heads[i], true
		}
	}
	return nil, false
}

// Endpoint returns the endpoint named name.
func (c *Config) Endpoint(name string) (*Endpoint, bool) {
	for i := range c.Endpoints {
		if c.Endpoints[i].Name == name {
			return &c.Endpoints[i], true
		}
	}
	return nil, false
}

// Wavelength is the channel's nominal wavelength in metres: the band
// centre (From+To)/2, or the Sakuma–Hattori A. It is 0 for a channel with
// neither model, which a parsed Config never holds.
func (c Channel) Wavelength() float64 {
	switch {
	case c.Band != nil:
		return (c.Band.From + c.Band.To) / 2
	case c.SakumaHattori != nil:
		return c.SakumaHattori.A
	case c.Responsivity != nil:
		return c.Responsivity.Centroid()
	}
	return 0
}

// Centroid is the responsivity-weighted mean wavelength ∫R·λ dλ / ∫R dλ of
// the piecewise-linear table, in metres; 0 for an empty table.
func (r *Responsivity) Centroid() float64 {
	var num, den float64
	for i := 1; i < len(r.Wavelengths); i++ {
		l0, l1 := r.Wavelengths[i-1], r.Wavelengths[i]
		r0, r1 := r.Values[i-1], r.Values[i]
		h := l1 - l0
		den += h * (r0 + r1) / 2
		// ∫ (r0 + (r1−r0)·s) (l0 + h·s) h ds over s in [0, 1]
		num += h * (r0*l0 + (r0*h+(r1-r0)*l0)/2 + (r1-r0)*h/3)
	}
	if den <= 0 {
		return 0
	}
	return num / den
}

// Registers is the number of 16-bit registers the signal occupies: 1 for
// uint16 and int16, 2 for the 32-bit types, 0 for an unknown type.
func (s Signal) Registers() int {
	switch s.Type {
	case "uint16", "int16":
		return 1
	case "uint32", "int32", "float32":
		return 2
	}
	return 0
}

// CheckBrokerURLs checks broker URLs given outside a configuration file
// (a command-line flag, say) by the rules of mqtt.brokers. It returns nil
// when all are good, otherwise one error per bad URL joined.
func CheckBrokerURLs(urls []string) error {
	if len(urls) == 0 {
		return errors.New("no broker URL")
	}
	var errs []error
	for _, u := range urls {
		if err := checkBrokerURL(u); err != nil {
			errs = append(errs, err)
		}
	}
	return errors.Join(errs...)
}
