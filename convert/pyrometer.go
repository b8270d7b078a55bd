package convert

import (
	"fmt"
	"math"
)

// SelectKind says which temperature a Pyrometer publishes.
type SelectKind uint8

// The kinds of published temperature.
const (
	// SelectPair publishes the ratio temperature of channels I < J. The
	// zero Selection (I = J = 0) stands for the default, the outer pair.
	SelectPair SelectKind = iota
	// SelectOuter publishes the ratio temperature of the outer pair: the
	// shortest and the longest wavelength, whose small equivalent
	// wavelength Λ = λ1λ2/(λ2 − λ1) makes it the least sensitive to an
	// error in the emissivity ratio and to noise.
	SelectOuter
	// SelectFit publishes the multi-colour fit's temperature.
	SelectFit
)

// Selection picks the published temperature.
type Selection struct {
	Kind SelectKind
	I, J int // channel indices, I < J, for SelectPair
}

// Options configure a Pyrometer.
type Options struct {
	Min, Max  float64 // measuring range, K: 0 < Min < Max < ∞
	LowSignal float64 // signal-fraction limit in [0, 1); 0 turns the check off

	// Emissivity is the relative emissivity e_i of each channel (len N,
	// each finite and > 0; nil for all 1). Pair (i, j) uses the emissivity
	// ratio k = e_i/e_j, and the fit divides it out before it fits its own
	// emissivity model.
	Emissivity []float64
	// Saturation is the signal of each channel at or above which it is
	// saturated (len N, each finite and ≥ 0; 0 or nil for none).
	Saturation []float64
	// Publish selects Result.Temperature: default (zero value) the outer
	// pair, which is (0, 1) for two channels.
	Publish Selection
	// NongreyLimit raises Nongrey when the spread of the pair
	// temperatures exceeds it, K (finite, ≥ 0; 0 never).
	NongreyLimit float64
	// FitTerms is the number of emissivity parameters of the fit:
	// 1 (grey, ln ε = a) or 2 (ln ε = a + b·λ). N channels allow at most
	// N − 1. 0 means the default, min(2, N − 1).
	FitTerms int
}

// Pyrometer converts the signals of a ratio or multi-colour pyrometer of
// two to eight channels, shortest wavelength first, to temperatures: the
// ratio temperature of every adjacent pair and of the outer pair, their
// spread as a non-grey index, and (for three or more channels, or when it
// is published) a multi-colour fit.
//
// The pair temperatures are those of Ratio: pair (i, j) solves
// S_i,bb(T)/S_j,bb(T) = (s_i/s_j)/k_ij, k_ij = e_i/e_j, on the exact
// models. A grey target gives every pair the same temperature; a spread
// above Options.NongreyLimit raises Nongrey.
//
// The multi-colour fit models the emissivity as a low-order function of
// wavelength, ln ε(λ) = Σ_k a_k φ_k(λ) with φ = (1) or (1, λ/µm) (Coates,
// Metrologia 17, 103, 1981; Khan, Allemand & Eagar, Rev. Sci. Instrum. 62,
// 392, 1991), and finds the T at which the residuals
//
//	ln s_i − ln e_i − ln S_i,bb(T) − Σ_k a_k φ_k(λ_i)
//
// are least in the least-squares sense (see fitData). N channels allow at
// most N − 1 emissivity parameters. An emissivity that is not of the
// assumed form biases the fitted temperature (by tens of kelvin for real
// targets), which the residual only partly reveals: the fit is an
// estimate to read with its residual, never the truth.
//
// A Pyrometer is immutable after NewPyrometer and safe for concurrent use.
type Pyrometer struct {
	models []Model
	eng    engine
	p      convParams
	ratios []Ratio // every pair i < j, in the order of pairIndex
}

// NewPyrometer returns the converter for the channel models (2 to
// MaxChannels, strictly increasing Wavelength) with options o. The solver
// bracket is [Min/2, 1.5·Max] kelvin.
//
// It returns an error naming the option or channel when a model is nil,
// the wavelengths do not strictly increase, an option is out of its domain
// (see Options), or a model's signal is not finite, positive and strictly
// increasing over the solver bracket, or the signal ratio of some pair
// i < j is not strictly increasing there.
func NewPyrometer(models []Model, o Options) (*Pyrometer, error) {
	n := len(models)
	if n < 2 || n > MaxChannels {
		return nil, fmt.Errorf("convert: pyrometer: %d channel models, need 2 to %d", n, MaxChannels)
	}
	lambda := make([]float64, n)
	for i, m := range models {
		if m == nil {
			return nil, fmt.Errorf("convert: pyrometer channel %d: model is nil", i)
		}
		lambda[i] = m.Wavelength()
		if !finite(lambda[i]) || !(lambda[i] > 0) {
			return nil, fmt.Errorf("convert: pyrometer channel %d: wavelength %g m, need finite and > 0", i, lambda[i])
		}
		if i > 0 && !(lambda[i] > lambda[i-1]) {
			return nil, fmt.Errorf("convert: pyrometer channel %d: wavelength %g m not above channel %d's %g m (order the channels shortest wavelength first)", i, lambda[i], i-1, lambda[i-1])
		}
	}
	if !finite(o.Min) || !finite(o.Max) || !(o.Min > 0) || !(o.Max > o.Min) {
		return nil, fmt.Errorf("convert: pyrometer measuring range [%g, %g] K: need 0 < min < max", o.Min, o.Max)
	}
	if !(o.LowSignal >= 0 && o.LowSignal < 1) {
		return nil, fmt.Errorf("convert: pyrometer low-signal limit %g: must be in [0, 1)", o.LowSignal)
	}
	p := convParams{min: o.Min, max: o.Max, low: o.LowSignal}
	e := make([]float64, n)
	switch len(o.Emissivity) {
	case 0:
		for i := range e {
			e[i] = 1
		}
	case n:
		for i, v := range o.Emissivity {
			if !finite(v) || !(v > 0) {
				return nil, fmt.Errorf("convert: pyrometer emissivity of channel %d: %g, need finite and > 0", i, v)
			}
			e[i] = v
		}
	default:
		return nil, fmt.Errorf("convert: pyrometer emissivity: %d values for %d channels", len(o.Emissivity), n)
	}
	for i, v := range e {
		p.lnE[i] = math.Log(v)
	}
	switch len(o.Saturation) {
	case 0:
	case n:
		for i, v := range o.Saturation {
			if !finite(v) || v < 0 {
				return nil, fmt.Errorf("convert: pyrometer saturation of channel %d: %g, need finite and ≥ 0 (0 for none)", i, v)
			}
			p.sat[i] = v
		}
	default:
		return nil, fmt.Errorf("convert: pyrometer saturation: %d values for %d channels", len(o.Saturation), n)
	}
	if !finite(o.NongreyLimit) || o.NongreyLimit < 0 {
		return nil, fmt.Errorf("convert: pyrometer non-grey limit %g K: need finite and ≥ 0 (0 for never)", o.NongreyLimit)
	}
	p.nongreyLimit = o.NongreyLimit
	terms := o.FitTerms
	if terms == 0 {
		terms = min(2, n-1)
	}
	if terms < 1 || terms > 2 || terms > n-1 {
		return nil, fmt.Errorf("convert: pyrometer fit terms %d: need 1 or 2, and at most N − 1 = %d for %d channels", o.FitTerms, n-1, n)
	}

	// Reported pairs: every adjacent pair, then the outer pair.
	if n == 2 {
		p.pairs[0] = pairSpec{0, 1}
		p.nPairs = 1
	} else {
		for i := range n - 1 {
			p.pairs[i] = pairSpec{i, i + 1}
		}
		p.pairs[n-1] = pairSpec{0, n - 1}
		p.nPairs = n
	}
	p.nSolve = p.nPairs
	outer := p.nPairs - 1
	switch sel := o.Publish; sel.Kind {
	case SelectOuter:
		p.pub = outer
	case SelectFit:
		p.pub = -1
	case SelectPair:
		if sel.I == 0 && sel.J == 0 {
			p.pub = outer
			break
		}
		if sel.I < 0 || sel.J <= sel.I || sel.J >= n {
			return nil, fmt.Errorf("convert: pyrometer published pair (%d, %d): need 0 ≤ I < J < %d", sel.I, sel.J, n)
		}
		p.pub = -1
		for k := range p.nPairs {
			if p.pairs[k] == (pairSpec{sel.I, sel.J}) {
				p.pub = k
			}
		}
		if p.pub < 0 {
			// Solved for publishing, not reported among the pairs.
			p.pairs[p.nSolve] = pairSpec{sel.I, sel.J}
			p.pub = p.nSolve
			p.nSolve++
		}
	default:
		return nil, fmt.Errorf("convert: pyrometer published selection kind %d: want SelectPair, SelectOuter or SelectFit", sel.Kind)
	}

	g, tabs, pairs, err := newTables(models, o.Min*BracketLowFactor, o.Max*BracketHighFactor, "pyrometer")
	if err != nil {
		return nil, err
	}
	py := &Pyrometer{models: append([]Model(nil), models...), eng: engine{grid: g, ch: tabs, pairs: pairs}}
	if n >= 3 || p.pub < 0 {
		um := make([]float64, n)
		for i := range um {
			um[i] = lambda[i] * 1e6
		}
		if p.fit, err = newFitData(g, tabs, um, terms); err != nil {
			return nil, err
		}
	}
	py.p = p
	for i := range n {
		for j := i + 1; j < n; j++ {
			py.ratios = append(py.ratios, Ratio{
				Short: models[i], Long: models[j], K: e[i] / e[j],
				Min: o.Min, Max: o.Max, LowSignal: o.LowSignal,
				Saturation: [2]float64{p.sat[i], p.sat[j]},
				eng:        engine{grid: g, ch: []*chanTable{tabs[i], tabs[j]}, pairs: []pairTable{pairs[pairIndex(i, j, n)]}},
				ready:      true,
			})
		}
	}
	return py, nil
}

// N returns the number of channels.
func (p *Pyrometer) N() int { return len(p.models) }

// Bracket returns the solver bracket [lo, hi] in kelvin.
func (p *Pyrometer) Bracket() (lo, hi float64) { return p.eng.grid.lo, p.eng.grid.hi }

// Pair returns a two-colour converter for channels i < j with this
// Pyrometer's settings: K = e_i/e_j, the measuring range, low-signal limit,
// the two channels' saturation levels and the solver bracket. It is a new
// copy on every call (sharing the immutable tables): changing it changes
// no result of p. It returns nil unless 0 ≤ i < j < N.
func (p *Pyrometer) Pair(i, j int) *Ratio {
	n := len(p.models)
	if i < 0 || j <= i || j >= n {
		return nil
	}
	r := p.ratios[pairIndex(i, j, n)]
	return &r
}

// pairIndex numbers the pairs i < j of n channels row by row:
// (0,1), (0,2), …, (0,n−1), (1,2), ….
func pairIndex(i, j, n int) int { return i*(2*n-i-1)/2 + j - i - 1 }

// Convert converts one reading, signals[i] for channel i in the units of
// its model, into out (every field is written; out may be reused).
//
// Per channel: a signal that is zero, negative, NaN or infinite raises
// NoSignal; one at or above its saturation level raises Saturated. Such a
// channel is unusable: every pair using it has no temperature, its
// brightness temperature and fraction are NaN, and the fit is not made
// (Fit NaN). A signals slice whose length is not N counts as no signal on
// every channel.
//
// Pairs: the ratio temperature of every adjacent pair and then the outer
// pair (see Ratio.Convert for the solver), NaN where a channel is unusable
// or the root lies beyond the solver bracket. Nongrey is the spread
// max − min of the finite pair temperatures (N ≥ 3 and at least two of
// them); above NongreyLimit (when > 0) it raises Nongrey.
//
// Fit: computed when N ≥ 3 or the fit is published and every channel is
// usable (see fitData for the method).
//
// Published: Temperature is the selected pair's or the fit's, with
// BelowRange or AboveRange as for Ratio.Convert (NaN beyond the solver
// bracket); Ratio is that pair's signal ratio (the outer pair's for the
// fit). Each usable channel's Fraction is s_i/S_i,bb(T) at the published
// T, and LowSignal is raised when a channel the published temperature
// rests on (the pair's two; all for the fit) falls below the limit.
// Brightness temperatures are per channel, as in Ratio.Convert.
//
// Convert does not allocate and never panics on data; it panics on a nil
// out or a Pyrometer not built by NewPyrometer.
func (p *Pyrometer) Convert(signals []float64, out *Result) {
	if p.eng.grid == nil {
		panic("convert: Pyrometer.Convert on a Pyrometer not built by NewPyrometer")
	}
	p.eng.convert(signals, &p.p, out)
}

// engine holds a converter's channel tables over its solver bracket.
type engine struct {
	grid  *lnGrid
	ch    []*chanTable
	pairs []pairTable // every pair i < j, in the order of pairIndex
}

// pairSpec names a pair of channels i < j.
type pairSpec struct{ i, j int }

// convParams are the settings of one conversion.
type convParams struct {
	min, max, low float64
	nongreyLimit  float64
	sat           [MaxChannels]float64 // saturation levels; ≤ 0 or NaN for none
	lnE           [MaxChannels]float64 // ln of the relative emissivities
	pairs         [MaxPairs + 1]pairSpec
	nPairs        int      // pairs reported in Result.Pairs
	nSolve        int      // pairs solved: nPairs, or one more published but not reported
	pub           int      // index in pairs of the published pair; −1 for the fit
	fit           *fitData // nil: no fit
}

// pairOutcome is one solved pair.
type pairOutcome struct {
	t     float64 // temperature, K
	k     int     // node interval that holds it
	flags Flags   // BelowRange or AboveRange beyond the solver bracket
}

// convert is the conversion shared by Ratio and Pyrometer.
func (e *engine) convert(signals []float64, p *convParams, out *Result) {
	nan := math.NaN()
	n := len(e.ch)
	// Field by field: a composite literal would be built and copied whole.
	out.Temperature, out.Ratio, out.N, out.Flags = nan, nan, n, 0
	out.NPairs, out.Nongrey = p.nPairs, nan
	out.Fit = FitResult{Temperature: nan, Slope: nan, Residual: nan}
	clear(out.Channels[n:])
	clear(out.Pairs[p.nPairs:])
	var lnS [MaxChannels]float64
	var usable uint
	lengthOK := len(signals) == n
	for i := range n {
		s := nan
		if lengthOK {
			s = signals[i]
		}
		out.Channels[i] = ChannelResult{Signal: s, Fraction: nan, Brightness: nan}
		out.lnS[i] = nan
		if !(s > 0) || math.IsInf(s, 1) {
			out.Flags |= NoSignal
			continue
		}
		if sat := p.sat[i]; sat > 0 && s >= sat {
			out.Flags |= Saturated
			continue
		}
		usable |= 1 << i
		lnS[i] = math.Log(s)
		out.lnS[i] = lnS[i]
		out.Channels[i].Brightness = e.grid.brightness(e.ch[i], lnS[i])
	}

	var po [MaxPairs + 1]pairOutcome
	lo, hi := math.Inf(1), math.Inf(-1)
	finitePairs := 0
	for k := range p.nSolve {
		ps := p.pairs[k]
		o := &po[k]
		o.t = nan
		if usable&(1<<ps.i) != 0 && usable&(1<<ps.j) != 0 {
			y := lnS[ps.i] - lnS[ps.j] - (p.lnE[ps.i] - p.lnE[ps.j])
			o.t, o.k, o.flags = e.solvePair(ps.i, ps.j, y)
		}
		if k < p.nPairs {
			out.Pairs[k] = PairResult{I: ps.i, J: ps.j, Temperature: o.t}
			if !math.IsNaN(o.t) {
				lo, hi = math.Min(lo, o.t), math.Max(hi, o.t)
				finitePairs++
			}
		}
	}
	if n >= 3 && finitePairs >= 2 {
		out.Nongrey = hi - lo
		if p.nongreyLimit > 0 && out.Nongrey > p.nongreyLimit {
			out.Flags |= Nongrey
		}
	}

	all := uint(1)<<n - 1
	var fitLn [MaxChannels]float64 // ln S_bb at the fit temperature
	var fitFlags Flags
	if p.fit != nil && usable == all {
		var y [MaxChannels]float64
		for i := range n {
			y[i] = lnS[i] - p.lnE[i]
		}
		out.Fit, fitLn, fitFlags = e.fit(p.fit, &y)
	}

	t := nan
	var rests uint // the channels the published temperature rests on
	var pub pairSpec
	if p.pub >= 0 {
		pub = p.pairs[p.pub]
		o := &po[p.pub]
		t = o.t
		out.Flags |= o.flags
		rests = 1<<pub.i | 1<<pub.j
	} else {
		pub = pairSpec{0, n - 1}
		if out.Fit.OK {
			t = out.Fit.Temperature
		}
		out.Flags |= fitFlags
		rests = all
	}
	if usable&(1<<pub.i) != 0 && usable&(1<<pub.j) != 0 {
		out.Ratio = out.Channels[pub.i].Signal / out.Channels[pub.j].Signal
	}
	if math.IsNaN(t) {
		return
	}
	out.Temperature = t
	if t < p.min*(1-rangeTol) {
		out.Flags |= BelowRange
	} else if t > p.max*(1+rangeTol) {
		out.Flags |= AboveRange
	}
	u := 1 / t
	for i := range n {
		if usable&(1<<i) == 0 {
			continue
		}
		var lnB float64
		if p.pub < 0 {
			lnB = fitLn[i]
		} else {
			lnB = e.grid.lnSignalAt(e.ch[i], po[p.pub].k, u)
		}
		f := math.Exp(lnS[i] - lnB)
		out.Channels[i].Fraction = f
		if rests&(1<<i) != 0 && f < p.low {
			out.Flags |= LowSignal
		}
	}
}

// Sensitivity returns ∂ln(S_i,bb/S_j,bb)/∂T at t, per kelvin: how fast the
// log ratio of channels i and j changes with temperature (PHYSICS.md:
// ∂lnR/∂T = ∂lnS_i/∂T − ∂lnS_j/∂T). It comes from the checked tables
// (or the models where a table is not certified); NaN for t outside the
// solver bracket or bad indices.
func (p *Pyrometer) Sensitivity(i, j int, t float64) float64 {
	n := len(p.models)
	g := p.eng.grid
	if i < 0 || j < 0 || i >= n || j >= n || !(t >= g.lo && t <= g.hi) {
		return math.NaN()
	}
	u := 1 / t
	k := searchDesc(g.u, u)
	// d/dT = −(1/T²)·d/du
	return -(g.dlnSignalDu(p.eng.ch[i], k, u) - g.dlnSignalDu(p.eng.ch[j], k, u)) * u * u
}
