package convert

import (
	"errors"
	"math"
	"time"
)

// ChainConfig configures a Chain: the whole conversion of one head.
type ChainConfig struct {
	Models      []Model // 2 to MaxChannels, short wavelength first
	Options     Options
	Process     ProcessConfig
	Loss        LossConfig
	Uncertainty UncertaintyConfig
}

// UncertaintyConfig holds a head's uncertainty inputs (JCGM 100:2008).
type UncertaintyConfig struct {
	// Noise is the relative standard uncertainty of each channel's
	// signal; nil estimates it, and the channels' correlation with it,
	// from successive differences over the loss window.
	Noise       []float64
	Correlation float64 // r of the configured Noise, −1..1
	KRel        float64 // relative standard uncertainty of the emissivity ratio
	Calibration float64 // standard uncertainty of the calibration, K
}

// Measurement is what a Chain makes of one acquisition.
type Measurement struct {
	Result              // the conversion; Temperature is the raw (published) temperature
	Processed   float64 // after processing, K; NaN when there is none
	Uncertainty float64 // expanded uncertainty (coverage factor 2) of Temperature, K; NaN when unknown
	// Flags (promoted from Result) add the loss verdicts (Obstructed,
	// SelectiveLoss, ReflectionSuspected) and Held to the conversion's.
}

// Chain is one head's conversion from channel signals to a processed,
// graded temperature, in this order:
//
//	Pyrometer.Convert   ratio (or fit) temperature, pairs, fractions, flags
//	Loss.Observe        neutral or selective loss, reflection (valid readings only)
//	NoiseEstimator      relative channel noise, when not configured
//	Processor.Step      average, filter, hold; hold-last-valid
//	uncertainty         GUM, of the published pair's temperature
//
// A reading is invalid for processing when it has no temperature, or when
// it has a low signal and hold-last-valid is on (the last valid value
// stands in for it, flagged Held). The uncertainty is NaN for a published
// fit: it rests on the emissivity model, which cannot be known here.
//
// A Chain keeps state from reading to reading: one goroutine at a time.
type Chain struct {
	p       *Pyrometer
	proc    *Processor
	loss    *Loss
	noise   *NoiseEstimator
	u       UncertaintyConfig
	i, j    int  // the published pair; i < 0 for the fit
	holdLow bool // a low signal makes a reading invalid
}

// NewChain builds a head's chain; the noise estimator shares the loss
// window and its capacity.
func NewChain(c ChainConfig) (*Chain, error) {
	p, err := NewPyrometer(c.Models, c.Options)
	if err != nil {
		return nil, err
	}
	proc, err := NewProcessor(c.Process)
	if err != nil {
		return nil, err
	}
	loss, err := NewLoss(c.Loss)
	if err != nil {
		return nil, err
	}
	n := len(c.Models)
	noise, err := NewNoiseEstimator(n, max(c.Loss.MaxSamples, 2), c.Loss.Window)
	if err != nil {
		return nil, err
	}
	u := c.Uncertainty
	if u.Noise != nil && len(u.Noise) != n {
		return nil, errors.New("convert: chain: uncertainty noise needs one value per channel")
	}
	ch := &Chain{p: p, proc: proc, loss: loss, noise: noise, u: u, holdLow: c.Process.HoldLastValid > 0}
	switch sel := c.Options.Publish; sel.Kind {
	case SelectFit:
		ch.i, ch.j = -1, -1
	case SelectPair:
		if sel.I != sel.J {
			ch.i, ch.j = sel.I, sel.J
			break
		}
		fallthrough
	default:
		ch.i, ch.j = 0, n-1
	}
	return ch, nil
}

// Pyrometer returns the chain's converter.
func (c *Chain) Pyrometer() *Pyrometer { return c.p }

// Step converts the signals acquired at t into m. It does not allocate
// and never panics on data.
func (c *Chain) Step(t time.Time, signals []float64, m *Measurement) {
	c.p.Convert(signals, &m.Result)
	if !math.IsNaN(m.Temperature) {
		var f [MaxChannels]float64
		for i := range m.N {
			f[i] = m.Channels[i].Fraction
		}
		m.Flags |= c.loss.Observe(t, m.Temperature, f[:m.N])
	}
	c.noise.observeLn(t, m.lnS[:m.N])
	valid := !math.IsNaN(m.Temperature) && (m.Flags&LowSignal == 0 || !c.holdLow)
	var held bool
	m.Processed, held = c.proc.Step(t, m.Temperature, valid)
	if held {
		m.Flags |= Held
	}
	m.Uncertainty = c.uncertainty(m.Temperature)
}

// uncertainty of the published pair's temperature t.
func (c *Chain) uncertainty(t float64) float64 {
	if c.i < 0 || math.IsNaN(t) {
		return math.NaN()
	}
	in := UncertaintyInputs{Correlation: c.u.Correlation, KRel: c.u.KRel, Calibration: c.u.Calibration}
	if c.u.Noise != nil {
		in.Noise = [2]float64{c.u.Noise[c.i], c.u.Noise[c.j]}
	} else {
		var ok1, ok2 bool
		in.Noise[0], ok1 = c.noise.Relative(c.i)
		in.Noise[1], ok2 = c.noise.Relative(c.j)
		if !ok1 || !ok2 {
			return math.NaN()
		}
		if r, ok := c.noise.Correlation(c.i, c.j); ok {
			in.Correlation = r
		}
	}
	return ExpandedUncertainty(c.p.Sensitivity(c.i, c.j, t), in)
}
