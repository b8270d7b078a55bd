package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/plotutil"
	"gonum.org/v1/plot/vg"

	"glowgate/convert"
	"glowgate/daemon"
	"glowgate/daemon/config"
)

const calibrateAbout = `Fits a Sakuma–Hattori curve, S(T) = C/(exp(c2/(A·T + B)) − 1), to every channel
of a table of blackbody points, least squares in temperature, and prints the
channels' sakuma_hattori lines to paste into the configuration, then the
residuals T − T_fit per point and channel.

The table is CSV: a header whose first column is temperature_degC or
temperature_K and whose other columns are the channels, named as in the
configuration; one row per blackbody point, at least 3 (4 or more to see
how well the curve fits); lines starting with # and blank lines are
skipped. Signals must rise with temperature in every channel.

With -config and -head the columns must name channels of that head, and c2
defaults to the configuration's. The coefficients hold for the c2 they were
fitted with: paste them into a configuration with the same c2.

Exit status: 0 when every residual is within -tolerance; 1 when the fit
succeeded but some residual exceeds it (the lines are still printed, with
warnings); 2 for a bad table or bad flags, with FILE:LINE messages.`

func calibrateCmd(_ context.Context, e *env, args []string) error {
	fs := newFlags("calibrate", "-points FILE.csv [-c2 its90|codata] [-tolerance 0.05K] [-plot FILE.png] [-config FILE -head NAME]",
		calibrateAbout, e.stderr)
	pointsPath := fs.String("points", "", "CSV table of blackbody points (required)")
	c2Name := fs.String("c2", "", "second radiation constant of the fit: its90 (0.014388 m·K, the default) or codata (CODATA 2018 hc/k)")
	tolText := fs.String("tolerance", "0.05K", "largest acceptable residual, a temperature difference")
	plotPath := fs.String("plot", "", "write a plot of the residuals (mK) against temperature; format from the extension: png, svg, pdf, eps, jpg, tif")
	cfgPath := fs.String("config", "", "configuration whose head's channel names the columns must match (optional)")
	headName := fs.String("head", "", "head of -config to check the columns against")
	if err := parseNoArgs(fs, args); err != nil {
		return err
	}
	if *pointsPath == "" {
		return usageError{errors.New("-points FILE.csv is required")}
	}
	tol, err := config.ParseTemperatureDifference(*tolText)
	if err != nil || !(tol > 0) {
		if err == nil {
			err = errors.New("must be positive")
		}
		return usageError{fmt.Errorf("-tolerance %q: %v", *tolText, err)}
	}
	if *plotPath != "" && !plotFormat(*plotPath) {
		return usageError{fmt.Errorf("-plot %q: unknown format (want a file ending in .png, .svg, .pdf, .eps, .jpg or .tif)", *plotPath)}
	}
	if (*cfgPath == "") != (*headName == "") {
		return usageError{errors.New("-config and -head go together")}
	}
	var head *config.Head
	c2, c2Label := convert.C2ITS90, "its90"
	if *cfgPath != "" {
		cfg, err := loadConfig(*cfgPath)
		if err != nil {
			return err
		}
		h, ok := cfg.Head(*headName)
		if !ok {
			return usageError{fmt.Errorf("no head %q in %s", *headName, *cfgPath)}
		}
		head = h
		if cfg.C2 > 0 {
			c2, c2Label = cfg.C2, cfg.C2Name
		}
	}
	switch *c2Name {
	case "":
	case "its90":
		c2, c2Label = convert.C2ITS90, "its90"
	case "codata", "codata2018":
		c2, c2Label = convert.C2CODATA2018, "codata2018"
	default:
		return usageError{fmt.Errorf("-c2 %q: want its90 or codata", *c2Name)}
	}

	f, err := os.Open(*pointsPath)
	if err != nil {
		return usageError{fmt.Errorf("read points: %w", err)}
	}
	pts, err := daemon.ReadCalibrationPoints(*pointsPath, f)
	f.Close()
	if err != nil {
		return usageError{fmt.Errorf("bad points table:\n%w", err)}
	}
	if head != nil {
		if err := pts.CheckChannels(head); err != nil {
			return usageError{fmt.Errorf("bad points table:\n%w", err)}
		}
	}
	fits, err := daemon.Calibrate(pts, c2)
	if err != nil {
		return usageError{fmt.Errorf("no fit:\n%w", err)}
	}
	// A configuration lists a head's channels short wavelength first.
	sort.SliceStable(fits, func(a, b int) bool { return fits[a].Curve.A < fits[b].Curve.A })

	var out bytes.Buffer
	writeCalibration(&out, pts, fits, c2, c2Label, tol, head)
	if _, err := e.stdout.Write(out.Bytes()); err != nil {
		return err
	}
	if *plotPath != "" {
		if err := plotResiduals(*plotPath, pts, fits); err != nil {
			return fmt.Errorf("plot: %w", err)
		}
	}
	if len(pts.Temperatures) == 3 {
		fmt.Fprintf(e.stderr, "glowgate calibrate: warning: %s: 3 points determine A, B and C exactly, so the residuals are 0 and say nothing; measure 4 or more points to check the fit\n", pts.File)
	}
	over := 0
	for _, fit := range fits {
		for i, r := range fit.Residuals {
			if math.Abs(r) > tol {
				over++
				fmt.Fprintf(e.stderr, "glowgate calibrate: warning: %s:%d: column %s: residual %+.6f K exceeds the tolerance %g K\n",
					pts.File, pts.Lines[i], fit.Name, r, tol)
			}
		}
	}
	if over > 0 {
		return fmt.Errorf("%d residuals exceed the tolerance %g K: check those points, or whether the channel follows a Sakuma–Hattori curve", over, tol)
	}
	return nil
}

// writeCalibration prints the configuration lines and the residual table.
func writeCalibration(w io.Writer, pts *daemon.CalibrationPoints, fits []daemon.ChannelFit, c2 float64, c2Label string, tol float64, head *config.Head) {
	fmt.Fprintf(w, "# Sakuma–Hattori fit of %d channels to %d blackbody points in %s\n", len(fits), len(pts.Temperatures), pts.File)
	fmt.Fprintf(w, "# c2 = %g m·K (%s): paste into a configuration with c2: %s", c2, c2Label, c2Label)
	if c2Label == "its90" {
		fmt.Fprint(w, " (the default)")
	}
	fmt.Fprintln(w)
	where := "the head's channels"
	if head != nil {
		where = "head " + head.Name + "'s channels"
	}
	fmt.Fprintf(w, "# replace the band or sakuma_hattori line of each channel under %s, short wavelength first; keep its signal line\n", where)
	for _, f := range fits {
		fmt.Fprint(w, f.YAML(""))
	}
	fmt.Fprintln(w)

	unit := "degC"
	if pts.Unit == "K" {
		unit = "K"
	}
	fmt.Fprintf(w, "residuals T − T_fit in K (tolerance %g K):\n", tol)
	fmt.Fprintf(w, "%6s  %-16s", "line", "temperature")
	for _, f := range fits {
		fmt.Fprintf(w, " %12s", f.Name)
	}
	fmt.Fprintln(w)
	var line strings.Builder
	for i, temp := range pts.Temperatures {
		shown := temp
		if unit == "degC" {
			shown = temp - 273.15
		}
		line.Reset()
		fmt.Fprintf(&line, "%6d  %-16s", pts.Lines[i], fmt.Sprintf("%.3f%s", shown, unit))
		for _, f := range fits {
			mark := " "
			if math.Abs(f.Residuals[i]) > tol {
				mark = "!" // beyond the tolerance
			}
			fmt.Fprintf(&line, " %+11.5f%s", f.Residuals[i], mark)
		}
		fmt.Fprintln(w, strings.TrimRight(line.String(), " "))
	}
	for _, row := range []struct {
		label string
		stat  func([]float64) float64
	}{{"rms", rms}, {"max |r|", maxAbs}} {
		line.Reset()
		fmt.Fprintf(&line, "%6s  %-16s", "", row.label)
		for _, f := range fits {
			fmt.Fprintf(&line, " %11.5f ", row.stat(f.Residuals))
		}
		fmt.Fprintln(w, strings.TrimRight(line.String(), " "))
	}
}

func rms(x []float64) float64 {
	var s float64
	for _, v := range x {
		s += v * v
	}
	return math.Sqrt(s / float64(len(x)))
}

func maxAbs(x []float64) float64 {
	var m float64
	for _, v := range x {
		m = math.Max(m, math.Abs(v))
	}
	return m
}

// plotFormat reports whether gonum/plot writes the format of path's
// extension.
func plotFormat(path string) bool {
	switch strings.ToLower(filepath.Ext(path)) {
	case ".png", ".svg", ".pdf", ".eps", ".jpg", ".jpeg", ".tif", ".tiff":
		return true
	}
	return false
}

// plotResiduals draws the residuals in mK against temperature, one line
// per channel, and writes the image to path.
func plotResiduals(path string, pts *daemon.CalibrationPoints, fits []daemon.ChannelFit) error {
	p := plot.New()
	p.Title.Text = "Sakuma–Hattori fit residuals, " + filepath.Base(pts.File)
	unit, offset := "°C", 273.15
	if pts.Unit == "K" {
		unit, offset = "K", 0
	}
	p.X.Label.Text = "blackbody temperature (" + unit + ")"
	p.Y.Label.Text = "residual T − T_fit (mK)"
	p.Add(plotter.NewGrid())
	idx := make([]int, len(pts.Temperatures))
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(a, b int) bool { return pts.Temperatures[idx[a]] < pts.Temperatures[idx[b]] })
	for c, f := range fits {
		xy := make(plotter.XYs, len(idx))
		for k, i := range idx {
			xy[k].X = pts.Temperatures[i] - offset
			xy[k].Y = f.Residuals[i] * 1e3
		}
		line, scatter, err := plotter.NewLinePoints(xy)
		if err != nil {
			return err
		}
		line.Color = plotutil.Color(c)
		scatter.Color = plotutil.Color(c)
		scatter.Shape = plotutil.Shape(c)
		p.Add(line, scatter)
		p.Legend.Add(f.Name, line, scatter)
	}
	p.Legend.Top = true
	format := strings.TrimPrefix(strings.ToLower(filepath.Ext(path)), ".")
	wt, err := p.WriterTo(16*vg.Centimeter, 10*vg.Centimeter, format)
	if err != nil {
		return err
	}
	var buf bytes.Buffer
	if _, err := wt.WriteTo(&buf); err != nil {
		return err
	}
	return os.WriteFile(path, buf.Bytes(), 0o644)
}
