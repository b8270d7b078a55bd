package config

import (
	"bufio"
	"bytes"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"time"

	"gopkg.in/yaml.v3"

	"glowgate/convert"
)

// Defaults of the radiometry settings of a head.
const (
	defaultNongreyLimit = 10.0 // K
	defaultFitTerms     = 2
	maxChannels         = 8

	defaultLossWindow       = 10 * time.Second
	defaultLossDrop         = 0.30
	defaultLossSignificance = 0.01
	defaultLossSteady       = 2.0 // K
	defaultLossReflection   = 1.20

	defaultCalibrationTolerance = 0.05 // K

	// maxTableFile bounds a responsivity or calibration CSV file.
	maxTableFile = 1 << 20
)

// Publish says which temperature of a head is published as its
// temperature.
type Publish struct {
	Kind string // "pair", "outer" or "fit"
	I, J int    // channel indices of a pair, I < J
}

// Processing is a head's signal processing, applied to the ratio
// temperature in this order: moving average, first-order filter, peak or
// valley hold; hold-last-valid substitutes while the reading is invalid.
type Processing struct {
	Average       time.Duration // moving-average window (0: off)
	T90           time.Duration // response time t90 of a first-order filter (0: off)
	Hold          string        // "none", "peak" or "valley"
	Decay         float64       // K/s: a held value moves back toward the input at this rate (0: none)
	Reset         time.Duration // a held value resets to the input after this long (0: never)
	HoldLastValid time.Duration // how long the last valid value stands in for invalid readings (0: off)
}

// Loss configures the rolling-window detection of sight-path losses.
type Loss struct {
	Window       time.Duration
	Drop         float64 // relative fall of the signal fraction that counts as a loss
	Significance float64 // p-value threshold of the slope of T on ln f
	Steady       float64 // K: a temperature change below this over the window is steady
	Reflection   float64 // signal fraction above which reflection is suspected
}

// Uncertainty holds the inputs of a head's GUM uncertainty budget.
type Uncertainty struct {
	Noise           []float64 // relative standard uncertainty per channel; nil: estimated from the signals
	Correlation     float64   // correlation of the channels' noise, -1..1
	EmissivityRatio float64   // relative standard uncertainty of the emissivity ratio
	Calibration     float64   // standard uncertainty of the calibration, K
}

// Responsivity is a tabulated relative spectral responsivity: linear
// between the points, zero outside.
type Responsivity struct {
	Wavelengths []float64 // m, increasing
	Values      []float64 // relative, >= 0
	File        string    // the CSV file it came from, when any
}

// Calibration is a table of blackbody points from a certificate, fitted to
// a Sakuma–Hattori curve when the configuration is loaded.
type Calibration struct {
	Temperatures []float64 // K, increasing
	Signals      []float64
	Tolerance    float64 // K: the largest fit residual accepted
	File         string  // the CSV file it came from, when any
}

// radiometry decodes the head settings of the deeper radiometry; it runs
// after the head's channels are decoded.
func (d *decoder) radiometry(f *fields, h *Head) {
	n := len(h.Channels)
	h.Emissivity = make([]float64, n)
	for i := range h.Emissivity {
		h.Emissivity[i] = 1
	}
	h.Publish = Publish{Kind: "pair", I: 0, J: 1}
	if n > 2 {
		h.Publish = Publish{Kind: "outer", I: 0, J: n - 1}
	}
	h.NongreyLimit = defaultNongreyLimit
	h.FitTerms = min(defaultFitTerms, max(n-1, 1))
	h.Processing = Processing{Hold: "none"}
	h.Loss = Loss{
		Window:       defaultLossWindow,
		Drop:         defaultLossDrop,
		Significance: defaultLossSignificance,
		Steady:       defaultLossSteady,
		Reflection:   defaultLossReflection,
	}
	channelsOK := !d.failed[join(f.v.path, "channels")]

	ratio, eps := f.get("emissivity_ratio"), f.get("emissivity")
	switch {
	case ratio.n != nil && eps.n != nil:
		d.errorf(eps, "give emissivity_ratio (two channels) or emissivity (one per channel), not both")
	case ratio.n != nil:
		if x, ok := d.number(ratio); ok {
			switch {
			case x <= 0:
				d.errorf(ratio, "must be positive")
			case channelsOK && n != 2:
				d.errorf(ratio, "applies to two channels; this head has %d (give emissivity: one value per channel)", n)
			default:
				h.EmissivityRatio = x
				if n == 2 {
					h.Emissivity[0] = x
				}
			}
		}
	case eps.n != nil:
		items := d.list(eps)
		vals := make([]float64, 0, len(items))
		for _, it := range items {
			if x, ok := d.number(it); ok {
				if x <= 0 {
					d.errorf(it, "must be positive")
				}
				vals = append(vals, x)
			}
		}
		if channelsOK && eps.n.Kind == yaml.SequenceNode && len(items) != n {
			d.errorf(eps, "has %d values for %d channels", len(items), n)
		} else if !d.failed[eps.path] && len(vals) == n && n > 0 {
			h.Emissivity = vals
			h.EmissivityRatio = vals[0] / vals[n-1]
		}
	}

	if v := f.get("publish"); v.n != nil && channelsOK {
		if s, ok := d.str(v); ok {
			d.publish(v, s, h)
		}
	}
	if v := f.get("nongrey_limit"); v.n != nil {
		if x, ok := d.temperatureDifference(v); ok {
			if x <= 0 {
				d.errorf(v, "must be positive")
			} else {
				h.NongreyLimit = x
			}
		}
	}
	if v := f.get("fit_terms"); v.n != nil {
		if x, ok := d.integer(v, 1, 2); ok {
			if channelsOK && int(x) > n-1 {
				d.errorf(v, "%d emissivity terms need at least %d channels (N channels allow at most N-1)", x, x+1)
			} else {
				h.FitTerms = int(x)
			}
		}
	}
	if h.Publish.Kind == "fit" && n < 3 && channelsOK && !d.failed[join(f.v.path, "publish")] {
		d.errorf(f.get("publish"), "the multi-colour fit needs at least 3 channels")
	}
	d.processing(f.get("processing"), &h.Processing)
	d.loss(f.get("loss"), &h.Loss)
	d.uncertainty(f.get("uncertainty"), n, channelsOK, &h.Uncertainty)
}

// publish decodes "outer", "fit" or a pair of channel names "a/b".
func (d *decoder) publish(v val, s string, h *Head) {
	switch s {
	case "outer":
		h.Publish = Publish{Kind: "outer", I: 0, J: len(h.Channels) - 1}
		return
	case "fit":
		h.Publish = Publish{Kind: "fit", I: 0, J: len(h.Channels) - 1}
		return
	}
	a, b, ok := strings.Cut(s, "/")
	if !ok {
		d.errorf(v, "unknown choice %q (want outer, fit, or two channel names such as short/long)", s)
		return
	}
	i, j := channelIndex(h.Channels, a), channelIndex(h.Channels, b)
	switch {
	case i < 0:
		d.errorf(v, "no channel %q in this head", a)
	case j < 0:
		d.errorf(v, "no channel %q in this head", b)
	case i >= j:
		d.errorf(v, "name the shorter-wavelength channel first (%s/%s)", b, a)
	default:
		h.Publish = Publish{Kind: "pair", I: i, J: j}
	}
}

func channelIndex(chs []Channel, name string) int {
	for i, ch := range chs {
		if ch.Name == name {
			return i
		}
	}
	return -1
}

func (d *decoder) processing(v val, p *Processing) {
	if v.n == nil {
		return
	}
	f := d.fields(v, "average", "t90", "hold", "decay", "reset", "hold_last_valid")
	for key, dst := range map[string]*time.Duration{
		"average": &p.Average, "t90": &p.T90, "reset": &p.Reset, "hold_last_valid": &p.HoldLastValid,
	} {
		if v := f.get(key); v.n != nil {
			if x, ok := d.positiveDuration(v); ok {
				*dst = x
			}
		}
	}
	if v := f.get("hold"); v.n != nil {
		if s, ok := d.choice(v, "hold", "none", "peak", "valley"); ok {
			p.Hold = s
		}
	}
	if v := f.get("decay"); v.n != nil {
		if x, ok := d.rate(v); ok {
			if x < 0 {
				d.errorf(v, "must not be negative")
			} else {
				p.Decay = x
			}
		}
	}
	if p.Hold == "none" && (p.Decay != 0 || p.Reset != 0) && !d.failed[v.path] {
		d.errorf(v, "decay and reset go with hold: peak or hold: valley")
	}
}

func (d *decoder) loss(v val, l *Loss) {
	if v.n == nil {
		return
	}
	f := d.fields(v, "window", "drop", "significance", "steady", "reflection")
	if v := f.get("window"); v.n != nil {
		if x, ok := d.positiveDuration(v); ok {
			l.Window = x
		}
	}
	if v := f.get("drop"); v.n != nil {
		if x, ok := d.fraction(v); ok {
			if x <= 0 || x >= 1 {
				d.errorf(v, "must be above 0 and below 100%%")
			} else {
				l.Drop = x
			}
		}
	}
	if v := f.get("significance"); v.n != nil {
		if x, ok := d.number(v); ok {
			if x <= 0 || x >= 1 {
				d.errorf(v, "must be a p-value above 0 and below 1, such as 0.01")
			} else {
				l.Significance = x
			}
		}
	}
	if v := f.get("steady"); v.n != nil {
		if x, ok := d.temperatureDifference(v); ok {
			if x <= 0 {
				d.errorf(v, "must be positive")
			} else {
				l.Steady = x
			}
		}
	}
	if v := f.get("reflection"); v.n != nil {
		x, ok := d.quantity(v, &fractionKind, parsePercent)
		if ok {
			if x <= 1 {
				d.errorf(v, "must be above 100%% (a signal fraction above 1 is what reflection looks like)")
			} else {
				l.Reflection = x
			}
		}
	}
}

// parsePercent parses a percentage that may exceed 100 % ("120%").
func parsePercent(s string) (float64, error) {
	num, ok := strings.CutSuffix(strings.TrimSpace(s), "%")
	if !ok {
		return ParseFraction(s)
	}
	x, err := strconv.ParseFloat(strings.TrimSpace(num), 64)
	if err != nil || x != x {
		return 0, fmt.Errorf("bad number %q (want a percentage such as 120%%)", num)
	}
	return x / 100, nil
}

func (d *decoder) uncertainty(v val, n int, channelsOK bool, u *Uncertainty) {
	if v.n == nil {
		return
	}
	f := d.fields(v, "noise", "correlation", "emissivity_ratio", "calibration")
	if nv := f.get("noise"); nv.n != nil {
		if nv.n.Kind == yaml.ScalarNode && nv.n.Value == "estimate" {
			u.Noise = nil
		} else {
			items := d.list(nv)
			noise := make([]float64, 0, len(items))
			for _, it := range items {
				if x, ok := d.fraction(it); ok {
					if x < 0 || x >= 1 {
						d.errorf(it, "must be from 0 to below 100%%")
					}
					noise = append(noise, x)
				}
			}
			if channelsOK && nv.n.Kind == yaml.SequenceNode && len(items) != n {
				d.errorf(nv, "has %d values for %d channels (or write estimate)", len(items), n)
			} else if !d.failed[nv.path] {
				u.Noise = noise
			}
		}
	}
	if v := f.get("correlation"); v.n != nil {
		if x, ok := d.number(v); ok {
			if x < -1 || x > 1 {
				d.errorf(v, "must be from -1 to 1")
			} else {
				u.Correlation = x
			}
		}
	}
	if v := f.get("emissivity_ratio"); v.n != nil {
		if x, ok := d.fraction(v); ok {
			if x < 0 || x >= 1 {
				d.errorf(v, "must be from 0 to below 100%%")
			} else {
				u.EmissivityRatio = x
			}
		}
	}
	if v := f.get("calibration"); v.n != nil {
		if x, ok := d.temperatureDifference(v); ok {
			if x < 0 {
				d.errorf(v, "must not be negative")
			} else {
				u.Calibration = x
			}
		}
	}
}

// responsivity decodes a tabulated responsivity: an inline table of
// [wavelength, value] rows or a CSV file.
func (d *decoder) responsivity(v val) *Responsivity {
	f := d.fields(v, "table", "file")
	r := &Responsivity{}
	table, file := f.get("table"), f.get("file")
	switch {
	case table.n != nil && file.n != nil:
		d.errorf(v, "give table or file, not both")
	case table.n != nil:
		for _, row := range d.list(table) {
			cells := d.list(row)
			if len(cells) != 2 {
				if !d.failed[row.path] {
					d.errorf(row, "want [wavelength, responsivity], such as [0.9um, 1.0]")
				}
				continue
			}
			l, okL := d.wavelength(cells[0])
			x, okX := d.number(cells[1])
			if okL && okX {
				r.Wavelengths = append(r.Wavelengths, l)
				r.Values = append(r.Values, x)
			}
		}
	case file.n != nil:
		if s, ok := d.str(file); ok {
			r.File = s
			rows, err := d.readTable(s, []string{"wavelength_um", "wavelength_nm"}, "responsivity")
			if err != nil {
				d.errorf(file, "%v", err)
				return r
			}
			for _, row := range rows {
				scale := 1e-6
				if row.key == "wavelength_nm" {
					scale = 1e-9
				}
				r.Wavelengths = append(r.Wavelengths, row.x*scale)
				r.Values = append(r.Values, row.y)
			}
		}
	case f.ok:
		d.errorf(v, "needs table or file")
		return r
	}
	if d.failed[v.path] {
		return r
	}
	if err := checkResponsivity(r.Wavelengths, r.Values); err != nil {
		d.errorf(v, "%v", err)
	}
	return r
}

func checkResponsivity(l, r []float64) error {
	if len(l) < 2 {
		return fmt.Errorf("want at least 2 points, have %d", len(l))
	}
	positive := false
	for i := range l {
		if i > 0 && l[i] <= l[i-1] {
			return fmt.Errorf("wavelengths must increase (point %d: %s after %s)", i+1, fmtLength(l[i]), fmtLength(l[i-1]))
		}
		if r[i] < 0 || r[i] != r[i] {
			return fmt.Errorf("point %d: responsivity %s must not be negative", i+1, fmtNum(r[i]))
		}
		if l[i] < minWavelength || l[i] > maxWavelength {
			return fmt.Errorf("point %d: %s is outside %s..%s", i+1, fmtLength(l[i]), fmtLength(minWavelength), fmtLength(maxWavelength))
		}
		positive = positive || r[i] > 0
	}
	if !positive {
		return fmt.Errorf("responsivity is zero everywhere")
	}
	return nil
}

// calibration decodes a table of blackbody points: inline
// [temperature, signal] rows or a CSV file, with the fit tolerance.
func (d *decoder) calibration(v val) *Calibration {
	f := d.fields(v, "points", "file", "tolerance")
	c := &Calibration{Tolerance: defaultCalibrationTolerance}
	if tv := f.get("tolerance"); tv.n != nil {
		if x, ok := d.temperatureDifference(tv); ok {
			if x <= 0 {
				d.errorf(tv, "must be positive")
			} else {
				c.Tolerance = x
			}
		}
	}
	points, file := f.get("points"), f.get("file")
	switch {
	case points.n != nil && file.n != nil:
		d.errorf(v, "give points or file, not both")
	case points.n != nil:
		for _, row := range d.list(points) {
			cells := d.list(row)
			if len(cells) != 2 {
				if !d.failed[row.path] {
					d.errorf(row, "want [temperature, signal], such as [1000degC, 5230.5]")
				}
				continue
			}
			t, okT := d.temperature(cells[0])
			s, okS := d.number(cells[1])
			if okT && okS {
				c.Temperatures = append(c.Temperatures, t)
				c.Signals = append(c.Signals, s)
			}
		}
	case file.n != nil:
		if s, ok := d.str(file); ok {
			c.File = s
			rows, err := d.readTable(s, []string{"temperature_degC", "temperature_K"}, "signal")
			if err != nil {
				d.errorf(file, "%v", err)
				return c
			}
			for _, row := range rows {
				t := row.x
				if row.key == "temperature_degC" {
					t += 273.15
				}
				c.Temperatures = append(c.Temperatures, t)
				c.Signals = append(c.Signals, row.y)
			}
		}
	case f.ok:
		d.errorf(v, "needs points or file")
	}
	return c
}

// tableRow is one row of a two-column CSV table.
type tableRow struct {
	key  string // the first column's header
	x, y float64
}

// readTable reads a two-column CSV file named relative to the
// configuration's directory: a header whose first column is one of keys
// and whose second is value, then numbers. Lines starting with # and
// blank lines are skipped. Errors name the file and line.
func (d *decoder) readTable(name string, keys []string, value string) ([]tableRow, error) {
	path := name
	if !filepath.IsAbs(path) {
		path = filepath.Join(filepath.Dir(d.file), name)
	}
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("read table: %w", err)
	}
	if len(data) > maxTableFile {
		return nil, fmt.Errorf("%s: larger than %d KiB", path, maxTableFile>>10)
	}
	return parseTable(path, data, keys, value)
}

// parseTable parses the two-column table format of readTable.
func parseTable(path string, data []byte, keys []string, value string) ([]tableRow, error) {
	sc := bufio.NewScanner(bytes.NewReader(data))
	var rows []tableRow
	key := ""
	for line := 1; sc.Scan(); line++ {
		text := strings.TrimSpace(sc.Text())
		if text == "" || strings.HasPrefix(text, "#") {
			continue
		}
		cells := strings.Split(text, ",")
		for i := range cells {
			cells[i] = strings.TrimSpace(cells[i])
		}
		if key == "" {
			if len(cells) != 2 || !slices.Contains(keys, cells[0]) || cells[1] != value {
				return nil, fmt.Errorf("%s:%d: header %q: want %s,%s", path, line, text, strings.Join(keys, " or "), value)
			}
			key = cells[0]
			continue
		}
		if len(cells) != 2 {
			return nil, fmt.Errorf("%s:%d: want 2 columns, have %d", path, line, len(cells))
		}
		var row tableRow
		row.key = key
		var err error
		if row.x, err = strconv.ParseFloat(cells[0], 64); err != nil || row.x != row.x {
			return nil, fmt.Errorf("%s:%d: %s %q is not a number", path, line, key, cells[0])
		}
		if row.y, err = strconv.ParseFloat(cells[1], 64); err != nil || row.y != row.y {
			return nil, fmt.Errorf("%s:%d: %s %q is not a number", path, line, value, cells[1])
		}
		rows = append(rows, row)
	}
	if err := sc.Err(); err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	if key == "" {
		return nil, fmt.Errorf("%s: no header (want %s,%s)", path, strings.Join(keys, " or "), value)
	}
	return rows, nil
}

func (d *decoder) temperatureDifference(v val) (float64, bool) {
	return d.quantity(v, &temperatureDifferenceKind, ParseTemperatureDifference)
}

func (d *decoder) rate(v val) (float64, bool) {
	return d.quantity(v, &rateKind, ParseRate)
}

// fitCalibration fits a Sakuma–Hattori curve to a calibration table, with
// the configuration's c2, and refuses a table whose largest temperature
// residual exceeds its tolerance.
func (d *decoder) fitCalibration(v val, c *Calibration) *SakumaHattori {
	if len(c.Temperatures) < 3 {
		d.errorf(v, "want at least 3 points to fit a Sakuma–Hattori curve, have %d", len(c.Temperatures))
		return nil
	}
	fit, residuals, err := convert.FitSakumaHattoriPoints(c.Temperatures, c.Signals, d.c2)
	if err != nil {
		d.errorf(v, "%v", err)
		return nil
	}
	worst, at := 0.0, 0
	for i, r := range residuals {
		if math.Abs(r) > math.Abs(worst) {
			worst, at = r, i
		}
	}
	if math.Abs(worst) > c.Tolerance {
		d.errorf(v, "the Sakuma–Hattori fit misses the point at %s by %sK, more than the tolerance %sK",
			fmtTemperature(c.Temperatures[at]), fmtNum(math.Round(worst*1000)/1000), fmtNum(c.Tolerance))
		return nil
	}
	return &SakumaHattori{A: fit.A, B: fit.B, C: fit.C}
}
