package config

import (
	"fmt"
	"hash/fnv"
	"math"
	"net"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"time"
	"unicode"

	"gopkg.in/yaml.v3"

	"glowgate/convert"
)

// Defaults, in one place.
const (
	defaultUnit           = "degC"
	defaultRoot           = "glowgate"
	defaultKeepAlive      = 30 * time.Second
	defaultConnectTimeout = 5 * time.Second
	defaultQueue          = 10000
	maxQueue              = 1000000
	defaultTimeout        = 500 * time.Millisecond
	defaultBackoffMax     = 10 * time.Second
	defaultUnitID         = 1
	defaultRegisters      = "input"
	defaultPeriod         = time.Second
	minPeriod             = time.Millisecond
	defaultLowSignal      = 0.02

	// The optical range radiation thermometers work in; a wavelength
	// outside it is a unit slip ("0.9m" for "0.9um").
	minWavelength = 0.1e-6
	maxWavelength = 100e-6
)

// maxInFlight bounds endpoints[].in_flight: one batch for every head of a
// well-filled endpoint, and still only a few kilobytes of answers waiting
// in the socket. Common practice, no source.
const maxInFlight = 128

// config decodes the top-level mapping.
func (d *decoder) config(root val) *Config {
	c := &Config{
		File: d.file,
		Unit: defaultUnit,
		MQTT: MQTT{
			Root:           defaultRoot,
			KeepAlive:      defaultKeepAlive,
			ConnectTimeout: defaultConnectTimeout,
			Queue:          defaultQueue,
			QoS:            1,
		},
	}
	f := d.fields(root, "gateway", "unit", "c2", "state_dir", "mqtt", "commands", "http", "endpoints", "lines", "heads")
	c.StateDir = d.stateDir(f.get("state_dir"))
	c.HTTP = d.http(f.get("http"))
	c.Commands = d.commands(f.get("commands"))
	if v := f.required("gateway"); v.n != nil {
		if s, ok := d.str(v); ok && d.topicLevel(v, s, false) {
			c.Gateway = s
		}
	}
	if v := f.get("unit"); v.n != nil {
		if s, ok := d.str(v); ok {
			switch s {
			case "degC", "K":
				c.Unit = s
			default:
				d.errorf(v, "unknown unit %q (want K or degC)", s)
			}
		}
	}
	// The second radiation constant of every channel model (PHYSICS.md):
	// ITS-90's 0.014388 m·K by default, or CODATA 2018's hc/k.
	c.C2Name, c.C2 = "its90", convert.C2ITS90
	if v := f.get("c2"); v.n != nil {
		if s, ok := d.choice(v, "c2", "its90", "codata2018"); ok {
			x, err := convert.C2ByName(s)
			if err != nil {
				d.errorf(v, "%v", err)
			} else {
				c.C2Name, c.C2 = s, x
			}
		}
	}
	d.c2 = c.C2
	d.mqtt(f.get("mqtt"), &c.MQTT)
	for _, it := range d.list(f.get("lines")) {
		c.Lines = append(c.Lines, d.serialLine(it))
	}
	for _, it := range d.list(f.get("endpoints")) {
		c.Endpoints = append(c.Endpoints, d.endpoint(it))
	}
	heads := f.get("heads")
	items := d.list(heads)
	if len(items) == 0 && !d.failed[heads.path] {
		d.errorf(heads, "no heads (want at least one)")
	}
	for _, it := range items {
		c.Heads = append(c.Heads, d.head(it))
	}
	if c.MQTT.ClientID == "" && c.Gateway != "" {
		c.MQTT.ClientID = "glowgate-" + c.Gateway
	}
	return c
}

func (d *decoder) mqtt(v val, m *MQTT) {
	f := d.fields(v, "brokers", "root", "client_id", "keepalive", "connect_timeout", "queue", "qos", "username",
		"password_file", "password_env", "allow_plaintext_password", "tls", "outbox")
	defer d.delivery(f, m)
	if bv := f.get("brokers"); bv.n != nil && bv.n.Kind == yaml.ScalarNode {
		d.errorf(bv, "want a list such as [tcp://127.0.0.1:1883], not %s", describe(bv.n))
	} else {
		for _, it := range d.list(bv) {
			if it.n == nil {
				d.errorf(it, "empty entry (want a URL such as tcp://127.0.0.1:1883)")
				continue
			}
			if s, ok := d.str(it); ok {
				if err := checkBrokerURL(s); err != nil {
					d.errorf(it, "%v", err)
					continue
				}
				m.Brokers = append(m.Brokers, s)
			}
		}
	}
	if v := f.get("root"); v.n != nil {
		if s, ok := d.str(v); ok && d.topicLevel(v, s, true) {
			m.Root = s
		}
	}
	if v := f.get("client_id"); v.n != nil {
		if s, ok := d.str(v); ok {
			if len(s) > 65535 {
				d.errorf(v, "longer than 65535 bytes")
			} else {
				m.ClientID = s
			}
		}
	}
	if v := f.get("keepalive"); v.n != nil {
		// MQTT carries the keep-alive as a 16-bit number of seconds
		// (MQTT 3.1.1, section 3.1.2.10).
		if x, ok := d.duration(v); ok {
			switch {
			case x < time.Second || x > 65535*time.Second:
				d.errorf(v, "must be from 1s to 65535s")
			case x%time.Second != 0:
				d.errorf(v, "must be whole seconds")
			default:
				m.KeepAlive = x
			}
		}
	}
	if v := f.get("connect_timeout"); v.n != nil {
		if x, ok := d.positiveDuration(v); ok {
			m.ConnectTimeout = x
		}
	}
	if v := f.get("queue"); v.n != nil {
		if x, ok := d.integer(v, 1, maxQueue); ok {
			m.Queue = int(x)
		}
	}
	if v := f.get("qos"); v.n != nil {
		if x, ok := d.integer(v, 0, 1); ok {
			m.QoS = int(x)
		}
	}
	if v := f.get("username"); v.n != nil {
		if s, ok := d.str(v); ok {
			m.Username = s
		}
	}
}

func (d *decoder) endpoint(v val) Endpoint {
	ep := Endpoint{Timeout: defaultTimeout, BackoffMax: defaultBackoffMax, InFlight: 1}
	if v.n == nil {
		d.errorf(v, "empty entry (want a mapping with name and address)")
		return ep
	}
	f := d.fields(v, "name", "address", "timeout", "backoff_max", "in_flight")
	if v := f.required("name"); v.n != nil {
		if s, ok := d.str(v); ok {
			if s == "" {
				d.errorf(v, "must not be empty")
			} else {
				ep.Name = s
			}
		}
	}
	if v := f.required("address"); v.n != nil {
		if s, ok := d.str(v); ok {
			if err := checkAddress(s); err != nil {
				d.errorf(v, "%v", err)
			} else {
				ep.Address = s
			}
		}
	}
	if v := f.get("timeout"); v.n != nil {
		if x, ok := d.positiveDuration(v); ok {
			ep.Timeout = x
		}
	}
	if v := f.get("backoff_max"); v.n != nil {
		if x, ok := d.positiveDuration(v); ok {
			ep.BackoffMax = x
		}
	}
	if v := f.get("in_flight"); v.n != nil {
		if x, ok := d.integer(v, 1, maxInFlight); ok {
			ep.InFlight = int(x)
		}
	}
	if bv := f.get("backoff_max"); ep.BackoffMax < ep.Timeout && !d.failed[join(v.path, "timeout")] && !d.failed[bv.path] {
		if bv.n == nil {
			d.errorf(bv, "the default %s is shorter than timeout %s", ep.BackoffMax, ep.Timeout)
		} else {
			d.errorf(bv, "%s is shorter than timeout %s", ep.BackoffMax, ep.Timeout)
		}
	}
	return ep
}

func (d *decoder) head(v val) Head {
	h := Head{
		UnitID:          defaultUnitID,
		Registers:       defaultRegisters,
		Period:          defaultPeriod,
		EmissivityRatio: 1,
		LowSignal:       defaultLowSignal,
	}
	if v.n == nil {
		d.errorf(v, "empty entry (want a head mapping)")
		return h
	}
	f := d.fields(v, "name", "endpoint", "line", "unit_id", "registers", "period", "range", "status", "extras", "alarms",
		"emissivity_ratio", "emissivity", "low_signal", "description", "channels",
		"publish", "nongrey_limit", "fit_terms", "processing", "loss", "uncertainty", "sim")
	if v := f.required("name"); v.n != nil {
		if s, ok := d.str(v); ok && d.topicLevel(v, s, false) {
			h.Name = s
		}
	}
	ep, ln := f.get("endpoint"), f.get("line")
	switch {
	case ep.n != nil && ln.n != nil:
		d.errorf(ln, "a head hangs on an endpoint or a line, not both")
	case ep.n != nil:
		if s, ok := d.str(ep); ok {
			if s == "" {
				d.errorf(ep, "must not be empty")
			} else {
				h.Endpoint = s
			}
		}
	case ln.n != nil:
		if s, ok := d.str(ln); ok {
			if s == "" {
				d.errorf(ln, "must not be empty")
			} else {
				h.Line = s
			}
		}
	case f.ok:
		d.errorf(v, "needs endpoint (Modbus TCP) or line (RS-485)")
	}
	if v := f.get("unit_id"); v.n != nil {
		// Modbus unit (slave) addresses 1..247, 0 for broadcast; a TCP
		// device often answers any (Modbus over serial line V1.02, 2.2).
		if x, ok := d.integer(v, 0, 247); ok {
			h.UnitID = uint8(x)
		}
	}
	if v := f.get("registers"); v.n != nil {
		if s, ok := d.choice(v, "register table", "input", "holding"); ok {
			h.Registers = s
		}
	}
	if v := f.get("period"); v.n != nil {
		if x, ok := d.positiveDuration(v); ok {
			if x < minPeriod {
				d.errorf(v, "must be at least %s", minPeriod)
			} else {
				h.Period = x
			}
		}
	}
	if v := f.required("range"); v.n != nil {
		rf := d.fields(v, "min", "max")
		lo, okLo := 0.0, false
		hi, okHi := 0.0, false
		if v := rf.required("min"); v.n != nil {
			lo, okLo = d.temperature(v)
		}
		if v := rf.required("max"); v.n != nil {
			hi, okHi = d.temperature(v)
		}
		if okLo && okHi {
			if lo >= hi {
				d.errorf(v, "min %s must be below max %s", fmtTemperature(lo), fmtTemperature(hi))
			} else {
				h.RangeMin, h.RangeMax = lo, hi
			}
		}
	}
	if v := f.get("low_signal"); v.n != nil {
		if x, ok := d.fraction(v); ok {
			if x < 0 || x >= 1 {
				d.errorf(v, "must be from 0 to below 100%%")
			} else {
				h.LowSignal = x
			}
		}
	}
	if v := f.get("description"); v.n != nil {
		if s, ok := d.str(v); ok {
			h.Description = s
		}
	}
	chv := f.required("channels")
	items := d.list(chv)
	for _, it := range items {
		h.Channels = append(h.Channels, d.channel(it))
	}
	if chv.n != nil && chv.n.Kind == yaml.SequenceNode && (len(items) < 2 || len(items) > maxChannels) {
		d.errorf(chv, "want 2 to %d channels, have %d", maxChannels, len(items))
	}
	d.radiometry(f, &h)
	if sv := f.get("status"); sv.n != nil {
		h.Status = d.status(sv)
	}
	for _, it := range d.list(f.get("extras")) {
		h.Extras = append(h.Extras, d.extra(it))
	}
	h.Alarms = d.alarmRules(f.get("alarms"))
	d.sim(f.get("sim"), &h)
	return h
}

func (d *decoder) channel(v val) Channel {
	var ch Channel
	if v.n == nil {
		d.errorf(v, "empty entry (want a channel mapping)")
		return ch
	}
	f := d.fields(v, "name", "band", "sakuma_hattori", "responsivity", "calibration", "saturation", "signal")
	if v := f.required("name"); v.n != nil {
		if s, ok := d.str(v); ok {
			if s == "" {
				d.errorf(v, "must not be empty")
			} else {
				ch.Name = s
			}
		}
	}
	var models []string
	for _, k := range []string{"band", "sakuma_hattori", "responsivity", "calibration"} {
		if f.get(k).n != nil {
			models = append(models, k)
		}
	}
	switch {
	case len(models) > 1:
		d.errorf(v, "has both %s and %s (want exactly one of band, sakuma_hattori, responsivity or calibration)", models[0], models[1])
	case len(models) == 0:
		if f.ok {
			d.errorf(v, "needs band, sakuma_hattori, responsivity or calibration")
		}
	case models[0] == "band":
		ch.Band = d.band(f.get("band"))
	case models[0] == "sakuma_hattori":
		ch.SakumaHattori = d.sakumaHattori(f.get("sakuma_hattori"))
	case models[0] == "responsivity":
		ch.Responsivity = d.responsivity(f.get("responsivity"))
	case models[0] == "calibration":
		cv := f.get("calibration")
		ch.Calibration = d.calibration(cv)
		if !d.failed[cv.path] {
			ch.SakumaHattori = d.fitCalibration(cv, ch.Calibration)
		}
	}
	if v := f.get("saturation"); v.n != nil {
		if x, ok := d.number(v); ok {
			if x <= 0 {
				d.errorf(v, "must be positive")
			} else {
				ch.Saturation = x
			}
		}
	}
	if v := f.required("signal"); v.n != nil {
		ch.Signal = d.signal(v)
	}
	return ch
}

// wavelength decodes a wavelength: positive and in the optical range.
func (d *decoder) wavelength(v val) (float64, bool) {
	x, ok := d.length(v)
	if !ok {
		return 0, false
	}
	switch {
	case x <= 0:
		d.errorf(v, "must be positive")
		return 0, false
	case x < minWavelength || x > maxWavelength:
		d.errorf(v, "%s is outside %s..%s", fmtLength(x), fmtLength(minWavelength), fmtLength(maxWavelength))
		return 0, false
	}
	return x, true
}

func (d *decoder) band(v val) *Band {
	f := d.fields(v, "from", "to")
	b := &Band{}
	okFrom, okTo := false, false
	if v := f.required("from"); v.n != nil {
		b.From, okFrom = d.wavelength(v)
	}
	if v := f.required("to"); v.n != nil {
		b.To, okTo = d.wavelength(v)
	}
	if okFrom && okTo && b.From >= b.To {
		d.errorf(v, "from %s must be shorter than to %s", fmtLength(b.From), fmtLength(b.To))
	}
	return b
}

func (d *decoder) sakumaHattori(v val) *SakumaHattori {
	f := d.fields(v, "a", "b", "c")
	sh := &SakumaHattori{}
	if v := f.required("a"); v.n != nil {
		sh.A, _ = d.wavelength(v)
	}
	if v := f.required("b"); v.n != nil {
		sh.B, _ = d.lengthTemperature(v)
	}
	if v := f.required("c"); v.n != nil {
		if x, ok := d.number(v); ok {
			if x <= 0 {
				d.errorf(v, "must be positive")
			} else {
				sh.C = x
			}
		}
	}
	return sh
}

func (d *decoder) signal(v val) Signal {
	s := Signal{WordOrder: "high_first", ByteOrder: "big", Scale: 1}
	f := d.fields(v, "address", "type", "word_order", "byte_order", "scale", "offset")
	okAddr := false
	if v := f.required("address"); v.n != nil {
		var x int64
		if x, okAddr = d.integer(v, 0, 65535); okAddr {
			s.Address = uint16(x)
		}
	}
	if v := f.required("type"); v.n != nil {
		if t, ok := d.choice(v, "type", "uint16", "int16", "uint32", "int32", "float32"); ok {
			s.Type = t
		}
	}
	if v := f.get("word_order"); v.n != nil {
		if w, ok := d.choice(v, "word order", "high_first", "low_first"); ok {
			if s.Registers() == 1 {
				d.errorf(v, "applies to 32-bit types only (type is %s)", s.Type)
			} else {
				s.WordOrder = w
			}
		}
	}
	if v := f.get("byte_order"); v.n != nil {
		if b, ok := d.choice(v, "byte order", "big", "little"); ok {
			s.ByteOrder = b
		}
	}
	if v := f.get("scale"); v.n != nil {
		if x, ok := d.number(v); ok {
			if x == 0 {
				d.errorf(v, "must not be zero")
			} else {
				s.Scale = x
			}
		}
	}
	if v := f.get("offset"); v.n != nil {
		if x, ok := d.number(v); ok {
			s.Offset = x
		}
	}
	if n := s.Registers(); okAddr && n > 0 && int(s.Address)+n-1 > 65535 {
		av := f.get("address")
		d.errorf(av, "the %s at %d needs registers %d..%d, past the last register 65535", s.Type, s.Address, s.Address, int(s.Address)+n-1)
	}
	return s
}

// sim fills the head's simulation defaults and decodes its sim section.
// It runs after the head's range and channels are decoded.
func (d *decoder) sim(v val, h *Head) {
	h.Sim = Sim{
		Seed:         seedOf(h.Name),
		Emissivity:   make([]float64, len(h.Channels)),
		Temperature:  Profile{Start: (h.RangeMin + h.RangeMax) / 2},
		Transmission: Profile{Start: 1},
	}
	for i := range h.Sim.Emissivity {
		h.Sim.Emissivity[i] = 1
	}
	if v.n == nil {
		return
	}
	h.Sim.Set = true
	f := d.fields(v, "seed", "noise", "emissivity", "temperature", "transmission", "faults", "status", "extras")
	h.Sim.Faults = d.faults(f.get("faults"))
	h.Sim.StatusFlags = d.episodes(f.get("status"))
	if ev := f.get("extras"); ev.n != nil {
		names := make([]string, 0, len(h.Extras))
		for _, e := range h.Extras {
			names = append(names, e.Name)
		}
		xf := d.fields(ev, names...)
		h.Sim.Extras = map[string]Profile{}
		for name, pv := range xf.vals {
			var p Profile
			d.profile(pv, &p, d.number)
			h.Sim.Extras[name] = p
		}
	}
	if v := f.get("seed"); v.n != nil {
		if x, ok := d.integer(v, math.MinInt64, math.MaxInt64); ok {
			h.Sim.Seed = x
		}
	}
	if v := f.get("noise"); v.n != nil {
		if x, ok := d.fraction(v); ok {
			if x < 0 || x >= 1 {
				d.errorf(v, "must be from 0 to below 100%%")
			} else {
				h.Sim.Noise = x
			}
		}
	}
	if ev := f.get("emissivity"); ev.n != nil {
		items := d.list(ev)
		eps := make([]float64, len(items))
		for i, it := range items {
			eps[i] = 1
			if it.n == nil {
				d.errorf(it, "empty entry (want an emissivity such as 0.8)")
				continue
			}
			if x, ok := d.number(it); ok {
				if x <= 0 || x > 1 {
					d.errorf(it, "%s is outside (0, 1]", fmtNum(x))
				} else {
					eps[i] = x
				}
			}
		}
		channelsOK := !d.failed[join(parent(v.path), "channels")]
		switch {
		case ev.n.Kind != yaml.SequenceNode:
		case len(items) != len(h.Channels):
			if channelsOK {
				d.errorf(ev, "has %d values for %d channels", len(items), len(h.Channels))
			}
		case !d.failed[ev.path]:
			h.Sim.Emissivity = eps
		}
	}
	if pv := f.get("temperature"); pv.n != nil {
		d.profile(pv, &h.Sim.Temperature, d.temperature)
	}
	if pv := f.get("transmission"); pv.n != nil {
		d.profile(pv, &h.Sim.Transmission, d.transmission)
	}
}

// transmission decodes a sight-path transmission, 0..100 %.
func (d *decoder) transmission(v val) (float64, bool) {
	x, ok := d.fraction(v)
	if ok && (x < 0 || x > 1) {
		d.errorf(v, "%s%% is outside 0..100%%", fmtNum(roundSig(x*100)))
		return 0, false
	}
	return x, ok
}

// profile decodes a start value and segments, each value through value.
func (d *decoder) profile(v val, p *Profile, value func(val) (float64, bool)) {
	f := d.fields(v, "start", "repeat", "segments")
	if v := f.get("start"); v.n != nil {
		if x, ok := value(v); ok {
			p.Start = x
		}
	}
	repeat := f.get("repeat")
	if repeat.n != nil {
		if b, ok := d.boolean(repeat); ok {
			p.Repeat = b
		}
	}
	cur := p.Start
	var total time.Duration
	for _, it := range d.list(f.get("segments")) {
		if it.n == nil {
			d.errorf(it, "empty entry (want one of hold, ramp or step)")
			continue
		}
		sf := d.fields(it, "hold", "ramp", "step", "over")
		if !sf.ok {
			continue
		}
		var kinds []string
		for _, k := range []string{"hold", "ramp", "step"} {
			if sf.get(k).n != nil {
				kinds = append(kinds, k)
			}
		}
		switch len(kinds) {
		case 0:
			d.errorf(it, "want one of hold, ramp or step")
			continue
		case 1:
		default:
			d.errorf(it, "has both %s and %s (want one of hold, ramp or step)", kinds[0], kinds[1])
			continue
		}
		over := sf.get("over")
		if over.n != nil && kinds[0] != "ramp" {
			d.errorf(over, "goes with ramp only")
		}
		seg := Segment{Kind: kinds[0]}
		kv := sf.get(kinds[0])
		ok := false
		switch seg.Kind {
		case "hold":
			seg.Value = cur
			seg.Duration, ok = d.positiveDuration(kv)
		case "ramp":
			var okValue bool
			seg.Value, okValue = value(kv)
			if over.n == nil {
				d.errorf(it, "ramp needs over (a duration such as 15s)")
			} else {
				seg.Duration, ok = d.positiveDuration(over)
			}
			ok = ok && okValue
		case "step":
			seg.Value, ok = value(kv)
		}
		if ok {
			cur = seg.Value
			if total < math.MaxInt64-seg.Duration {
				total += seg.Duration
			}
			p.Segments = append(p.Segments, seg)
		}
	}
	if p.Repeat && total == 0 && !d.failed[join(v.path, "segments")] {
		d.errorf(repeat, "needs segments that take time (a hold or a ramp)")
	}
}

// seedOf derives a head's default noise seed from its name: the 64-bit
// FNV-1a hash shifted right by one, so it is non-negative.
func seedOf(name string) int64 {
	h := fnv.New64a()
	h.Write([]byte(name))
	return int64(h.Sum64() >> 1)
}

// topicLevel checks a name that becomes one MQTT topic level. MQTT 3.1.1,
// section 4.7: '/' separates levels, '+' and '#' are wildcards, U+0000 is
// forbidden; topics starting with '$' are the broker's (4.7.2). Spaces are
// legal in MQTT but refused here, since they break shell subscriptions
// and log parsing.
func (d *decoder) topicLevel(v val, s string, first bool) bool {
	problem := ""
	switch {
	case s == "":
		problem = "must not be empty"
	case strings.ContainsAny(s, "/+#"):
		c := s[strings.IndexAny(s, "/+#")]
		problem = fmt.Sprintf("%q contains '%c' (not allowed in an MQTT topic level)", s, c)
	case strings.IndexFunc(s, unicode.IsSpace) >= 0:
		problem = fmt.Sprintf("%q contains a space", s)
	case strings.IndexFunc(s, unicode.IsControl) >= 0:
		problem = fmt.Sprintf("%q contains a control character", s)
	case first && s[0] == '$':
		problem = fmt.Sprintf("%q starts with '$' (MQTT reserves such topics for the broker)", s)
	case len(s) > 256:
		problem = "longer than 256 bytes"
	}
	if problem != "" {
		d.errorf(v, "%s", problem)
		return false
	}
	return true
}

// checkAddress checks a host:port TCP address.
func checkAddress(s string) error {
	host, port, err := net.SplitHostPort(s)
	if err != nil {
		return fmt.Errorf("bad address %q (want host:port such as 127.0.0.1:502)", s)
	}
	if host == "" {
		return fmt.Errorf("missing host in %q (want host:port such as 127.0.0.1:502)", s)
	}
	return checkPort(port, s)
}

func checkPort(port, in string) error {
	if port == "" {
		return fmt.Errorf("missing port in %q", in)
	}
	p, err := strconv.Atoi(port)
	if err != nil || p < 1 || p > 65535 {
		return fmt.Errorf("port %q in %q is outside 1..65535", port, in)
	}
	return nil
}

// brokerSchemes are the URL schemes of MQTT brokers: plain TCP, TLS and
// WebSocket.
var brokerSchemes = []string{"tcp", "mqtt", "ssl", "tls", "ws", "wss"}

// checkBrokerURL checks one broker URL: a known scheme, a host and a port,
// no credentials, and a path only for WebSocket.
func checkBrokerURL(s string) error {
	u, err := url.Parse(s)
	if err != nil || u.Opaque != "" || !strings.Contains(s, "://") {
		return fmt.Errorf("bad broker URL %q (want scheme://host:port such as tcp://127.0.0.1:1883)", s)
	}
	switch {
	case !slices.Contains(brokerSchemes, u.Scheme):
		return fmt.Errorf("unknown scheme %q in broker URL %q (want %s)", u.Scheme, s, orList(brokerSchemes))
	case u.User != nil:
		return fmt.Errorf("broker URL %q carries credentials (use mqtt.username)", s)
	case u.Hostname() == "":
		return fmt.Errorf("missing host in broker URL %q", s)
	case u.RawQuery != "" || u.Fragment != "" || u.ForceQuery:
		return fmt.Errorf("broker URL %q has a query or fragment", s)
	case u.Path != "" && u.Scheme != "ws" && u.Scheme != "wss":
		return fmt.Errorf("broker URL %q has a path (only ws and wss take one)", s)
	}
	return checkPort(u.Port(), s)
}
