package daemon

import (
	"bufio"
	"bytes"
	"fmt"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"

	"glowgate/convert"
	"glowgate/daemon/config"
)

// TableError is one problem in a table of points (a CSV file): where it
// is and what is wrong.
type TableError struct {
	File   string // the name the table was read under, as given
	Line   int    // 1-based line; 0 when the problem concerns the whole file
	Column string // header name of the column concerned; empty when none
	Msg    string
}

// Error formats the problem as "FILE:LINE: column NAME: MSG", leaving out
// the line when it is 0 and the column when it is empty.
func (e *TableError) Error() string {
	var b strings.Builder
	b.WriteString(e.File)
	if e.Line > 0 {
		b.WriteByte(':')
		b.WriteString(strconv.Itoa(e.Line))
	}
	b.WriteString(": ")
	if e.Column != "" {
		b.WriteString("column ")
		b.WriteString(e.Column)
		b.WriteString(": ")
	}
	b.WriteString(e.Msg)
	return b.String()
}

// TableErrors is every problem found in one table, in file order.
type TableErrors []*TableError

// Error joins the problems, one per line.
func (es TableErrors) Error() string {
	lines := make([]string, len(es))
	for i, e := range es {
		lines[i] = e.Error()
	}
	return strings.Join(lines, "\n")
}

// Limits of the point tables: calibration and tuning files hold tens of
// rows.
const (
	maxTableBytes  = 4 << 20
	maxTableErrors = 20
)

// pointTable is a parsed CSV file of numbers under a header of names.
type pointTable struct {
	file       string
	headerLine int
	header     []string
	rows       [][]float64
	lines      []int // file line of each row
	errs       TableErrors
}

func (t *pointTable) errorf(line int, column, format string, args ...any) {
	if len(t.errs) == maxTableErrors {
		t.errs = append(t.errs, &TableError{File: t.file, Line: line, Msg: "too many errors"})
	}
	if len(t.errs) > maxTableErrors {
		return
	}
	t.errs = append(t.errs, &TableError{File: t.file, Line: line, Column: column, Msg: fmt.Sprintf(format, args...)})
}

// readPointTable reads the common table format: comma-separated values,
// lines starting with # (after spaces) and blank lines skipped, the first
// other line a header of column names, every further line one number per
// column. Numbers are decimals ("1532.5", "-2", "1.2e3"); NaN, infinities
// and hexadecimal are refused. A UTF-8 byte-order mark and CRLF line ends
// are accepted. Problems are collected in t.errs.
func readPointTable(name string, r io.Reader) *pointTable {
	t := &pointTable{file: name}
	data, err := io.ReadAll(io.LimitReader(r, maxTableBytes+1))
	if err != nil {
		t.errorf(0, "", "read: %v", err)
		return t
	}
	if len(data) > maxTableBytes {
		t.errorf(0, "", "larger than %d MiB", maxTableBytes>>20)
		return t
	}
	data = bytes.TrimPrefix(data, []byte("\xef\xbb\xbf"))
	sc := bufio.NewScanner(bytes.NewReader(data))
	sc.Buffer(make([]byte, 0, 4096), maxTableBytes)
	for line := 1; sc.Scan(); line++ {
		text := strings.TrimSpace(sc.Text())
		if text == "" || strings.HasPrefix(text, "#") {
			continue
		}
		cells := strings.Split(text, ",")
		for i := range cells {
			cells[i] = strings.TrimSpace(cells[i])
		}
		if t.header == nil {
			t.headerLine = line
			t.header = cells
			seen := map[string]bool{}
			for i, c := range cells {
				switch {
				case c == "":
					t.errorf(line, "", "header: column %d has no name", i+1)
				case seen[c]:
					t.errorf(line, c, "named twice in the header")
				}
				seen[c] = true
			}
			continue
		}
		if len(cells) != len(t.header) {
			t.errorf(line, "", "%d values, the header at line %d names %d columns", len(cells), t.headerLine, len(t.header))
			continue
		}
		row := make([]float64, len(cells))
		ok := true
		for i, c := range cells {
			v, err := parseDecimal(c)
			if err != nil {
				t.errorf(line, t.header[i], "%v", err)
				ok = false
			}
			row[i] = v
		}
		if ok {
			t.rows = append(t.rows, row)
			t.lines = append(t.lines, line)
		}
	}
	if err := sc.Err(); err != nil {
		t.errorf(0, "", "read: %v", err)
	}
	return t
}

// headerFailed reports whether a problem was found at or before the
// header line.
func (t *pointTable) headerFailed() bool {
	for _, e := range t.errs {
		if e.Line <= t.headerLine {
			return true
		}
	}
	return false
}

// sortErrors puts the problems in line order, keeping a final "too many
// errors" last.
func (t *pointTable) sortErrors() {
	n := len(t.errs)
	if n > maxTableErrors {
		n = maxTableErrors
	}
	sort.SliceStable(t.errs[:n], func(a, b int) bool { return t.errs[a].Line < t.errs[b].Line })
}

// parseDecimal parses a finite decimal number.
func parseDecimal(s string) (float64, error) {
	if s == "" {
		return 0, fmt.Errorf("missing value")
	}
	for _, c := range s {
		if !(c >= '0' && c <= '9' || c == '.' || c == '-' || c == '+' || c == 'e' || c == 'E') {
			return 0, fmt.Errorf("%q is not a number", s)
		}
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, fmt.Errorf("%q is not a finite number", s)
	}
	return v, nil
}

// temperatureColumn checks that the header's first column is prefix
// followed by _degC or _K, and returns the offset that turns its values
// into kelvin (273.15 or 0) and the unit.
func (t *pointTable) temperatureColumn(prefix string) (offset float64, unit string, ok bool) {
	if t.header == nil {
		return 0, "", false
	}
	switch t.header[0] {
	case prefix + "_degC":
		return 273.15, "degC", true
	case prefix + "_K":
		return 0, "K", true
	}
	if _, err := parseDecimal(t.header[0]); err == nil {
		t.errorf(t.headerLine, "", "missing header: line %d holds numbers (want %s_degC or %s_K, then one column per channel)", t.headerLine, prefix, prefix)
		return 0, "", false
	}
	t.errorf(t.headerLine, t.header[0], "unknown first column (want %s_degC or %s_K, then one column per channel)", prefix, prefix)
	return 0, "", false
}

// CalibrationPoints is a table of blackbody calibration points: for each
// point, the blackbody temperature and the signal of every channel.
type CalibrationPoints struct {
	File         string
	Unit         string      // "degC" or "K": the unit of the file's temperature column
	HeaderLine   int         // line of the header
	Channels     []string    // channel column names, in file order
	Temperatures []float64   // K, one per point, in file order
	Signals      [][]float64 // Signals[c][i] is channel c at point i
	Lines        []int       // file line of each point
}

// ReadCalibrationPoints reads a calibration table from r, named name in
// messages:
//
//	# comments and blank lines anywhere
//	temperature_degC,short,long
//	700,0.0216,0.1718
//	800,...
//
// The first column is temperature_degC or temperature_K; every other
// column is one channel, named as in the configuration; one row per
// blackbody point. Temperatures must be above absolute zero and differ
// from each other; signals must be positive and rise with temperature in
// every channel; at least 3 points are needed to fit A, B and C. On any
// problem it returns TableErrors naming file, line and column.
func ReadCalibrationPoints(name string, r io.Reader) (*CalibrationPoints, error) {
	t := readPointTable(name, r)
	p := &CalibrationPoints{File: name, HeaderLine: t.headerLine}
	if t.header == nil {
		if len(t.errs) == 0 {
			t.errorf(0, "", "no header (want temperature_degC or temperature_K, then one column per channel)")
		}
		return nil, t.errs
	}
	offset, unit, ok := t.temperatureColumn("temperature")
	if ok && len(t.header) < 2 {
		t.errorf(t.headerLine, "", "no channel columns after %s", t.header[0])
		ok = false
	}
	if !ok || t.headerFailed() {
		return nil, t.errs
	}
	p.Unit = unit
	p.Channels = t.header[1:]
	p.Signals = make([][]float64, len(p.Channels))
	for i, row := range t.rows {
		line := t.lines[i]
		temp := row[0] + offset
		if !(temp > 0) {
			t.errorf(line, t.header[0], "%s is not above absolute zero", fmtNumber(row[0]))
		}
		for c := range p.Channels {
			if !(row[c+1] > 0) {
				t.errorf(line, p.Channels[c], "signal %s must be positive", fmtNumber(row[c+1]))
			}
			p.Signals[c] = append(p.Signals[c], row[c+1])
		}
		p.Temperatures = append(p.Temperatures, temp)
		p.Lines = append(p.Lines, line)
	}
	if len(t.errs) > 0 {
		t.sortErrors()
		return nil, t.errs
	}
	if n := len(p.Temperatures); n < 3 {
		t.errorf(t.headerLine, "", "%d blackbody points, need at least 3 to fit Sakuma–Hattori A, B and C", n)
		return nil, t.errs
	}
	// Sorted by temperature, every channel's signal must rise.
	order := p.order()
	for k := 1; k < len(order); k++ {
		i, j := order[k-1], order[k]
		if p.Temperatures[i] == p.Temperatures[j] {
			t.errorf(p.Lines[j], t.header[0], "%s repeats the temperature of line %d", p.fmtTemperature(p.Temperatures[j]), p.Lines[i])
			continue
		}
		for c, name := range p.Channels {
			si, sj := p.Signals[c][i], p.Signals[c][j]
			if !(sj > si) {
				t.errorf(p.Lines[j], name, "signal %s at %s is not above %s at %s (line %d); signals must rise with temperature",
					fmtNumber(sj), p.fmtTemperature(p.Temperatures[j]), fmtNumber(si), p.fmtTemperature(p.Temperatures[i]), p.Lines[i])
			}
		}
	}
	if len(t.errs) > 0 {
		t.sortErrors()
		return nil, t.errs
	}
	return p, nil
}

// order returns the point indices by increasing temperature.
func (p *CalibrationPoints) order() []int {
	idx := make([]int, len(p.Temperatures))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return p.Temperatures[idx[a]] < p.Temperatures[idx[b]] })
	return idx
}

// fmtTemperature writes a temperature in kelvin in the file's unit.
func (p *CalibrationPoints) fmtTemperature(k float64) string {
	if p.Unit == "K" {
		return fmtNumber(k) + "K"
	}
	return fmtNumber(math.Round((k-273.15)*1e9)/1e9) + "degC"
}

// CheckChannels checks the table's channel columns against the channels
// of head h: a column that names no channel of the head is an error at
// the header line.
func (p *CalibrationPoints) CheckChannels(h *config.Head) error {
	names := make([]string, len(h.Channels))
	for i, ch := range h.Channels {
		names[i] = ch.Name
	}
	var errs TableErrors
	for _, c := range p.Channels {
		if !containsString(names, c) {
			errs = append(errs, &TableError{File: p.File, Line: p.HeaderLine, Column: c,
				Msg: fmt.Sprintf("no channel %q in head %s (channels: %s)", c, h.Name, strings.Join(names, ", "))})
		}
	}
	if len(errs) > 0 {
		return errs
	}
	return nil
}

func containsString(list []string, s string) bool {
	for _, v := range list {
		if v == s {
			return true
		}
	}
	return false
}

// ChannelFit is the Sakuma–Hattori calibration of one channel.
type ChannelFit struct {
	Name      string
	Curve     *convert.SakumaHattori
	Residuals []float64 // K: T_i − T_fit(S_i) per point, in file order
}

// Calibrate fits a Sakuma–Hattori curve (convert.FitSakumaHattoriPoints,
// least squares in temperature) to every channel of the table, with the
// second radiation constant c2 (m·K) that the configuration will use to
// invert it. A channel that cannot be fitted gives a TableError for its
// column.
func Calibrate(p *CalibrationPoints, c2 float64) ([]ChannelFit, error) {
	fits := make([]ChannelFit, len(p.Channels))
	var errs TableErrors
	for c, name := range p.Channels {
		m, res, err := convert.FitSakumaHattoriPoints(p.Temperatures, p.Signals[c], c2)
		if err != nil {
			errs = append(errs, &TableError{File: p.File, Column: name, Msg: err.Error()})
			continue
		}
		fits[c] = ChannelFit{Name: name, Curve: m, Residuals: res}
	}
	if len(errs) > 0 {
		return nil, errs
	}
	return fits, nil
}

// calibrationDigits is the number of significant digits of the printed
// coefficients. Rounding A, B and C to 10 digits (relative error up to
// 5e-10 each) moves the curve's temperature by a few µK at most up to
// 3000 K: dT ≈ T·dA/A + dB/A + T·(A·T/c2)·dC/C.
const calibrationDigits = 10

// YAML returns the channel's entry for the channels list of a head in a
// configuration, with the coefficients in the units the configuration
// takes (A in um, B in umK, C bare), such as the two lines under
// channels here:
//
//	channels:
//	- name: short
//	  sakuma_hattori: {a: 0.8986231234um, b: 1.837312345umK, c: 10123800.12}
//
// with each line prefixed by indent. The curve's c2 must be the
// configuration's (its top-level c2, ITS-90 by default).
func (f ChannelFit) YAML(indent string) string {
	num := func(v float64) string { return strconv.FormatFloat(v, 'g', calibrationDigits, 64) }
	return fmt.Sprintf("%s- name: %s\n%s  sakuma_hattori: {a: %sum, b: %sumK, c: %s}\n",
		indent, yamlName(f.Name), indent, num(f.Curve.A*1e6), num(f.Curve.B*1e6), num(f.Curve.C))
}

// yamlName quotes a channel name when YAML would not read it back as the
// same plain string.
func yamlName(s string) string {
	plain := s != ""
	for i, c := range s {
		if !(c >= 'a' && c <= 'z' || c >= 'A' && c <= 'Z' || c == '_' || c == '-' && i > 0 || c >= '0' && c <= '9' && i > 0) {
			plain = false
		}
	}
	switch strings.ToLower(s) {
	case "true", "false", "yes", "no", "on", "off", "null", "y", "n":
		plain = false
	}
	if plain {
		return s
	}
	return strconv.Quote(s)
}

// fmtNumber writes v in its shortest form.
func fmtNumber(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
