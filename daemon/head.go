package daemon

import (
	"fmt"
	"math"
	"time"

	"glowgate/bus/modbus"
	"glowgate/bus/mqtt"
	"glowgate/convert"
	"glowgate/daemon/config"
)

// head is the runtime form of one configured head: where its registers
// live, how its signals become a temperature, and how a reading is named.
type head struct {
	cfg      config.Head
	gateway  string
	unit     string // "degC" or "K"
	endpoint string
	request  modbus.Request
	fields   []modbus.Field
	ratio    *convert.Ratio
	channels []mqtt.Channel // name and wavelength; values filled per reading
}

// newHead turns a validated configuration head into its runtime form.
func newHead(cfg *config.Config, h config.Head) (*head, error) {
	models := make([]convert.Model, len(h.Channels))
	fields := make([]modbus.Field, len(h.Channels))
	channels := make([]mqtt.Channel, len(h.Channels))
	for i, ch := range h.Channels {
		m, err := channelModel(ch)
		if err != nil {
			return nil, fmt.Errorf("head %s channel %s: %w", h.Name, ch.Name, err)
		}
		f, err := signalField(ch.Signal)
		if err != nil {
			return nil, fmt.Errorf("head %s channel %s: %w", h.Name, ch.Name, err)
		}
		models[i], fields[i] = m, f
		channels[i] = mqtt.Channel{Name: ch.Name, WavelengthUM: round(ch.Wavelength()*1e6, 6)}
	}
	if len(models) != 2 {
		return nil, fmt.Errorf("head %s: %d channels, want 2", h.Name, len(models))
	}
	ratio, err := convert.NewRatio(models[0], models[1], h.EmissivityRatio, h.RangeMin, h.RangeMax, h.LowSignal)
	if err != nil {
		return nil, fmt.Errorf("head %s: %w", h.Name, err)
	}
	table, err := modbus.ParseTable(h.Registers)
	if err != nil {
		return nil, fmt.Errorf("head %s: %w", h.Name, err)
	}
	return &head{
		cfg:      h,
		gateway:  cfg.Gateway,
		unit:     cfg.Unit,
		endpoint: h.Endpoint,
		request:  blockRequest(h.UnitID, table, fields),
		fields:   fields,
		ratio:    ratio,
		channels: channels,
	}, nil
}

// channelModel builds the blackbody response of one channel.
func channelModel(ch config.Channel) (convert.Model, error) {
	switch {
	case ch.Band != nil:
		return convert.NewBand(ch.Band.From, ch.Band.To, convert.C2ITS90)
	case ch.SakumaHattori != nil:
		sh := ch.SakumaHattori
		return convert.NewSakumaHattori(sh.A, sh.B, sh.C, convert.C2ITS90)
	}
	return nil, fmt.Errorf("no channel model")
}

// signalField maps a configured signal location to a register field.
func signalField(s config.Signal) (modbus.Field, error) {
	typ, err := modbus.ParseType(s.Type)
	if err != nil {
		return modbus.Field{}, err
	}
	words, err := modbus.ParseWordOrder(s.WordOrder)
	if err != nil {
		return modbus.Field{}, err
	}
	bytes, err := modbus.ParseByteOrder(s.ByteOrder)
	if err != nil {
		return modbus.Field{}, err
	}
	return modbus.Field{Address: s.Address, Type: typ, Words: words, Bytes: bytes, Scale: s.Scale, Offset: s.Offset}, nil
}

// blockRequest is the one read that covers every field of a head. The
// configuration keeps a head's fields within one block of at most 125
// registers.
func blockRequest(unit uint8, table modbus.Table, fields []modbus.Field) modbus.Request {
	lo, hi := uint32(math.MaxUint32), uint32(0)
	for _, f := range fields {
		lo = min(lo, uint32(f.Address))
		hi = max(hi, uint32(f.Address)+uint32(f.Len()))
	}
	return modbus.Request{Unit: unit, Table: table, Address: uint16(lo), Quantity: uint16(hi - lo)}
}

// poll is the line's schedule entry for this head.
func (h *head) poll() modbus.Poll {
	return modbus.Poll{Name: h.cfg.Name, Request: h.request, Period: h.cfg.Period}
}

// decode reads the channel signals out of a register block. A field that
// cannot be decoded leaves NaN, which conversion flags as no signal.
func (h *head) decode(regs []uint16, dst []float64) []float64 {
	dst = dst[:0]
	for _, f := range h.fields {
		v, err := f.Decode(regs, h.request.Address)
		if err != nil {
			v = math.NaN()
		}
		dst = append(dst, v)
	}
	return dst
}

// reading converts the channel signals acquired at t into a Reading.
func (h *head) reading(t time.Time, signals []float64) mqtt.Reading {
	res := h.ratio.Convert(signals[0], signals[1])
	r := h.base(t)
	r.Ratio = finite(res.Ratio)
	r.RawTemperature = h.temperature(res.Temperature)
	r.Temperature = r.RawTemperature
	for i := range r.Channels {
		c := res.Channels[i]
		r.Channels[i].Signal = finite(signals[i])
		r.Channels[i].SignalFraction = finite(c.Fraction)
		r.Channels[i].BrightnessTemperature = h.temperature(c.Brightness)
	}
	r.Flags = res.Flags.AppendNames(r.Flags)
	r.Quality, r.StatusCode = conversionQuality(res)
	return r
}

// failed is the reading published when a poll fails: no values, bad
// quality, and the status code of the failure.
func (h *head) failed(t time.Time, err error) mqtt.Reading {
	r := h.base(t)
	r.Quality = "bad"
	r.StatusCode = commStatus(err)
	r.Flags = append(r.Flags, "comm_error")
	return r
}

func (h *head) base(t time.Time) mqtt.Reading {
	chans := make([]mqtt.Channel, len(h.channels))
	copy(chans, h.channels)
	return mqtt.Reading{
		Gateway:         h.gateway,
		Head:            h.cfg.Name,
		Time:            t,
		Unit:            h.unit,
		EmissivityRatio: h.cfg.EmissivityRatio,
		Channels:        chans,
		Flags:           make([]string, 0, 4),
	}
}

// temperature expresses a kelvin value in the reading's unit, or nil
// when it could not be computed.
func (h *head) temperature(k float64) *float64 {
	if math.IsNaN(k) || math.IsInf(k, 0) {
		return nil
	}
	if h.unit == "degC" {
		k -= 273.15
	}
	v := round(k, 3)
	return &v
}

func finite(v float64) *float64 {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return nil
	}
	return &v
}

// round keeps n decimal places: readings carry no more digits than they
// can mean (a milli-kelvin is far below any head's noise).
func round(v float64, n int) float64 {
	p := math.Pow10(n)
	return math.Round(v*p) / p
}
