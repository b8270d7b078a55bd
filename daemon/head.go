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
	endpoint string
	request  modbus.Request
	fields   []modbus.Field
	models   []convert.Model
	pyro     *convert.Pyrometer
	channels []mqtt.Channel // name and wavelength; values filled per reading
	pairs    []string       // names of the pair temperatures, "a/b"
	k        float64        // emissivity ratio of the published pair
	c2       float64        // second radiation constant of the channel models, m·K

	proc  *convert.Processor
	loss  *convert.Loss
	noise *convert.NoiseEstimator
	res   convert.Result // scratch, reused by every reading
}

// newHead turns a validated configuration head into its runtime form.
func newHead(cfg *config.Config, h config.Head) (*head, error) {
	n := len(h.Channels)
	models := make([]convert.Model, n)
	fields := make([]modbus.Field, n)
	channels := make([]mqtt.Channel, n)
	saturation := make([]float64, n)
	for i, ch := range h.Channels {
		m, err := channelModel(cfg, ch)
		if err != nil {
			return nil, fmt.Errorf("head %s channel %s: %w", h.Name, ch.Name, err)
		}
		f, err := signalField(ch.Signal)
		if err != nil {
			return nil, fmt.Errorf("head %s channel %s: %w", h.Name, ch.Name, err)
		}
		models[i], fields[i], saturation[i] = m, f, ch.Saturation
		channels[i] = mqtt.Channel{Name: ch.Name, WavelengthUM: round(m.Wavelength()*1e6, 6)}
	}
	pyro, err := convert.NewPyrometer(models, convert.Options{
		Min:          h.RangeMin,
		Max:          h.RangeMax,
		LowSignal:    h.LowSignal,
		Emissivity:   h.Emissivity,
		Saturation:   saturation,
		Publish:      selection(h.Publish),
		NongreyLimit: h.NongreyLimit,
		FitTerms:     h.FitTerms,
	})
	if err != nil {
		return nil, fmt.Errorf("head %s: %w", h.Name, err)
	}
	table, err := modbus.ParseTable(h.Registers)
	if err != nil {
		return nil, fmt.Errorf("head %s: %w", h.Name, err)
	}
	hd := &head{
		cfg:      h,
		gateway:  cfg.Gateway,
		unit:     cfg.Unit,
		endpoint: h.Endpoint,
		request:  blockRequest(h.UnitID, table, fields),
		fields:   fields,
		models:   models,
		pyro:     pyro,
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
	if err := hd.newState(); err != nil {
		return nil, fmt.Errorf("head %s: %w", h.Name, err)
	}
	return hd, nil
}

// newState makes the head's processing, loss detection and noise
// estimation, sized for its poll period.
func (h *head) newState() error {
	c := h.cfg
	perWindow := func(d time.Duration) int { return int(d/c.Period) + 8 }
	p := c.Processing
	hold := convert.HoldNone
	switch p.Hold {
	case "peak":
		hold = convert.HoldPeak
	case "valley":
		hold = convert.HoldValley
	}
	var err error
	h.proc, err = convert.NewProcessor(convert.ProcessConfig{
		Average:       p.Average,
		T90:           p.T90,
		Hold:          hold,
		Decay:         p.Decay,
		Reset:         p.Reset,
		HoldLastValid: p.HoldLastValid,
		MaxSamples:    perWindow(p.Average),
	})
	if err != nil {
		return err
	}
	l := c.Loss
	h.loss, err = convert.NewLoss(convert.LossConfig{
		Window:       l.Window,
		MaxSamples:   perWindow(l.Window),
		Drop:         l.Drop,
		Significance: l.Significance,
		Steady:       l.Steady,
		Reflection:   l.Reflection,
	})
	if err != nil {
		return err
	}
	h.noise, err = convert.NewNoiseEstimator(len(c.Channels), perWindow(l.Window), l.Window)
	return err
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

// reading converts the channel signals acquired at t into a Reading: the
// conversion, loss detection, processing, uncertainty and quality. It
// carries state from reading to reading, so one goroutine at a time.
func (h *head) reading(t time.Time, signals []float64) mqtt.Reading {
	res := &h.res
	h.pyro.Convert(signals, res)
	flags := res.Flags
	var fractions [convert.MaxChannels]float64
	for i := range res.N {
		fractions[i] = res.Channels[i].Fraction
	}
	if !math.IsNaN(res.Temperature) {
		flags |= h.loss.Observe(t, res.Temperature, fractions[:res.N])
	}
	h.noise.Observe(t, signals)

	// A low signal makes a reading invalid when the last valid one may
	// stand in for it; otherwise it passes, flagged.
	valid := !math.IsNaN(res.Temperature) &&
		(flags&convert.LowSignal == 0 || h.cfg.Processing.HoldLastValid == 0)
	processed, held := h.proc.Step(t, res.Temperature, valid)
	if held {
		flags |= convert.Held
	}

	r := h.base(t)
	r.Ratio = finite(res.Ratio)
	r.EmissivityRatio = h.k
	r.RawTemperature = h.temperature(res.Temperature)
	r.Temperature = h.temperature(processed)
	for i := range r.Channels {
		c := res.Channels[i]
		r.Channels[i].Signal = finite(signals[i])
		r.Channels[i].SignalFraction = finite(c.Fraction)
		r.Channels[i].BrightnessTemperature = h.temperature(c.Brightness)
	}
	if len(h.pairs) > 0 {
		r.PairTemperatures = make([]mqtt.PairTemperature, res.NPairs)
		for i, p := range res.Pairs[:res.NPairs] {
			r.PairTemperatures[i] = mqtt.PairTemperature{Pair: h.pairs[i], Temperature: h.temperature(p.Temperature)}
		}
		r.Nongrey = finite(res.Nongrey)
	}
	if res.Fit.OK {
		r.FitTemperature = h.temperature(res.Fit.Temperature)
		r.FitResidual = finite(res.Fit.Residual)
		r.EmissivitySlope = finite(res.Fit.Slope)
	}
	r.Uncertainty = finite(h.uncertainty(res.Temperature))
	r.Flags = flags.AppendNames(r.Flags)
	r.Quality, r.StatusCode = conversionQuality(flags, res.Temperature, processed)
	return r
}

// uncertainty is the expanded uncertainty (k = 2) of the published pair's
// ratio temperature t, from the configured channel noise and correlation,
// or from both estimated over the loss window;
// NaN when the noise is not known yet or the fit is published (its
// uncertainty depends on the emissivity model, which glowgate cannot
// know).
func (h *head) uncertainty(t float64) float64 {
	u := h.cfg.Uncertainty
	pub := h.cfg.Publish
	if pub.Kind == "fit" || math.IsNaN(t) {
		return math.NaN()
	}
	var noise [2]float64
	r := u.Correlation
	if u.Noise != nil {
		noise = [2]float64{u.Noise[pub.I], u.Noise[pub.J]}
	} else {
		// Estimated noise comes with its estimated correlation.
		var ok1, ok2, ok3 bool
		noise[0], ok1 = h.noise.Relative(pub.I)
		noise[1], ok2 = h.noise.Relative(pub.J)
		r, ok3 = h.noise.Correlation(pub.I, pub.J)
		if !ok1 || !ok2 {
			return math.NaN()
		}
		if !ok3 {
			r = u.Correlation
		}
	}
	return convert.RatioUncertainty(h.models[pub.I], h.models[pub.J], t, convert.UncertaintyInputs{
		Noise:       noise,
		Correlation: r,
		KRel:        u.EmissivityRatio,
		Calibration: u.Calibration,
	})
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
