package daemon

import (
	"fmt"
	"io"
	"math"

	"glowgate/convert"
	"glowgate/daemon/config"
)

// ReadTunePoints reads a table of reference points for setting a head's
// emissivity ratio from r, named name in messages:
//
//	# comments and blank lines anywhere
//	reference_degC,short,long
//	1532,1203.5,2311.0
//
// The first column is reference_degC or reference_K, the reference
// temperature (a thermocouple dip, say); the other two are the signals of
// the head's channels, named as in the configuration, in either order.
// channels are the head's channel names, shorter wavelength first; the
// points come back with Short from channels[0]. References must be above
// absolute zero and signals positive. On any problem it returns
// TableErrors naming file, line and column.
func ReadTunePoints(name string, r io.Reader, channels []string) ([]convert.TunePoint, error) {
	t := readPointTable(name, r)
	if t.header == nil {
		if len(t.errs) == 0 {
			t.errorf(0, "", "no header (want reference_degC or reference_K, then the channels %s)", joinNames(channels))
		}
		return nil, t.errs
	}
	offset, _, ok := t.temperatureColumn("reference")
	if !ok || t.headerFailed() {
		return nil, t.errs
	}
	col := make([]int, len(channels))
	for i := range col {
		col[i] = -1
	}
	for i, h := range t.header[1:] {
		found := false
		for c, name := range channels {
			if h == name {
				col[c], found = i+1, true
			}
		}
		if !found && h != "" {
			t.errorf(t.headerLine, h, "no channel %q in this head (channels: %s)", h, joinNames(channels))
		}
	}
	for c, name := range channels {
		if col[c] < 0 {
			t.errorf(t.headerLine, "", "no column for channel %s (want %s, then %s)", name, t.header[0], joinNames(channels))
		}
	}
	if t.headerFailed() {
		return nil, t.errs
	}
	pts := make([]convert.TunePoint, 0, len(t.rows))
	for i, row := range t.rows {
		line := t.lines[i]
		p := convert.TunePoint{Reference: row[0] + offset, Short: row[col[0]], Long: row[col[1]]}
		if !(p.Reference > 0) {
			t.errorf(line, t.header[0], "%s is not above absolute zero", fmtNumber(row[0]))
		}
		for c, v := range []float64{p.Short, p.Long} {
			if !(v > 0) {
				t.errorf(line, channels[c], "signal %s must be positive", fmtNumber(v))
			}
		}
		pts = append(pts, p)
	}
	if len(t.errs) > 0 {
		t.sortErrors()
		return nil, t.errs
	}
	if len(pts) == 0 {
		t.errorf(t.headerLine, "", "no points after the header")
		return nil, t.errs
	}
	return pts, nil
}

func joinNames(names []string) string {
	switch len(names) {
	case 0:
		return "(none)"
	case 1:
		return names[0]
	}
	s := names[0]
	for _, n := range names[1 : len(names)-1] {
		s += ", " + n
	}
	return s + " and " + names[len(names)-1]
}

// TuneReport is the emissivity ratio found for a head from reference
// points, with what the head reads now.
type TuneReport struct {
	Head        string
	Short, Long string  // channel names, shorter wavelength first
	Configured  float64 // the head's emissivity ratio in the configuration
	// RangeMin and RangeMax are the head's measuring range, K.
	RangeMin, RangeMax float64
	Points             []convert.TunePoint
	Result             convert.TuneResult
	// Reads is the ratio temperature each point reads with the configured
	// emissivity ratio, K; NaN where there is none (outside the solver
	// bracket).
	Reads []float64
}

// TuneChannels returns the channel names of the named head, shorter
// wavelength first, and checks that the head is one whose emissivity
// ratio can be tuned: tuning sets emissivity_ratio, which applies to
// two-channel heads. A head with more channels is refused with a message
// that says so.
func TuneChannels(cfg *config.Config, headName string) ([]string, error) {
	h, ok := cfg.Head(headName)
	if !ok {
		return nil, fmt.Errorf("no head %q in %s", headName, cfg.File)
	}
	if n := len(h.Channels); n != 2 {
		return nil, fmt.Errorf("head %s has %d channels: emissivity-ratio tuning sets emissivity_ratio, which applies to two-channel heads (set emissivity: one value per channel for this head)", headName, n)
	}
	return []string{h.Channels[0].Name, h.Channels[1].Name}, nil
}

// TuneRatio finds the emissivity ratio k = ε_short/ε_long of the named
// two-channel head from points taken against a reference thermometer
// whose standard uncertainty is uRef kelvin (convert.TuneEmissivityRatio
// on the head's channel models), and what the head reads at each point
// with the configured ratio.
func TuneRatio(cfg *config.Config, headName string, points []convert.TunePoint, uRef float64) (*TuneReport, error) {
	names, err := TuneChannels(cfg, headName)
	if err != nil {
		return nil, err
	}
	h, _ := cfg.Head(headName)
	models := make([]convert.Model, 2)
	for i, ch := range h.Channels {
		m, err := channelModel(cfg, ch)
		if err != nil {
			return nil, fmt.Errorf("head %s channel %s: %w", headName, ch.Name, err)
		}
		models[i] = m
	}
	res, err := convert.TuneEmissivityRatio(models[0], models[1], points, uRef)
	if err != nil {
		return nil, fmt.Errorf("head %s: %w", headName, err)
	}
	rep := &TuneReport{
		Head: headName, Short: names[0], Long: names[1],
		Configured: h.EmissivityRatio, RangeMin: h.RangeMin, RangeMax: h.RangeMax,
		Points: points, Result: res,
		Reads: make([]float64, len(points)),
	}
	ratio, err := convert.NewRatio(models[0], models[1], h.EmissivityRatio, h.RangeMin, h.RangeMax, 0)
	for i, p := range points {
		rep.Reads[i] = math.NaN()
		if err == nil {
			rep.Reads[i] = ratio.Convert(p.Short, p.Long).Temperature
		}
	}
	return rep, nil
}
