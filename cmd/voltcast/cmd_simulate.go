package main

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"strconv"
	"strings"
	"text/tabwriter"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgsvg"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/charge"
	"github.com/voltcast/voltcast/model/forecast"
	"github.com/voltcast/voltcast/model/sim"
)

func init() {
	register("simulate", command{
		summary: "simulate a pack under a load and write the time series (CSV, SVG)",
		run:     runSimulate,
	})
}

// dischargeCaution is printed with every simulation and forecast.
const dischargeCaution = "caution: " + forecast.Caution

// packFlags are the flags that describe a pack, its state and its load; simulate and
// forecast share them.
type packFlags struct {
	fs          *flag.FlagSet
	typeName    *string
	soc         *float64
	celsius     *float64
	series      *int
	parallel    *int
	capFactor   *float64
	resFactor   *float64
	cutoffVolts *float64
	current     *float64
	power       *float64
	resistance  *float64
	profile     *string
	repeat      *bool
}

// addPackFlags defines the shared flags on fs. repeat is the default of --repeat.
func addPackFlags(fs *flag.FlagSet, repeat bool) *packFlags {
	return &packFlags{
		fs:          fs,
		typeName:    fs.String("type", "", "built-in cell type (see voltcast types) or a JSON parameter file (required)"),
		soc:         fs.Float64("soc", math.NaN(), "state of charge at the start, a fraction 0–1 (required)"),
		celsius:     fs.Float64("temperature-celsius", math.NaN(), "cell temperature, °C, held constant (required)"),
		series:      fs.Int("series", 1, "cells in series"),
		parallel:    fs.Int("parallel", 1, "cells in parallel"),
		capFactor:   fs.Float64("capacity-factor", 1, "present capacity as a fraction of rated (state of health), in (0, 2]"),
		resFactor:   fs.Float64("resistance-factor", 1, "present resistance as a multiple of new, in (0, 20]"),
		cutoffVolts: fs.Float64("cutoff-volts", 0, "end-of-discharge voltage of the whole PACK, V (0: the type's cut-off per cell × series)"),
		current:     fs.Float64("current-amps", math.NaN(), "constant current, A (positive = discharge, negative = charge)"),
		power:       fs.Float64("power-watts", math.NaN(), "constant power at the pack terminals, W (positive = discharge)"),
		resistance:  fs.Float64("resistance-ohms", math.NaN(), "constant load resistance across the pack, Ω"),
		profile:     fs.String("profile", "", "load profile CSV with header duration_s,kind,value (kind: current, power, resistance or rest)"),
		repeat:      fs.Bool("repeat", repeat, "repeat the --profile from its start when it ends"),
	}
}

// problem builds the simulation problem the flags describe, and a short description of
// the load.
func (f *packFlags) problem() (*sim.Problem, string, error) {
	// Both default to NaN to mean "not given"; a NaN typed in is named as such.
	if err := checkGivenNaN(f.fs, []string{"soc", "temperature-celsius"}, *f.soc, *f.celsius); err != nil {
		return nil, "", err
	}
	if math.IsNaN(*f.soc) {
		return nil, "", fmt.Errorf("%w: --soc is required (a fraction 0–1)", errUsage)
	}
	if math.IsNaN(*f.celsius) {
		return nil, "", fmt.Errorf("%w: --temperature-celsius is required", errUsage)
	}
	typ, err := loadType(*f.typeName)
	if err != nil {
		return nil, "", err
	}
	load, desc, err := f.load()
	if err != nil {
		return nil, "", err
	}
	prob := &sim.Problem{
		Pack: cell.Pack{
			Type: typ, Series: *f.series, Parallel: *f.parallel,
			CapacityFactor: *f.capFactor, ResistanceFactor: *f.resFactor,
		},
		Initial:         cell.State{SOC: *f.soc},
		Celsius:         *f.celsius,
		Load:            load,
		PackCutoffVolts: *f.cutoffVolts,
	}
	return prob, desc, nil
}

// load returns the load given by exactly one of --current-amps, --power-watts,
// --resistance-ohms and --profile.
func (f *packFlags) load() (sim.Load, string, error) {
	set := map[string]bool{}
	f.fs.Visit(func(fl *flag.Flag) { set[fl.Name] = true })
	var given []string
	for _, n := range []string{"current-amps", "power-watts", "resistance-ohms", "profile"} {
		if set[n] {
			given = append(given, "--"+n)
		}
	}
	switch len(given) {
	case 0:
		return sim.Load{}, "", fmt.Errorf("%w: give exactly one load: --current-amps, --power-watts, --resistance-ohms or --profile", errUsage)
	case 1:
	default:
		return sim.Load{}, "", fmt.Errorf("%w: give exactly one load, not %s", errUsage, strings.Join(given, " and "))
	}
	switch {
	case set["current-amps"]:
		return sim.ConstantCurrent(*f.current), fmt.Sprintf("constant current %g A", *f.current), nil
	case set["power-watts"]:
		return sim.ConstantPower(*f.power), fmt.Sprintf("constant power %g W", *f.power), nil
	case set["resistance-ohms"]:
		return sim.ConstantResistance(*f.resistance), fmt.Sprintf("constant resistance %g Ω", *f.resistance), nil
	}
	segs, err := readProfile(*f.profile)
	if err != nil {
		return sim.Load{}, "", err
	}
	l := sim.Load{Segments: segs, Repeat: *f.repeat}
	how := "once"
	if l.Repeat {
		how = "repeated"
	}
	return l, fmt.Sprintf("profile %s: %d segments, %s s per pass, %s", *f.profile, len(segs),
		strconv.FormatFloat(l.Duration(), 'g', 6, 64), how), nil
}

// readProfile reads a load profile: a CSV file with the header duration_s,kind,value
// (any order, case-insensitive), one segment per row. kind is current (A), power (W),
// resistance (Ω) or rest (value ignored, zero current); current and power are positive
// on discharge. Lines starting with # are comments.
func readProfile(path string) ([]sim.Segment, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("read profile: %w", err)
	}
	defer f.Close()
	cr := csv.NewReader(f)
	cr.Comment = '#'
	cr.TrimLeadingSpace = true
	head, err := cr.Read()
	if err != nil {
		if errors.Is(err, io.EOF) {
			return nil, fmt.Errorf("profile %s: empty file; want a header duration_s,kind,value", path)
		}
		return nil, fmt.Errorf("profile %s: %w", path, err)
	}
	col := map[string]int{}
	for i, h := range head {
		col[strings.ToLower(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")))] = i
	}
	for _, n := range []string{"duration_s", "kind", "value"} {
		if _, ok := col[n]; !ok {
			return nil, fmt.Errorf("profile %s: no %s column; want a header duration_s,kind,value", path, n)
		}
	}
	var segs []sim.Segment
	for {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("profile %s: %w", path, err)
		}
		line, _ := cr.FieldPos(0)
		if len(segs) == sim.MaxSegments {
			return nil, fmt.Errorf("profile %s: more than %d segments", path, sim.MaxSegments)
		}
		field := func(n string) string {
			if i := col[n]; i < len(rec) {
				return strings.TrimSpace(rec[i])
			}
			return ""
		}
		d, err := strconv.ParseFloat(field("duration_s"), 64)
		if err != nil {
			return nil, fmt.Errorf("profile %s line %d: duration_s %q is not a number", path, line, field("duration_s"))
		}
		var sg sim.Segment
		sg.Duration = d
		if k := strings.ToLower(field("kind")); k == "rest" {
			sg.Kind = sim.Current
		} else {
			if sg.Kind, err = sim.ParseKind(k); err != nil {
				return nil, fmt.Errorf("profile %s line %d: unknown kind %q (want current, power, resistance or rest)", path, line, field("kind"))
			}
			if sg.Value, err = strconv.ParseFloat(field("value"), 64); err != nil {
				return nil, fmt.Errorf("profile %s line %d: value %q is not a number", path, line, field("value"))
			}
		}
		segs = append(segs, sg)
	}
	if len(segs) == 0 {
		return nil, fmt.Errorf("profile %s: no segments after the header", path)
	}
	return segs, nil
}

// simulateSummary is the JSON form of a simulation's outcome (voltcast simulate --json).
type simulateSummary struct {
	Type               string  `json:"type"`
	Series             int     `json:"series"`
	Parallel           int     `json:"parallel"`
	Load               string  `json:"load"`
	Status             string  `json:"status"`
	DurationSeconds    float64 `json:"duration_seconds"`
	ChargeAmpHours     float64 `json:"charge_amp_hours"`
	EnergyWattHours    float64 `json:"energy_watt_hours"`
	FinalStateOfCharge float64 `json:"final_state_of_charge"`
	FinalVoltageVolts  float64 `json:"final_voltage_volts"`
	CutoffVoltageVolts float64 `json:"cutoff_voltage_volts"`
	SampleCount        int     `json:"sample_count"`
	Steps              int     `json:"steps"`
	// Warnings are conditions of this run to show (charging outside the chemistry's
	// charge window or above its charge voltage); never null.
	Warnings []string `json:"warnings"`
	// Cautions are the standing safety notes: the discharge caution always, the
	// chemistry's charge cautions when the load charges the pack.
	Cautions []string `json:"cautions"`
}

// simulateNotes returns the warnings and cautions for a simulation: the discharge
// caution always; when the load charges the pack (negative current), the chemistry's
// charge cautions, and a warning for charging outside its charge temperature window or
// above its charge voltage (per cell, at the recorded samples).
func simulateNotes(prob *sim.Problem, samples []sim.Sample) (warnings, cautions []string) {
	warnings, cautions = []string{}, []string{dischargeCaution}
	t := prob.Pack.Type
	charging, maxVolts := false, math.Inf(-1)
	for _, s := range samples {
		if s.Amps < 0 {
			charging = true
			maxVolts = math.Max(maxVolts, s.Volts)
		}
	}
	if !charging {
		return warnings, cautions
	}
	cautions = append(cautions, charge.Cautions(t.Chemistry, t.ChargeMethod)...)
	if lo, hi := t.Limits.ChargeMinCelsius, t.Limits.ChargeMaxCelsius; prob.Celsius < lo || prob.Celsius > hi {
		warnings = append(warnings, fmt.Sprintf("the load charges the pack at %g °C, outside the %s charge window %g to %g °C", prob.Celsius, t.Chemistry, lo, hi))
	}
	ns := float64(prob.Pack.Series)
	if lim := t.Limits.ChargeVolts; lim > 0 && maxVolts/ns > lim+1e-6 {
		warnings = append(warnings, fmt.Sprintf("while charging the terminal voltage reaches %.3f V per cell, above the %.3f V charge limit", maxVolts/ns, lim))
	}
	return warnings, cautions
}

func runSimulate(_ context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("simulate", stderr)
	pf := addPackFlags(fs, false)
	step := fs.Float64("step-seconds", 1, "longest simulation step, s")
	interval := fs.Float64("interval-seconds", 0, "time between output samples, s (0: the step)")
	horizonH := fs.Float64("horizon-hours", 0, "how long to simulate, h (0: the profile's length if it ends, else 24 h)")
	ignoreCutoff := fs.Bool("ignore-cutoff", false, "keep discharging below the cut-off voltage (stops at 0 % state of charge)")
	out := fs.String("out", "", "write the time series as CSV to this file (- for standard output)")
	svg := fs.String("svg", "", "write a plot of voltage and state of charge against time to this SVG file")
	asJSON := fs.Bool("json", false, "print the summary as JSON")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast simulate --type TYPE --soc X --temperature-celsius T (--current-amps A | --power-watts W | --resistance-ohms R | --profile FILE.csv) [flags]")
		fmt.Fprintln(stderr, "Simulates the pack under the load and reports what it delivered. Current and power are positive on discharge.")
		fmt.Fprintln(stderr, "The CSV has columns time_s, soc, voltage_v (pack), current_a (pack, positive = discharge), power_w, and rcN_v (RC branch voltages per cell).")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	prob, desc, err := pf.problem()
	if err != nil {
		return err
	}
	if !cell.Finite(*horizonH) || *horizonH < 0 {
		return fmt.Errorf("%w: --horizon-hours must be a non-negative number, got %g", errUsage, *horizonH)
	}
	if *out == "-" && *asJSON {
		return fmt.Errorf("%w: --out - and --json would both write to standard output; give --out a file", errUsage)
	}
	res, err := sim.Run(nil, prob, &sim.Settings{
		Step: *step, Interval: *interval, Horizon: *horizonH * 3600, IgnoreCutoff: *ignoreCutoff,
	})
	if err != nil {
		return err
	}
	if *out != "" {
		if err := writeTraceCSV(*out, stdout, res.Samples, len(prob.Pack.Type.Branches)); err != nil {
			return fmt.Errorf("write %s: %w", *out, err)
		}
	}
	if *svg != "" {
		title := fmt.Sprintf("%s %ds%dp, %s", prob.Pack.Type.Name, prob.Pack.Series, prob.Pack.Parallel, desc)
		if err := writeTraceSVG(*svg, title, res.Samples, prob.CutoffVolts()*float64(prob.Pack.Series)); err != nil {
			return fmt.Errorf("write %s: %w", *svg, err)
		}
	}
	warnings, cautions := simulateNotes(prob, res.Samples)
	if *out == "-" {
		// The CSV owns standard output; the warnings and cautions still reach the user.
		for _, m := range warnings {
			fmt.Fprintln(stderr, "warning:", m)
		}
		for _, c := range cautions {
			fmt.Fprintln(stderr, c)
		}
		return nil
	}
	last := res.Samples[len(res.Samples)-1]
	sum := simulateSummary{
		Type: prob.Pack.Type.Name, Series: prob.Pack.Series, Parallel: prob.Pack.Parallel, Load: desc,
		Status: res.Status.String(), DurationSeconds: res.Seconds, ChargeAmpHours: res.AmpHours,
		EnergyWattHours: res.WattHours, FinalStateOfCharge: res.Final.SOC, FinalVoltageVolts: last.Volts,
		CutoffVoltageVolts: prob.CutoffVolts() * float64(prob.Pack.Series), SampleCount: len(res.Samples),
		Steps: res.Steps, Warnings: warnings, Cautions: cautions,
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(sum)
	}
	w := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintf(w, "pack\t%s, %ds%dp, start %.1f %% at %g °C\n", sum.Type, sum.Series, sum.Parallel, 100*prob.Initial.SOC, prob.Celsius)
	fmt.Fprintf(w, "load\t%s\n", desc)
	fmt.Fprintf(w, "stopped\t%s after %s\n", simStatusText(res.Status), humanSeconds(res.Seconds))
	fmt.Fprintf(w, "charge delivered\t%.4g Ah\n", res.AmpHours)
	fmt.Fprintf(w, "energy delivered\t%.4g Wh\n", res.WattHours)
	fmt.Fprintf(w, "final\t%.1f %% state of charge, %.3f V (cut-off %.3f V)\n", 100*res.Final.SOC, last.Volts, sum.CutoffVoltageVolts)
	fmt.Fprintf(w, "samples\t%d (%d steps)\n", len(res.Samples), res.Steps)
	if err := w.Flush(); err != nil {
		return err
	}
	for _, m := range warnings {
		fmt.Fprintln(stdout, "warning:", m)
	}
	for _, c := range cautions {
		if _, err := fmt.Fprintln(stdout, c); err != nil {
			return err
		}
	}
	return nil
}

func simStatusText(s sim.Status) string {
	switch s {
	case sim.StatusHorizon:
		return "reached the horizon"
	case sim.StatusLoadEnded:
		return "the load ended"
	case sim.StatusCutoff:
		return "reached the cut-off voltage"
	case sim.StatusEmpty:
		return "reached 0 % state of charge"
	case sim.StatusFull:
		return "reached 100 % state of charge"
	case sim.StatusPowerLimit:
		return "the pack could not deliver the requested power"
	}
	return s.String()
}

// humanSeconds formats a duration as "1 h 02 min 03 s (3723 s)".
func humanSeconds(sec float64) string {
	if !cell.Finite(sec) {
		return fmt.Sprint(sec)
	}
	r := int64(math.Round(sec))
	h, m, s := r/3600, r%3600/60, r%60
	var b strings.Builder
	switch {
	case h > 0:
		fmt.Fprintf(&b, "%d h %02d min %02d s", h, m, s)
	case m > 0:
		fmt.Fprintf(&b, "%d min %02d s", m, s)
	default:
		fmt.Fprintf(&b, "%.1f s", sec)
		return b.String()
	}
	fmt.Fprintf(&b, " (%.0f s)", sec)
	return b.String()
}

// writeTraceCSV writes samples as CSV to path ("-" for stdout), with one rcN_v column
// per RC branch of the type.
func writeTraceCSV(path string, stdout io.Writer, samples []sim.Sample, branches int) error {
	var w io.Writer = stdout
	var f *os.File
	if path != "-" {
		var err error
		if f, err = os.Create(path); err != nil {
			return err
		}
		w = f
	}
	cw := csv.NewWriter(w)
	head := []string{"time_s", "soc", "voltage_v", "current_a", "power_w"}
	for k := range branches {
		head = append(head, fmt.Sprintf("rc%d_v", k+1))
	}
	if err := cw.Write(head); err != nil {
		return closeAfter(f, err)
	}
	rec := make([]string, len(head))
	g := func(v float64) string { return strconv.FormatFloat(v, 'g', 10, 64) }
	for _, s := range samples {
		rec[0], rec[1], rec[2], rec[3], rec[4] = g(s.Time), g(s.SOC), g(s.Volts), g(s.Amps), g(s.Watts)
		for k := range branches {
			rec[5+k] = g(s.RC[k])
		}
		if err := cw.Write(rec); err != nil {
			return closeAfter(f, err)
		}
	}
	cw.Flush()
	return closeAfter(f, cw.Error())
}

func closeAfter(f *os.File, err error) error {
	if f == nil {
		return err
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	return err
}

// writeTraceSVG plots pack voltage (with the cut-off) and state of charge against time,
// in two stacked panels.
func writeTraceSVG(path, title string, samples []sim.Sample, cutoffPackVolts float64) error {
	scale, unit := 1.0, "s"
	if end := samples[len(samples)-1].Time; end > 3*3600 {
		scale, unit = 3600, "h"
	} else if end > 180 {
		scale, unit = 60, "min"
	}
	volts := make(plotter.XYs, len(samples))
	soc := make(plotter.XYs, len(samples))
	for i, s := range samples {
		volts[i] = plotter.XY{X: s.Time / scale, Y: s.Volts}
		soc[i] = plotter.XY{X: s.Time / scale, Y: 100 * s.SOC}
	}
	pv := plot.New()
	pv.Title.Text = title
	pv.X.Label.Text = "time (" + unit + ")"
	pv.Y.Label.Text = "pack voltage (V)"
	lv, err := plotter.NewLine(volts)
	if err != nil {
		return err
	}
	lv.Color = color.RGBA{R: 31, G: 119, B: 180, A: 255}
	pv.Add(plotter.NewGrid(), lv)
	pv.Legend.Add("terminal voltage", lv)
	if len(samples) > 1 {
		cut, err := plotter.NewLine(plotter.XYs{{X: volts[0].X, Y: cutoffPackVolts}, {X: volts[len(volts)-1].X, Y: cutoffPackVolts}})
		if err != nil {
			return err
		}
		cut.Color = color.RGBA{R: 214, G: 39, B: 40, A: 255}
		cut.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
		pv.Add(cut)
		pv.Legend.Add("cut-off", cut)
	}
	pv.Legend.Left = true // bottom left: the discharge curve starts high
	ps := plot.New()
	ps.X.Label.Text = "time (" + unit + ")"
	ps.Y.Label.Text = "state of charge (%)"
	ls, err := plotter.NewLine(soc)
	if err != nil {
		return err
	}
	ls.Color = color.RGBA{R: 44, G: 160, B: 44, A: 255}
	ps.Add(plotter.NewGrid(), ls)
	plots := [][]*plot.Plot{{pv}, {ps}}
	c := vgsvg.New(8*vg.Inch, 6*vg.Inch)
	canv := plot.Align(plots, draw.Tiles{Rows: 2, Cols: 1, PadY: vg.Millimeter * 3}, draw.New(c))
	pv.Draw(canv[0][0])
	ps.Draw(canv[1][0])
	return writeFileFrom(path, c)
}
