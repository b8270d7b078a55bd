package status

import (
	"cmp"
	"encoding/json"
	"math"
	"slices"
	"strings"
	"sync/atomic"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/mqtt"
	"glowgate/convert"
)

// HeadInfo describes a head as configured, for display.
type HeadInfo struct {
	Name        string
	Description string
	Line        string // the field-bus line or endpoint it is polled on
	Unit        string // "degC" or "K": the unit of its readings
	RangeMin    float64
	RangeMax    float64 // measuring range, in Unit
	Channels    []ChannelInfo
	// Settings and Calibration are the settings and the calibration in
	// force, shown as given: keys sorted, strings and numbers as they are,
	// objects and arrays as JSON. Values must encode as JSON.
	Settings    map[string]any
	Calibration map[string]any
}

// ChannelInfo is one spectral channel of a head.
type ChannelInfo struct {
	Name         string
	WavelengthUM float64 // centre wavelength, µm
}

// Alarm states: the names alarms.State.String gives them (ISA-18.2 /
// IEC 62682 states).
const (
	AlarmNormal                 = "normal"             // condition absent, nothing to acknowledge
	AlarmUnacknowledged         = "unacknowledged"     // in alarm, not yet acknowledged
	AlarmAcknowledged           = "acknowledged"       // in alarm, acknowledged
	AlarmReturnedUnacknowledged = "rtn_unacknowledged" // back to normal before it was acknowledged
	AlarmLatched                = "latched"            // back to normal, held until acknowledged (reset)
	AlarmShelved                = "shelved"            // set aside by an operator until a time
	AlarmSuppressed             = "suppressed"         // withheld by design in this plant state
	AlarmOutOfService           = "out_of_service"     // removed from service
)

// AlarmView is one alarm as the page lists it.
type AlarmView struct {
	Head     string
	Name     string
	State    string // one of the Alarm* states; any other word counts as in alarm
	Priority string // "urgent", "high", "medium", "low" (alarms.Priority.String), or another name (listed after these)
	Message  string
	Since    time.Time // when it entered its state
	// ShelvedUntil is when a shelving ends; zero or past: not shelved. A
	// shelved alarm (by this time or by State AlarmShelved) leaves the
	// alarm list of the page for a list of its own and is not counted in
	// glowgate_alarms_active.
	ShelvedUntil time.Time
}

// Health is the daemon's own account of its health: the publisher's
// figures and any reasons it knows to call itself degraded. The field-bus
// lines are read through SetLineStats.
type Health struct {
	BrokerConnected bool
	Broker          string        // the broker connected to, "" when none
	OutboxDepth     int           // messages waiting to be published
	OutboxOldest    time.Duration // age of the oldest of them; zero when none
	OutboxDropped   uint64        // messages dropped since start because the outbox was full
	Published       uint64        // messages acknowledged by a broker since start
	Degraded        []string      // further reasons, e.g. "configuration reload failed"
}

// visibleGlowK is the Draper point, about 798 K (525 °C): the temperature
// above which a hot body glows visibly in the dark (J. W. Draper, 1847;
// figure from memory). Below it the page shows no glow colour, though
// convert.GlowColor gives the chromaticity at any temperature.
const visibleGlowK = 798

// glowTableMaxK is the hottest temperature whose glow colour glowTable
// keeps; hotter ones are computed each time.
const glowTableMaxK = 4000

// glowTable keeps the glow colour of each whole kelvin from visibleGlowK to
// glowTableMaxK, computed on first use: convert.GlowColor takes about 5 µs,
// and the swatch, 8 bits a channel, moves by at most one step within half
// a kelvin (TestGlowTable). Safe for concurrent use.
type glowTable struct {
	rgb [glowTableMaxK - visibleGlowK + 1]atomic.Uint32 // 1<<24 | r<<16 | g<<8 | b once computed
}

// color is the swatch of tK rounded to the kelvin, and false below
// visibleGlowK or for NaN.
func (g *glowTable) color(tK float64) ([3]uint8, bool) {
	if !(tK >= visibleGlowK) {
		return [3]uint8{}, false
	}
	k := math.Round(tK)
	if k > glowTableMaxK {
		_, _, rgb := convert.GlowColor(tK)
		return rgb, true
	}
	e := &g.rgb[int(k)-visibleGlowK]
	v := e.Load()
	if v == 0 {
		_, _, rgb := convert.GlowColor(k)
		v = 1<<24 | uint32(rgb[0])<<16 | uint32(rgb[1])<<8 | uint32(rgb[2])
		e.Store(v)
	}
	return [3]uint8{uint8(v >> 16), uint8(v >> 8), uint8(v)}, true
}

// maxHeads bounds the heads a Server keeps state for: readings of further
// heads (a feeding bug, not a configuration) are dropped.
const maxHeads = 1024

// qualities are the reading qualities counted per head; anything else
// counts as "other".
var qualities = [...]string{"good", "uncertain", "bad", "other"}

func qualityIndex(q string) int {
	for i, name := range qualities[:3] {
		if q == name {
			return i
		}
	}
	return 3
}

// headState is what the Server keeps of one head. Guarded by Server.mu.
type headState struct {
	name       string
	configured bool
	info       HeadInfo
	unit       string   // unit of the readings held (history included)
	latest     []byte   // the latest reading as a live event (JSON)
	tempC      float64  // processed temperature of the latest reading, °C; NaN if none
	channels   []string // channel names of the latest reading
	fractions  []float64
	counts     [len(qualities)]uint64
	hist       history
}

// Reading records r, the latest reading of its head, and hands it to the
// live stream. It copies what it keeps (r may be reused once Reading
// returns). A nil r or one without a head is ignored.
func (s *Server) Reading(r *mqtt.Reading) {
	if r == nil || r.Head == "" {
		return
	}
	s.ReadingJSON(r, nil)
}

// ReadingJSON is Reading for a reading already encoded: payload is
// r.AppendJSON's output (the message published, which may carry r's
// sequence number), copied into the live event instead of encoding r
// again. A nil payload encodes r.
func (s *Server) ReadingJSON(r *mqtt.Reading, payload []byte) {
	if r == nil || r.Head == "" {
		return
	}
	ev := make([]byte, 0, 512+96*len(r.Channels))
	ev = append(ev, `{"reading":`...)
	if payload != nil {
		ev = append(ev, payload...)
	} else {
		ev = r.AppendJSON(ev)
	}
	ev = append(ev, `,"glow":`...)
	tempC := celsius(r.Temperature, r.Unit)
	if rgb, ok := s.glow.color(tempC + 273.15); ok {
		ev = append(ev, '"', '#', hexDigit(rgb[0]>>4), hexDigit(rgb[0]&15), hexDigit(rgb[1]>>4), hexDigit(rgb[1]&15), hexDigit(rgb[2]>>4), hexDigit(rgb[2]&15), '"')
	} else {
		ev = append(ev, "null"...)
	}
	ev = append(ev, '}')

	at := r.Time
	if at.IsZero() {
		at = s.now()
	}
	temp, raw := value(r.Temperature), value(r.RawTemperature)

	s.mu.Lock()
	defer s.mu.Unlock()
	h := s.heads[r.Head]
	if h == nil {
		if len(s.heads) >= maxHeads {
			s.dropHeadOnce.Do(func() {
				s.log.Warn("status: too many heads, readings of further heads are not shown", "limit", maxHeads, "head", r.Head)
			})
			return
		}
		h = &headState{name: r.Head}
		s.heads[r.Head] = h
		s.order = append(s.order, r.Head)
		s.headsChanged()
	}
	h.latest = ev
	h.tempC = tempC
	h.counts[qualityIndex(r.Quality)]++
	sameChannels := len(h.channels) == len(r.Channels)
	for i := 0; sameChannels && i < len(r.Channels); i++ {
		sameChannels = h.channels[i] == r.Channels[i].Name
	}
	if !sameChannels || h.unit != r.Unit {
		h.channels = h.channels[:0]
		for _, c := range r.Channels {
			h.channels = append(h.channels, c.Name)
		}
		h.fractions = make([]float64, len(r.Channels))
		h.unit = r.Unit
		h.hist.reset(len(r.Channels))
	}
	for i, c := range r.Channels {
		h.fractions[i] = value(c.SignalFraction)
	}
	h.hist.add(at.UnixMilli(), temp, raw, h.fractions)
	s.appendEvent(r.Head, ev)
}

// SetHeads sets the heads as configured, in display order. Heads that are
// no longer configured are forgotten with their history; the others keep
// theirs. Heads without a name, and repeats of a name, are left out.
func (s *Server) SetHeads(infos []HeadInfo) {
	s.mu.Lock()
	defer s.mu.Unlock()
	keep := make(map[string]bool, len(infos))
	order := make([]string, 0, len(infos))
	for _, in := range infos {
		if in.Name == "" || keep[in.Name] {
			s.log.Warn("status: head left out: empty or repeated name", "head", in.Name)
			continue
		}
		keep[in.Name] = true
		order = append(order, in.Name)
		h := s.heads[in.Name]
		if h == nil {
			h = &headState{name: in.Name, tempC: math.NaN()}
			s.heads[in.Name] = h
		}
		in.Channels = slices.Clone(in.Channels)
		h.info = in
		h.configured = true
	}
	for name := range s.heads {
		if !keep[name] {
			delete(s.heads, name)
		}
	}
	s.order = order
	s.headsChanged()
}

// SetAlarms replaces the alarm list.
func (s *Server) SetAlarms(alarms []AlarmView) {
	list := slices.Clone(alarms)
	slices.SortStableFunc(list, func(a, b AlarmView) int {
		if c := cmp.Compare(priorityRank(a.Priority), priorityRank(b.Priority)); c != 0 {
			return c
		}
		if c := strings.Compare(a.Priority, b.Priority); c != 0 {
			return c
		}
		return b.Since.Compare(a.Since) // newest first
	})
	data := encodeAlarms(list)
	s.mu.Lock()
	defer s.mu.Unlock()
	s.alarms = list
	s.alarmsJSON = data
	s.alarmsVer++
	s.wakeClients()
}

// SetHealth replaces the daemon's health figures.
func (s *Server) SetHealth(h Health) {
	h.Degraded = slices.Clone(h.Degraded)
	s.mu.Lock()
	defer s.mu.Unlock()
	s.health = h
	s.healthSet = true
	s.healthVer++
	s.wakeClients()
}

// SetLineStats sets the function that reads the counters of the
// field-bus lines (typically collecting Line.Stats of every line). It is
// called on every scrape of /metrics and when line health is shown, from
// HTTP handler goroutines, never with a lock of the Server held; it must
// be safe for concurrent use. Nil removes it.
func (s *Server) SetLineStats(f func() []modbus.LineStats) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.lineStats = f
}

// priorityRank orders priorities: the usual four first, others after.
func priorityRank(p string) int {
	switch strings.ToLower(p) {
	case "urgent", "critical", "emergency":
		return 0
	case "high":
		return 1
	case "medium":
		return 2
	case "low":
		return 3
	}
	return 4
}

// alarmActive reports whether a counts as in alarm at now: its condition
// is present (unacknowledged or acknowledged, or a state this package
// does not know) and it is not shelved.
func alarmActive(a AlarmView, now time.Time) bool {
	switch a.State {
	case AlarmNormal, AlarmReturnedUnacknowledged, AlarmLatched, AlarmShelved, AlarmSuppressed, AlarmOutOfService:
		return false
	}
	return !a.ShelvedUntil.After(now)
}

// headsChanged re-encodes the head list and wakes the live stream. Called
// with s.mu held.
func (s *Server) headsChanged() {
	type channel struct {
		Name         string  `json:"name"`
		WavelengthUM float64 `json:"wavelength_um"`
	}
	type head struct {
		Name        string          `json:"name"`
		Configured  bool            `json:"configured"`
		Description string          `json:"description"`
		Line        string          `json:"line"`
		Unit        string          `json:"unit"`
		RangeMin    *float64        `json:"range_min"`
		RangeMax    *float64        `json:"range_max"`
		Channels    []channel       `json:"channels"`
		Settings    json.RawMessage `json:"settings"`
		Calibration json.RawMessage `json:"calibration"`
	}
	list := make([]head, 0, len(s.order))
	for _, name := range s.order {
		h := s.heads[name]
		in := h.info
		e := head{
			Name: name, Configured: h.configured, Description: in.Description, Line: in.Line, Unit: in.Unit,
			RangeMin: finitePtr(in.RangeMin), RangeMax: finitePtr(in.RangeMax),
			Channels:    []channel{},
			Settings:    s.encodeMap(name, "settings", in.Settings),
			Calibration: s.encodeMap(name, "calibration", in.Calibration),
		}
		if !h.configured {
			e.RangeMin, e.RangeMax = nil, nil
		}
		for _, c := range in.Channels {
			e.Channels = append(e.Channels, channel{c.Name, finiteOr0(c.WavelengthUM)})
		}
		list = append(list, e)
	}
	data, err := json.Marshal(list)
	if err != nil { // unreachable: every field above encodes
		s.log.Error("status: encode heads", "error", err)
		data = []byte("[]")
	}
	s.headsJSON = data
	s.headsVer++
	s.wakeClients()
}

// encodeMap encodes a free-form map for display; a map that does not
// encode (a NaN, a channel, a cycle) shows the error instead.
func (s *Server) encodeMap(head, what string, m map[string]any) json.RawMessage {
	if m == nil {
		return json.RawMessage("{}")
	}
	data, err := json.Marshal(m)
	if err != nil {
		s.log.Warn("status: head "+what+" cannot be shown", "head", head, "error", err)
		data, _ = json.Marshal(map[string]string{"error": what + " cannot be shown: " + err.Error()})
	}
	return data
}

func encodeAlarms(list []AlarmView) []byte {
	type alarm struct {
		Head         string     `json:"head"`
		Name         string     `json:"name"`
		State        string     `json:"state"`
		Priority     string     `json:"priority"`
		Message      string     `json:"message"`
		Since        *time.Time `json:"since"`
		ShelvedUntil *time.Time `json:"shelved_until"`
	}
	out := make([]alarm, 0, len(list))
	for _, a := range list {
		out = append(out, alarm{a.Head, a.Name, a.State, a.Priority, a.Message, timePtr(a.Since), timePtr(a.ShelvedUntil)})
	}
	data, err := json.Marshal(out)
	if err != nil { // only a time outside years 0..9999, which timePtr leaves out
		return []byte("[]")
	}
	return data
}

func timePtr(t time.Time) *time.Time {
	if t.IsZero() || t.Year() < 0 || t.Year() > 9999 {
		return nil
	}
	u := t.UTC().Truncate(time.Millisecond)
	return &u
}

func finitePtr(f float64) *float64 {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return nil
	}
	return &f
}

func finiteOr0(f float64) float64 {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return 0
	}
	return f
}

// value is *p, or NaN for nil.
func value(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// celsius converts a temperature in unit ("degC" or "K") to °C; NaN when
// there is none or the unit is unknown.
func celsius(p *float64, unit string) float64 {
	v := value(p)
	if math.IsInf(v, 0) {
		return math.NaN()
	}
	switch unit {
	case "degC":
		return v
	case "K":
		return v - 273.15
	}
	return math.NaN()
}

func hexDigit(b uint8) byte { return "0123456789abcdef"[b&15] }
