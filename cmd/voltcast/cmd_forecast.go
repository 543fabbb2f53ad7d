package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"text/tabwriter"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/forecast"
)

func init() {
	register("forecast", command{
		summary: "time until a pack reaches its cut-off voltage under a load",
		run:     runForecast,
	})
}

// forecastJSON is the output of voltcast forecast --json. Voltages, currents, charge and
// energy are for the whole pack; current is positive on discharge.
type forecastJSON struct {
	Type     string `json:"type"`
	Series   int    `json:"series"`
	Parallel int    `json:"parallel"`
	Load     string `json:"load"`
	// Status is cutoff, soc-floor, empty, power-limit, load-ended, horizon, step-limit
	// or cannot-start; StatusDescription says it in words.
	Status            string `json:"status"`
	StatusDescription string `json:"status_description"`
	// ReachedCutoff is true when the time is a runtime (cut-off, floor, empty or power
	// limit), false when the forecast stopped first (horizon, load ended, ...).
	ReachedCutoff bool `json:"reached_cutoff"`
	// TimeToCutoffSeconds is the time to the stop, s; when ReachedCutoff is false it is
	// the time the forecast covered (e.g. the horizon), a lower bound.
	TimeToCutoffSeconds float64 `json:"time_to_cutoff_seconds"`
	// Low and high ends of the ±1σ range, s; present when --soc-sigma or
	// --capacity-sigma is given.
	TimeToCutoffLowSeconds  *float64 `json:"time_to_cutoff_low_seconds,omitempty"`
	TimeToCutoffHighSeconds *float64 `json:"time_to_cutoff_high_seconds,omitempty"`
	ChargeAmpHours          float64  `json:"charge_amp_hours"`
	EnergyWattHours         float64  `json:"energy_watt_hours"`
	// FinalStateOfCharge is the state of charge at the stop: the charge left (stranded)
	// at this load.
	FinalStateOfCharge float64        `json:"final_state_of_charge"`
	FinalVoltageVolts  float64        `json:"final_voltage_volts"`
	FinalCurrentAmps   float64        `json:"final_current_amps"`
	StartVoltageVolts  float64        `json:"start_voltage_volts"`
	StartCurrentAmps   float64        `json:"start_current_amps"`
	CutoffVoltageVolts float64        `json:"cutoff_voltage_volts"`
	Steps              int            `json:"steps"`
	Trace              []traceRowJSON `json:"trace,omitempty"`
	Warnings           []string       `json:"warnings"`
	Cautions           []string       `json:"cautions"`
}

// traceRowJSON is one sample of the forecast's trace.
type traceRowJSON struct {
	TimeSeconds     float64   `json:"time_seconds"`
	StateOfCharge   float64   `json:"state_of_charge"`
	VoltageVolts    float64   `json:"voltage_volts"`
	CurrentAmps     float64   `json:"current_amps"`
	PowerWatts      float64   `json:"power_watts"`
	RCVoltagesVolts []float64 `json:"rc_voltages_volts,omitempty"`
}

func runForecast(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if onServer(args) { // a stored battery on a running server (client_forecast.go)
		return runForecastRemote(ctx, args, stdout, stderr)
	}
	fs := newFlagSet("forecast", stderr)
	pf := addPackFlags(fs, true)
	floor := fs.Float64("soc-floor", 0, "also stop when the state of charge falls to this fraction (0: empty)")
	socSigma := fs.Float64("soc-sigma", 0, "standard deviation of --soc, a fraction (gives a low/high time range)")
	capSigma := fs.Float64("capacity-sigma", 0, "standard deviation of the capacity, a fraction of it (gives a low/high time range)")
	horizonH := fs.Float64("horizon-hours", 1000, "give up after this many hours and report that the cut-off is not reached")
	tracePoints := fs.Int("trace-points", 0, "include a trace of this many evenly spaced samples in the JSON (0: none; at least 2)")
	traceOut := fs.String("trace-out", "", "write the trace (--trace-points samples, default 200) as CSV to this file")
	asJSON := fs.Bool("json", false, "print JSON instead of a table")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast forecast --type TYPE --soc X --temperature-celsius T (--current-amps A | --power-watts W | --resistance-ohms R | --profile FILE.csv) [--series S --parallel P] [--cutoff-volts V] [--json]")
		fmt.Fprintln(stderr, "Forecasts the time until the pack reaches its cut-off voltage under the load, with the charge and energy delivered.")
		fmt.Fprintln(stderr, "Current and power are positive on discharge. --cutoff-volts is the PACK voltage (cells in series × volts per cell).")
		fmt.Fprintln(stderr, "A --profile repeats until the cut-off unless --repeat=false.")
		fmt.Fprintln(stderr, "With --battery NAME [--server ADDR] it asks a running server about a stored battery instead (add -h for those flags).")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	sp, desc, err := pf.problem()
	if err != nil {
		return err
	}
	if !cell.Finite(*horizonH) || *horizonH <= 0 || *horizonH > 100000 {
		return fmt.Errorf("%w: --horizon-hours must be in (0, 100000], got %g", errUsage, *horizonH)
	}
	if *traceOut == "-" && *asJSON {
		return fmt.Errorf("%w: --trace-out - and --json would both write to standard output; give --trace-out a file", errUsage)
	}
	n := *tracePoints
	if *traceOut != "" && n == 0 {
		n = 200
	}
	prob := &forecast.Problem{Problem: *sp, SOCFloor: *floor, SOCSigma: *socSigma, CapacitySigma: *capSigma}
	res, err := forecast.Run(nil, prob, &forecast.Settings{Horizon: *horizonH * 3600, TracePoints: n})
	if err != nil {
		return err
	}
	if *traceOut != "" {
		if err := writeTraceCSV(*traceOut, stdout, res.Trace, len(sp.Pack.Type.Branches)); err != nil {
			return fmt.Errorf("write %s: %w", *traceOut, err)
		}
	}
	out := forecastJSON{
		Type: sp.Pack.Type.Name, Series: sp.Pack.Series, Parallel: sp.Pack.Parallel, Load: desc,
		Status: res.Status.String(), StatusDescription: res.Status.Describe(), ReachedCutoff: res.Status.Reached(),
		TimeToCutoffSeconds: res.Seconds, ChargeAmpHours: res.AmpHours, EnergyWattHours: res.WattHours,
		FinalStateOfCharge: res.Final.SOC, FinalVoltageVolts: res.FinalVolts, FinalCurrentAmps: res.FinalAmps,
		StartVoltageVolts: res.StartVolts, StartCurrentAmps: res.StartAmps, CutoffVoltageVolts: res.CutoffVolts,
		Steps: res.Steps, Warnings: res.Warnings, Cautions: []string{dischargeCaution},
	}
	if out.Warnings == nil {
		out.Warnings = []string{}
	}
	sigma := *socSigma > 0 || *capSigma > 0
	if sigma {
		out.TimeToCutoffLowSeconds, out.TimeToCutoffHighSeconds = &res.LowSeconds, &res.HighSeconds
	}
	if *tracePoints > 0 {
		nb := len(sp.Pack.Type.Branches)
		for _, s := range res.Trace {
			out.Trace = append(out.Trace, traceRowJSON{
				TimeSeconds: s.Time, StateOfCharge: s.SOC, VoltageVolts: s.Volts, CurrentAmps: s.Amps,
				PowerWatts: s.Watts, RCVoltagesVolts: append([]float64(nil), s.RC[:nb]...),
			})
		}
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(out)
	}
	if *traceOut == "-" {
		// The CSV owns standard output; the warnings and the caution still reach the user.
		for _, m := range res.Warnings {
			fmt.Fprintln(stderr, "warning:", m)
		}
		fmt.Fprintln(stderr, dischargeCaution)
		return nil
	}
	p := sp.Pack
	w := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintf(w, "pack\t%s, %ds%dp (%.4g V nominal, %.4g Ah), start %.1f %% at %g °C\n", p.Type.Name, p.Series, p.Parallel,
		p.NominalVolts(), p.CapacityAh(), 100*prob.Initial.SOC, prob.Celsius)
	fmt.Fprintf(w, "load\t%s; at the start %.4g A at %.4g V\n", desc, res.StartAmps, res.StartVolts)
	fmt.Fprintf(w, "cut-off\t%.4g V pack (%.4g V per cell)\n", res.CutoffVolts, res.CutoffVolts/float64(p.Series))
	fmt.Fprintf(w, "result\t%s\n", res.Status.Describe())
	label := "time covered"
	switch res.Status {
	case forecast.StatusCutoff:
		label = "time to cut-off"
	case forecast.StatusEmpty:
		label = "time to empty"
	case forecast.StatusSOCFloor:
		label = "time to floor"
	case forecast.StatusPowerLimit:
		label = "time to power limit"
	}
	fmt.Fprintf(w, "%s\t%s\n", label, humanSeconds(res.Seconds))
	if sigma {
		fmt.Fprintf(w, "range (±1σ)\t%s … %s\n", humanSeconds(res.LowSeconds), humanSeconds(res.HighSeconds))
	}
	fmt.Fprintf(w, "charge delivered\t%.4g Ah\n", res.AmpHours)
	fmt.Fprintf(w, "energy delivered\t%.4g Wh\n", res.WattHours)
	fmt.Fprintf(w, "at the stop\t%.4g V, %.4g A, %.1f %% state of charge left at this load\n",
		res.FinalVolts, res.FinalAmps, 100*math.Max(0, res.Final.SOC))
	if err := w.Flush(); err != nil {
		return err
	}
	for _, m := range res.Warnings {
		fmt.Fprintln(stdout, "warning:", m)
	}
	_, err = fmt.Fprintln(stdout, dischargeCaution)
	return err
}
