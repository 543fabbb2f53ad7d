package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strings"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgsvg"

	"github.com/voltcast/voltcast/labdata"
	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	"github.com/voltcast/voltcast/model/fit"
)

func init() {
	register("fit", command{
		summary: "fit a cell type (OCV, R0, RC branches) from lab CSV files",
		run:     runFit,
	})
}

// multiFlag collects a repeatable string flag.
type multiFlag []string

func (m *multiFlag) String() string     { return strings.Join(*m, ",") }
func (m *multiFlag) Set(v string) error { *m = append(*m, v); return nil }

// readOptions are the CSV reading options shared by the fit and validate commands.
type readOptions struct {
	sign         string
	defaultC     float64
	hasDefaultC  bool
	keepLastDups bool
}

func (o readOptions) labOptions() (*labdata.Options, error) {
	sign, err := labdata.ParseCurrentSign(o.sign)
	if err != nil {
		return nil, fmt.Errorf("%w: --current-sign: %v", errUsage, err)
	}
	lo := &labdata.Options{Sign: sign, KeepLastDuplicate: o.keepLastDups}
	if o.hasDefaultC {
		c := o.defaultC
		lo.DefaultCelsius = &c
	}
	return lo, nil
}

// readRecords reads a CSV file as one fit.Record per profile (a file without a profile
// column is one record).
func readRecords(path string, lo *labdata.Options) ([]fit.Record, error) {
	r, err := labdata.ReadFile(path, lo)
	if errors.Is(err, labdata.ErrDuplicateTime) {
		return nil, fmt.Errorf("%w (if the tester rounds step-end timestamps, --duplicate-timestamps keep-last keeps the later row)", err)
	}
	if err != nil {
		return nil, err
	}
	var out []fit.Record
	for _, p := range r.Profiles() {
		out = append(out, toFitRecord(p))
	}
	return out, nil
}

func toFitRecord(r *labdata.Record) fit.Record {
	return fit.Record{Name: r.Name, Time: r.Time, Current: r.Current, Voltage: r.Voltage,
		Temperature: r.Kelvin(), DischargedAh: r.DischargedAh}
}

// baseType resolves --chemistry: a built-in type name, or a chemistry family (nca, nmc,
// lfp, …) meaning the first built-in type of that family.
func baseType(name string) (*cell.Type, error) {
	if name == "" {
		return nil, nil
	}
	if t, err := chem.Lookup(name); err == nil {
		return t, nil
	}
	for _, t := range chem.All() {
		if strings.EqualFold(string(t.Chemistry), name) {
			return t, nil
		}
	}
	var fams []string
	seen := map[cell.Chemistry]bool{}
	for _, t := range chem.All() {
		if !seen[t.Chemistry] {
			seen[t.Chemistry] = true
			fams = append(fams, string(t.Chemistry))
		}
	}
	return nil, fmt.Errorf("%w: unknown --chemistry %q (a built-in type: %s; or a family: %s)", errUsage, name,
		strings.Join(chem.Names(), ", "), strings.Join(fams, ", "))
}

func runFit(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("fit", stderr)
	var pulses, drives multiFlag
	ocvPath := fs.String("ocv-test", "", "low-rate (C/20-style) OCV test CSV: a discharge from full to the cut-off, optionally followed by a charge; without it (or when the file is not a low-rate test) the OCV comes from the long rests (≥ 30 min) of the test, or of the first --pulse-test")
	fs.Var(&pulses, "pulse-test", "HPPC-style pulse test CSV (repeatable; one or more per temperature; required)")
	fs.Var(&drives, "drive-cycle", "drive-cycle CSV starting from full, for the report and the refinement (repeatable)")
	chemName := fs.String("chemistry", "", "chemistry family (nmc, nca, lfp, …) or built-in type whose limits the fitted type takes; default: generic lithium-ion limits")
	name := fs.String("name", "", "name of the fitted type (default: the --out file name without extension)")
	out := fs.String("out", "", "write the fitted type (parameter JSON) to this file (required)")
	svg := fs.String("report-svg", "", "write a residual plot (SVG) to this file")
	sign := fs.String("current-sign", "discharge-positive", "current convention of the CSV files: discharge-positive or charge-positive")
	branches := fs.Int("branches", 2, "RC branches to fit, 1 or 2")
	refine := fs.Bool("refine", true, "with --drive-cycle, refine resistance and capacitance scale factors over the drive cycles")
	tempC := fs.Float64("temperature-celsius", math.NaN(), "temperature to assume for CSV files without a temperature column, °C")
	dups := fs.String("duplicate-timestamps", "error", "a repeated timestamp is an error, or keep-last to keep the later row (counted)")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast fit [--ocv-test F.csv] --pulse-test F.csv [--pulse-test G.csv ...] [--drive-cycle H.csv ...] [--chemistry NAME] [--name NAME] --out TYPE.json [--report-svg residuals.svg] [--current-sign charge-positive]")
		fmt.Fprintln(stderr, "CSV columns by name: time_s, current_a (positive = discharge), voltage_v, temp_cell_c|temperature_c|temp_c, optional discharged_ah (the tester's Ah counter), optional profile.")
		fmt.Fprintln(stderr, "The fitted type describes this cell within the tested range only; its limits come from --chemistry or generic lithium-ion values:")
		fmt.Fprintln(stderr, "the cell maker's datasheet, local codes and licensed practice take precedence.")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if len(pulses) == 0 || *out == "" {
		return fmt.Errorf("%w: at least one --pulse-test and --out are required", errUsage)
	}
	if *branches != 1 && *branches != 2 {
		return fmt.Errorf("%w: --branches must be 1 or 2", errUsage)
	}
	if *dups != "error" && *dups != "keep-last" {
		return fmt.Errorf("%w: --duplicate-timestamps must be error or keep-last", errUsage)
	}
	ro := readOptions{sign: *sign, keepLastDups: *dups == "keep-last"}
	if !math.IsNaN(*tempC) {
		if err := cell.CheckCelsius("--temperature-celsius", *tempC); err != nil {
			return fmt.Errorf("%w: %v", errUsage, err)
		}
		ro.defaultC, ro.hasDefaultC = *tempC, true
	}
	lo, err := ro.labOptions()
	if err != nil {
		return err
	}
	base, err := baseType(*chemName)
	if err != nil {
		return err
	}
	p := &fit.Problem{Name: *name, Base: base}
	if p.Name == "" {
		p.Name = strings.TrimSuffix(baseName(*out), ".json")
	}
	if *ocvPath != "" {
		ocvRecs, err := readRecords(*ocvPath, lo)
		if err != nil {
			return err
		}
		if len(ocvRecs) != 1 {
			return fmt.Errorf("%w: --ocv-test %s holds %d profiles; give one test", errUsage, *ocvPath, len(ocvRecs))
		}
		p.OCVTest = ocvRecs[0]
	}
	for _, f := range pulses {
		rs, err := readRecords(f, lo)
		if err != nil {
			return err
		}
		p.PulseTests = append(p.PulseTests, rs...)
	}
	for _, f := range drives {
		rs, err := readRecords(f, lo)
		if err != nil {
			return err
		}
		p.DriveCycles = append(p.DriveCycles, rs...)
	}
	settings := &fit.Settings{
		Pulse:  fit.PulseSettings{Branches: *branches},
		Refine: *refine,
		Progress: func(pr fit.Progress) {
			if pr.Name != "" {
				fmt.Fprintf(stderr, "fit: %s %s %d/%d\n", pr.Stage, pr.Name, pr.Done, pr.Total)
			} else {
				fmt.Fprintf(stderr, "fit: %s %d/%d\n", pr.Stage, pr.Done, pr.Total)
			}
		},
	}
	res, err := fit.Fit(ctx, p, settings)
	if err != nil {
		return err
	}
	b, err := json.MarshalIndent(res.Type, "", "  ")
	if err != nil {
		return fmt.Errorf("encode fitted type: %w", err)
	}
	if err := os.WriteFile(*out, append(b, '\n'), 0o644); err != nil {
		return fmt.Errorf("write fitted type: %w", err)
	}
	printFitReport(stdout, res, *out)
	if *svg != "" {
		if err := writeResidualSVG(*svg, res.Report.Files); err != nil {
			return fmt.Errorf("write residual plot: %w", err)
		}
	}
	return nil
}

func baseName(path string) string {
	if i := strings.LastIndexAny(path, `/\`); i >= 0 {
		return path[i+1:]
	}
	return path
}

// printFitReport writes the human-readable fit report.
func printFitReport(w io.Writer, res *fit.Result, out string) {
	t := res.Type
	fmt.Fprintf(w, "fitted type %q written to %s (%.2f s)\n", t.Name, out, res.Runtime.Seconds())
	fmt.Fprintf(w, "capacity %.4f Ah, nominal %.2f V, %d RC branch(es); current positive = discharge\n", t.CapacityAh, t.NominalVolts, len(t.Branches))
	if res.OCV.Source == fit.SourceRests {
		fmt.Fprintln(w, "ocv method: rested voltages of a pulse test (no low-rate test); the capacity is that test's, at its own rates: a lower bound of the low-rate capacity")
	} else {
		fmt.Fprintln(w, "ocv method: low-rate test")
	}
	for _, n := range res.Report.Notes {
		fmt.Fprintf(w, "note: %s\n", n)
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w, "voltage error per input file")
	fmt.Fprintf(w, "  %-6s %-44s %8s %9s %9s\n", "role", "file", "samples", "rmse_mv", "max_mv")
	for _, f := range res.Report.Files {
		fmt.Fprintf(w, "  %-6s %-44s %8d %9.2f %9.1f\n", f.Role, f.Name, f.Samples, f.RMSE*1e3, f.Max*1e3)
	}
	for _, pr := range res.Pulses {
		fmt.Fprintln(w)
		fmt.Fprintf(w, "parameters from %s (%.1f °C; 95 %% intervals from the Jacobian, optimistic for correlated residuals)\n", pr.Name, pr.TemperatureK-cell.CelsiusOffset)
		fmt.Fprintf(w, "  %6s %7s %22s", "soc", "r0step", "r0_mohm")
		for j := range t.Branches {
			fmt.Fprintf(w, " %22s %22s", fmt.Sprintf("r%d_mohm", j+1), fmt.Sprintf("tau%d_s", j+1))
			if t.Branches[j].ExchangeCurrent != nil {
				fmt.Fprintf(w, " %22s", fmt.Sprintf("i0_%d_a", j+1))
			}
		}
		fmt.Fprintf(w, " %8s\n", "rmse_mv")
		for _, l := range pr.Levels {
			fmt.Fprintf(w, "  %6.3f %7.2f %22s", l.SOC, l.R0Step*1e3, interval(l.R0, 1e3))
			for j := range l.R {
				fmt.Fprintf(w, " %22s %22s", interval(l.R[j], 1e3), interval(l.Tau[j], 1))
				if j < len(t.Branches) && t.Branches[j].ExchangeCurrent != nil {
					s := "ohmic"
					if j < len(l.I0) && !math.IsInf(l.I0[j].Value, 1) {
						s = interval(l.I0[j], 1)
					}
					fmt.Fprintf(w, " %22s", s)
				}
			}
			fmt.Fprintf(w, " %8.2f\n", l.RMSE*1e3)
		}
	}
	if r := res.Refinement; r != nil {
		fmt.Fprintln(w)
		fmt.Fprintln(w, "drive-cycle refinement (scale factors on the tables)")
		for i, f := range r.Factors {
			fmt.Fprintf(w, "  %-3s %s\n", r.Names[i], interval(f, 1))
		}
		fmt.Fprintf(w, "  voltage rmse %.2f -> %.2f mV\n", r.Before*1e3, r.After*1e3)
	}
}

func interval(iv fit.Interval, scale float64) string {
	if math.IsNaN(iv.Low) {
		return fmt.Sprintf("%.4g", iv.Value*scale)
	}
	return fmt.Sprintf("%.4g [%.4g,%.4g]", iv.Value*scale, iv.Low*scale, iv.High*scale)
}

// writeResidualSVG plots modelled − measured voltage (mV) against time (h), one panel
// per input file, stacked.
func writeResidualSVG(path string, files []fit.FileReport) error {
	if len(files) == 0 {
		return errors.New("nothing to plot")
	}
	plots := make([][]*plot.Plot, len(files))
	for i, f := range files {
		p := plot.New()
		p.Title.Text = fmt.Sprintf("%s (%s): rmse %.1f mV, max %.1f mV", f.Name, f.Role, f.RMSE*1e3, f.Max*1e3)
		p.X.Label.Text = "time (h)"
		p.Y.Label.Text = "model - measured (mV)"
		pts := make(plotter.XYs, len(f.Time))
		for k := range f.Time {
			pts[k].X = f.Time[k] / 3600
			pts[k].Y = f.Residual[k] * 1e3
		}
		if len(pts) > 0 {
			s, err := plotter.NewScatter(pts)
			if err != nil {
				return err
			}
			s.GlyphStyle.Radius = vg.Points(0.6)
			p.Add(s, plotter.NewGrid())
		}
		plots[i] = []*plot.Plot{p}
	}
	const panelH = 2.6 * vg.Inch
	c := vgsvg.New(8*vg.Inch, panelH*vg.Length(len(files)))
	dc := draw.New(c)
	t := draw.Tiles{Rows: len(files), Cols: 1, PadY: vg.Millimeter * 2}
	canv := plot.Align(plots, t, dc)
	for i := range plots {
		plots[i][0].Draw(canv[i][0])
	}
	return writeFileFrom(path, c)
}
