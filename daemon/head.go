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
// live, how its signals become a temperature, the state of its processing
// and loss detection, and how a reading is named.
type head struct {
	cfg      config.Head
	gateway  string
	unit     string // "degC" or "K"
	bus      string // the endpoint or line the head hangs on
	regs     regMap
	chain    *convert.Chain
	channels []mqtt.Channel // name and wavelength; values filled per reading
	pairs    []string       // names of the pair temperatures, "a/b"
	k        float64        // emissivity ratio of the published pair
	c2       float64        // second radiation constant of the channel models, m·K
	m        convert.Measurement
	alarms   *headAlarms // nil: the head has no alarms
}

// criticalTables keeps the loss detectors' tables of Student's t critical
// values by significance and degrees of freedom, so that the heads of one
// configuration build each once (64 heads built 64 alike, a third of a
// second of CPU at every start and reload).
type criticalTables map[criticalKey]*convert.CriticalValues

type criticalKey struct {
	p     float64
	maxDF int
}

// get returns the table for c, built on first use; nil for a nil map or
// a configuration NewLoss will refuse anyway.
func (t criticalTables) get(c convert.LossConfig) *convert.CriticalValues {
	if t == nil {
		return nil
	}
	k := criticalKey{c.Significance, c.MaxSamples - 2}
	if v, ok := t[k]; ok {
		return v
	}
	v, err := convert.NewCriticalValues(k.p, k.maxDF)
	if err != nil {
		return nil
	}
	t[k] = v
	return v
}

// newHead turns a validated configuration head into its runtime form;
// crit, when not nil, shares critical-value tables between heads.
func newHead(cfg *config.Config, h config.Head, crit criticalTables) (*head, error) {
	n := len(h.Channels)
	models := make([]convert.Model, n)
	channels := make([]mqtt.Channel, n)
	saturation := make([]float64, n)
	for i, ch := range h.Channels {
		m, err := channelModel(cfg, ch)
		if err != nil {
			return nil, fmt.Errorf("head %s channel %s: %w", h.Name, ch.Name, err)
		}
		models[i], saturation[i] = m, ch.Saturation
		channels[i] = mqtt.Channel{Name: ch.Name, WavelengthUM: round(m.Wavelength()*1e6, 6)}
	}
	cc := chainConfig(h, models, saturation)
	cc.Loss.Critical = crit.get(cc.Loss)
	chain, err := convert.NewChain(cc)
	if err != nil {
		return nil, fmt.Errorf("head %s: %w", h.Name, err)
	}
	regs, err := newRegMap(h)
	if err != nil {
		return nil, fmt.Errorf("head %s: %w", h.Name, err)
	}
	hd := &head{
		cfg:      h,
		gateway:  cfg.Gateway,
		unit:     cfg.Unit,
		bus:      h.Endpoint + h.Line,
		regs:     regs,
		chain:    chain,
		channels: channels,
		k:        h.Emissivity[h.Publish.I] / h.Emissivity[h.Publish.J],
		c2:       c2Of(cfg),
	}
	if n > 2 {
		// The pair temperatures come in convert's order: every adjacent
		// pair, then the outer pair.
		name := func(i, j int) string { return h.Channels[i].Name + "/" + h.Channels[j].Name }
		for i := 0; i+1 < n; i++ {
			hd.pairs = append(hd.pairs, name(i, i+1))
		}
		hd.pairs = append(hd.pairs, name(0, n-1))
	}
	return hd, nil
}

// chainConfig maps a head's settings to its conversion chain; the rolling
// windows are sized for the poll period.
func chainConfig(h config.Head, models []convert.Model, saturation []float64) convert.ChainConfig {
	perWindow := func(d time.Duration) int { return int(d/h.Period) + 8 }
	p := h.Processing
	hold := convert.HoldNone
	switch p.Hold {
	case "peak":
		hold = convert.HoldPeak
	case "valley":
		hold = convert.HoldValley
	}
	u := h.Uncertainty
	return convert.ChainConfig{
		Models: models,
		Options: convert.Options{
			Min:          h.RangeMin,
			Max:          h.RangeMax,
			LowSignal:    h.LowSignal,
			Emissivity:   h.Emissivity,
			Saturation:   saturation,
			Publish:      selection(h.Publish),
			NongreyLimit: h.NongreyLimit,
			FitTerms:     h.FitTerms,
		},
		Process: convert.ProcessConfig{
			Average:       p.Average,
			T90:           p.T90,
			Hold:          hold,
			Decay:         p.Decay,
			Reset:         p.Reset,
			HoldLastValid: p.HoldLastValid,
			MaxSamples:    perWindow(p.Average),
		},
		Loss: convert.LossConfig{
			Window:       h.Loss.Window,
			MaxSamples:   perWindow(h.Loss.Window),
			Drop:         h.Loss.Drop,
			Significance: h.Loss.Significance,
			Steady:       h.Loss.Steady,
			Reflection:   h.Loss.Reflection,
		},
		Uncertainty: convert.UncertaintyConfig{
			Noise:       u.Noise,
			Correlation: u.Correlation,
			KRel:        u.EmissivityRatio,
			Calibration: u.Calibration,
		},
	}
}

func selection(p config.Publish) convert.Selection {
	switch p.Kind {
	case "outer":
		return convert.Selection{Kind: convert.SelectOuter}
	case "fit":
		return convert.Selection{Kind: convert.SelectFit}
	}
	return convert.Selection{Kind: convert.SelectPair, I: p.I, J: p.J}
}

// channelModel builds the blackbody response of one channel with the
// configuration's c2.
func channelModel(cfg *config.Config, ch config.Channel) (convert.Model, error) {
	c2 := c2Of(cfg)
	switch {
	case ch.Band != nil:
		return convert.NewBand(ch.Band.From, ch.Band.To, c2)
	case ch.SakumaHattori != nil:
		sh := ch.SakumaHattori
		return convert.NewSakumaHattori(sh.A, sh.B, sh.C, c2)
	case ch.Responsivity != nil:
		return convert.NewResponsivity(ch.Responsivity.Wavelengths, ch.Responsivity.Values, c2)
	}
	return nil, fmt.Errorf("no channel model")
}

// c2Of is the configuration's second radiation constant; ITS-90's by
// default.
func c2Of(cfg *config.Config) float64 {
	if cfg.C2 == 0 {
		return convert.C2ITS90
	}
	return cfg.C2
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

// poll is the line's schedule entry for this head.
func (h *head) poll() modbus.Poll {
	return modbus.Poll{Name: h.cfg.Name, Requests: h.regs.reads, Period: h.cfg.Period}
}

// polled converts one poll's register blocks into a Reading: the channel
// signals, and what the status word and extras say.
func (h *head) polled(t time.Time, blocks [][]uint16, scratch []float64) mqtt.Reading {
	r := h.reading(t, h.regs.signals(blocks, scratch))
	st := h.regs.state(blocks, h.unit)
	r.Flags = append(r.Flags, st.flags...)
	r.Extras = st.extras
	r.Quality, r.StatusCode = stateQuality(st.flags, r.Quality, r.StatusCode)
	return r
}

// reading converts the channel signals acquired at t into a Reading. The
// chain carries state from reading to reading, so one goroutine at a time.
func (h *head) reading(t time.Time, signals []float64) mqtt.Reading {
	m := &h.m
	h.chain.Step(t, signals, m)
	r := h.base(t)
	r.Ratio = finite(m.Ratio)
	r.RawTemperature = h.temperature(m.Temperature)
	r.Temperature = h.temperature(m.Processed)
	for i := range r.Channels {
		c := m.Channels[i]
		r.Channels[i].Signal = finite(signals[i])
		r.Channels[i].SignalFraction = finite(c.Fraction)
		r.Channels[i].BrightnessTemperature = h.temperature(c.Brightness)
	}
	if len(h.pairs) > 0 {
		r.PairTemperatures = make([]mqtt.PairTemperature, m.NPairs)
		for i, p := range m.Pairs[:m.NPairs] {
			r.PairTemperatures[i] = mqtt.PairTemperature{Pair: h.pairs[i], Temperature: h.temperature(p.Temperature)}
		}
		r.Nongrey = finite(m.Nongrey)
	}
	if m.Fit.OK {
		r.FitTemperature = h.temperature(m.Fit.Temperature)
		r.FitResidual = finite(m.Fit.Residual)
		r.EmissivitySlope = finite(m.Fit.Slope)
	}
	r.Uncertainty = finite(round(m.Uncertainty, 3))
	r.Flags = m.Flags.AppendNames(r.Flags)
	r.Quality, r.StatusCode = conversionQuality(m.Flags, m.Temperature, m.Processed)
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
		EmissivityRatio: h.k,
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
