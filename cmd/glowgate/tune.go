package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"

	"glowgate/convert"
	"glowgate/daemon"
	"glowgate/daemon/config"
)

const tuneAbout = `Sets a two-channel head's emissivity ratio k = ε(short)/ε(long) from readings
taken against a reference thermometer (a thermocouple dip, say):

  -reference 1532degC S1 S2 [S1 S2 ...]   signal pairs of the head's channels
                                           (shorter wavelength first), all at
                                           the one reference temperature
  -points FILE.csv                         a table: reference_degC or
                                           reference_K, then the two channels
                                           named as in the configuration

k makes the head read the reference: k = (S1/S2) / (S1,bb(T_ref)/S2,bb(T_ref))
on the head's channel models, the geometric mean over the points. Printed:
k per point and what the head reads now, k with its standard uncertainty
(from -u-reference and the scatter of the points), with points at several
temperatures whether k changes with temperature (slope and p-value), and the
emissivity_ratio line to paste into the head's configuration.

Heads with more than two channels are refused: their emissivities are set
per channel (emissivity: [...]).`

func tuneCmd(_ context.Context, e *env, args []string) error {
	fs := newFlags("tune-ratio", "-config FILE -head NAME (-reference TEMP S1 S2 [S1 S2 ...] | -points FILE.csv) [-u-reference 1K]",
		tuneAbout, e.stderr)
	path := fs.String("config", "", "configuration file (YAML)")
	name := fs.String("head", "", "head whose emissivity ratio to set")
	refText := fs.String("reference", "", "reference temperature of the signal pairs, such as 1532degC or 1805.15K")
	pointsPath := fs.String("points", "", "CSV table of reference points")
	uText := fs.String("u-reference", "1K", "standard uncertainty of the reference temperature")
	if err := parse(fs, args); err != nil {
		return err
	}
	if *name == "" {
		return usageError{errors.New("-head NAME is required")}
	}
	if (*refText == "") == (*pointsPath == "") {
		return usageError{errors.New("give -reference TEMP with signal pairs, or -points FILE.csv")}
	}
	uRef, err := config.ParseTemperatureDifference(*uText)
	if err != nil || uRef < 0 {
		if err == nil {
			err = errors.New("must not be negative")
		}
		return usageError{fmt.Errorf("-u-reference %q: %v", *uText, err)}
	}
	var tRef float64
	var signals []float64
	if *refText != "" {
		if tRef, err = config.ParseTemperature(*refText); err != nil {
			return usageError{fmt.Errorf("-reference %q: %v", *refText, err)}
		}
		if fs.NArg() == 0 || fs.NArg()%2 != 0 {
			return usageError{fmt.Errorf("want signal pairs S1 S2 after the flags, have %d values", fs.NArg())}
		}
		for i, a := range fs.Args() {
			v, err := strconv.ParseFloat(a, 64)
			if err != nil || math.IsNaN(v) || math.IsInf(v, 0) || !(v > 0) {
				return usageError{fmt.Errorf("signal %d %q: want a positive number", i+1, a)}
			}
			signals = append(signals, v)
		}
	} else if fs.NArg() > 0 {
		return usageError{fmt.Errorf("unexpected arguments %q with -points", fs.Args())}
	}

	cfg, err := loadConfig(*path)
	if err != nil {
		return err
	}
	channels, err := daemon.TuneChannels(cfg, *name)
	if err != nil {
		return usageError{err}
	}
	var pts []convert.TunePoint
	if *pointsPath != "" {
		f, err := os.Open(*pointsPath)
		if err != nil {
			return usageError{fmt.Errorf("read points: %w", err)}
		}
		pts, err = daemon.ReadTunePoints(*pointsPath, f, channels)
		f.Close()
		if err != nil {
			return usageError{fmt.Errorf("bad points table:\n%w", err)}
		}
	} else {
		for i := 0; i < len(signals); i += 2 {
			pts = append(pts, convert.TunePoint{Reference: tRef, Short: signals[i], Long: signals[i+1]})
		}
	}
	rep, err := daemon.TuneRatio(cfg, *name, pts, uRef)
	if err != nil {
		return usageError{err}
	}
	var out bytes.Buffer
	writeTune(&out, rep, cfg.Unit, uRef)
	_, err = e.stdout.Write(out.Bytes())
	return err
}

// fmtTemp writes a temperature in kelvin in the configuration's unit.
func fmtTemp(k float64, unit string) string {
	if math.IsNaN(k) {
		return "-"
	}
	if unit == "K" {
		return fmt.Sprintf("%.2fK", k)
	}
	return fmt.Sprintf("%.2fdegC", k-273.15)
}

// kDecimals is the number of decimals that shows k with a rounding error
// below a tenth of its uncertainty: 4 to 6.
func kDecimals(u float64) int {
	d := 4
	for d < 6 && 0.5*math.Pow(10, -float64(d)) > u/10 {
		d++
	}
	return d
}

func writeTune(w io.Writer, rep *daemon.TuneReport, unit string, uRef float64) {
	res := rep.Result
	n := len(rep.Points)
	dec := kDecimals(res.U)
	fmt.Fprintf(w, "head %s: emissivity ratio k = ε(%s)/ε(%s) from %d point", rep.Head, rep.Short, rep.Long, n)
	if n != 1 {
		fmt.Fprint(w, "s")
	}
	fmt.Fprintf(w, ", reference standard uncertainty %g K\n\n", uRef)
	fmt.Fprintf(w, "%5s  %-16s %14s %14s %*s  %s\n", "point", "reference", rep.Short, rep.Long, dec+3, "k", "reads now (k = "+strconv.FormatFloat(rep.Configured, 'g', -1, 64)+")")
	outside := 0
	for i, p := range rep.Points {
		mark := ""
		if p.Reference < rep.RangeMin || p.Reference > rep.RangeMax {
			mark, outside = " !", outside+1
		}
		fmt.Fprintf(w, "%5d  %-16s %14.6g %14.6g %*.*f  %s%s\n", i+1, fmtTemp(p.Reference, unit), p.Short, p.Long,
			dec+3, dec, res.PerPoint[i], fmtTemp(rep.Reads[i], unit), mark)
	}
	fmt.Fprintln(w)
	if outside > 0 {
		fmt.Fprintf(w, "warning: %d reference temperatures (marked !) lie outside the head's measuring range %s to %s\n",
			outside, fmtTemp(rep.RangeMin, unit), fmtTemp(rep.RangeMax, unit))
	}
	fmt.Fprintf(w, "k = %.*f, standard uncertainty %.*f (reference", dec, res.K, dec, res.U)
	if n > 1 {
		fmt.Fprintf(w, " and scatter of %d points", n)
	}
	fmt.Fprintln(w, ")")
	switch {
	case math.IsNaN(res.Slope):
		fmt.Fprintln(w, "temperature dependence: not tested (needs 3 or more points at 2 or more reference temperatures)")
	case res.TemperatureDependent:
		fmt.Fprintf(w, "temperature dependence: k changes by %+.*f per 100 K, p = %.2g: k depends on temperature; the value below fits the middle of the points' range best\n",
			dec, 100*res.Slope, res.SlopeP)
	default:
		fmt.Fprintf(w, "temperature dependence: slope %+.*f per 100 K, p = %.2g: none shown\n", dec, 100*res.Slope, res.SlopeP)
	}
	fmt.Fprintf(w, "\npaste into head %s (now %g):\n    emissivity_ratio: %.*f\n", rep.Head, rep.Configured, dec, res.K)
}
