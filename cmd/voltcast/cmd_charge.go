package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"text/tabwriter"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/charge"
)

func init() {
	register("charge", command{
		summary: "plan a charge: phases, time to a target SOC and to full, energy, warnings",
		run:     runCharge,
	})
}

// chargeTotalsJSON is a point of the charge in the JSON output.
type chargeTotalsJSON struct {
	Reached               bool    `json:"reached"`
	TimeSeconds           float64 `json:"time_seconds"`
	StateOfCharge         float64 `json:"state_of_charge"`
	ChargeAmpHours        float64 `json:"charge_amp_hours"`
	EnergyWattHours       float64 `json:"energy_watt_hours"`
	SupplyEnergyWattHours float64 `json:"supply_energy_watt_hours"`
}

// chargePhaseJSON is one phase in the JSON output. Currents are negative on charge.
type chargePhaseJSON struct {
	Kind               string  `json:"kind"`
	StartSeconds       float64 `json:"start_seconds"`
	EndSeconds         float64 `json:"end_seconds"`
	StartCurrentAmps   float64 `json:"start_current_amps"`
	EndCurrentAmps     float64 `json:"end_current_amps"`
	StartVoltageVolts  float64 `json:"start_voltage_volts"`
	EndVoltageVolts    float64 `json:"end_voltage_volts"`
	StartStateOfCharge float64 `json:"start_state_of_charge"`
	EndStateOfCharge   float64 `json:"end_state_of_charge"`
	ChargeAmpHours     float64 `json:"charge_amp_hours"`
	EnergyWattHours    float64 `json:"energy_watt_hours"`
}

type chargeWarningJSON struct {
	Code    string `json:"code"`
	Message string `json:"message"`
}

// chargeJSON is the --json output of voltcast charge.
type chargeJSON struct {
	Type                   string              `json:"type"`
	Series                 int                 `json:"series"`
	Parallel               int                 `json:"parallel"`
	ChargeMethod           string              `json:"charge_method"`
	CurrentSign            string              `json:"current_sign"`
	ChargeCurrentAmps      float64             `json:"charge_current_amps"`
	ChargeVoltageVolts     float64             `json:"charge_voltage_volts"`
	FloatVoltageVolts      float64             `json:"float_voltage_volts,omitempty"`
	TerminationCurrentAmps float64             `json:"termination_current_amps,omitempty"`
	TargetStateOfCharge    float64             `json:"target_state_of_charge"`
	TimeToTargetSeconds    *float64            `json:"time_to_target_seconds"`
	TimeToFullSeconds      *float64            `json:"time_to_full_seconds"`
	Termination            string              `json:"termination"`
	Target                 chargeTotalsJSON    `json:"target"`
	Full                   chargeTotalsJSON    `json:"full"`
	Phases                 []chargePhaseJSON   `json:"phases"`
	Warnings               []chargeWarningJSON `json:"warnings"`
	Cautions               []string            `json:"cautions"`
}

func totalsJSON(t charge.Totals) chargeTotalsJSON {
	return chargeTotalsJSON{Reached: t.Reached, TimeSeconds: t.Seconds, StateOfCharge: t.SOC,
		ChargeAmpHours: t.ChargeAh, EnergyWattHours: t.EnergyWh, SupplyEnergyWattHours: t.SupplyWh}
}

func runCharge(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if onServer(args) { // a stored battery on a running server (client_forecast.go)
		return runChargeRemote(ctx, args, stdout, stderr)
	}
	fs := newFlagSet("charge", stderr)
	typeName := fs.String("type", "", "built-in cell type (see voltcast types) or a JSON parameter file (required)")
	soc := fs.Float64("soc", math.NaN(), "state of charge now, a fraction 0–1 (required)")
	target := fs.Float64("target-soc", 1, "state of charge to reach, a fraction in (0, 1]")
	tempC := fs.Float64("temperature-celsius", math.NaN(), "cell and ambient temperature, °C, held over the charge (required)")
	series := fs.Int("series", 1, "cells in series")
	parallel := fs.Int("parallel", 1, "cells in parallel")
	capFactor := fs.Float64("capacity-factor", 1, "present capacity as a fraction of rated (state of health), in (0, 2]")
	resFactor := fs.Float64("resistance-factor", 1, "present resistance as a multiple of new, in (0, 20]")
	current := fs.Float64("charger-current-amps", 0, "charger current limit, A, a positive magnitude (required)")
	volts := fs.Float64("charger-voltage-volts", 0, "charger voltage limit at the pack, V (0: whatever the chemistry needs)")
	power := fs.Float64("charger-power-watts", 0, "charger output power limit, W (0: none)")
	eff := fs.Float64("charger-efficiency", 0.9, "charger efficiency from supply to pack, in (0, 1]")
	deadline := fs.Duration("deadline", 0, "reach the target within this time with the lowest current that makes it (e.g. 6h; 0: none)")
	termRate := fs.Float64("termination-c-rate", 0, "taper termination current as a C-rate (0: the type's, C/20 by default)")
	asJSON := fs.Bool("json", false, "print JSON instead of tables")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast charge --type TYPE --soc X --temperature-celsius T --charger-current-amps A [flags]")
		fmt.Fprintln(stderr, "Plans a charge for the chemistry. Current is positive when it leaves the pack, so charge")
		fmt.Fprintln(stderr, "currents print negative in JSON. A plan is a model estimate: the cell maker's datasheet,")
		fmt.Fprintln(stderr, "local codes and licensed practice always take precedence.")
		fmt.Fprintln(stderr, "With --battery NAME [--server ADDR] it asks a running server about a stored battery instead (add -h for those flags).")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	given := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { given[f.Name] = true })
	switch {
	case !given["soc"]:
		return fmt.Errorf("%w: --soc is required (a fraction 0–1)", errUsage)
	case !given["temperature-celsius"]:
		return fmt.Errorf("%w: --temperature-celsius is required", errUsage)
	case !given["charger-current-amps"]:
		return fmt.Errorf("%w: --charger-current-amps is required (a positive number of amperes)", errUsage)
	case *deadline < 0:
		return fmt.Errorf("%w: --deadline must not be negative, got %s", errUsage, *deadline)
	}
	typ, err := loadType(*typeName)
	if err != nil {
		return err
	}
	p := cell.Pack{Type: typ, Series: *series, Parallel: *parallel, CapacityFactor: *capFactor, ResistanceFactor: *resFactor}
	if err := p.Validate(); err != nil {
		return fmt.Errorf("invalid pack: %w", err)
	}
	res, err := charge.Plan(&charge.Request{
		Pack:               p,
		State:              cell.State{SOC: *soc},
		TemperatureCelsius: *tempC,
		TargetSOC:          *target,
		MaxCurrentAmps:     *current,
		MaxVoltageVolts:    *volts,
		MaxPowerWatts:      *power,
		Efficiency:         *eff,
		DeadlineSeconds:    deadline.Seconds(),
		TerminationRate:    *termRate,
	}, nil)
	if err != nil {
		if errors.Is(err, cell.ErrInvalid) {
			return fmt.Errorf("invalid charge request: %w", err)
		}
		return err
	}
	if *asJSON {
		return writeChargeJSON(stdout, typ, p, res)
	}
	return writeChargeText(stdout, typ, p, res)
}

func writeChargeJSON(w io.Writer, typ *cell.Type, p cell.Pack, res *charge.Result) error {
	out := chargeJSON{
		Type: typ.Name, Series: p.Series, Parallel: p.Parallel, ChargeMethod: string(res.Method),
		CurrentSign:            "positive current leaves the pack (discharge); charge currents are negative",
		ChargeCurrentAmps:      res.CurrentAmps,
		ChargeVoltageVolts:     res.ChargeVolts,
		FloatVoltageVolts:      res.FloatVolts,
		TerminationCurrentAmps: res.TerminationAmps,
		TargetStateOfCharge:    res.TargetSOC,
		Termination:            string(res.Termination),
		Target:                 totalsJSON(res.Target),
		Full:                   totalsJSON(res.Full),
		Phases:                 []chargePhaseJSON{},
		Warnings:               []chargeWarningJSON{},
		Cautions:               res.Cautions,
	}
	if res.Target.Reached {
		out.TimeToTargetSeconds = &res.Target.Seconds
	}
	if res.Full.Reached {
		out.TimeToFullSeconds = &res.Full.Seconds
	}
	for _, ph := range res.Phases {
		out.Phases = append(out.Phases, chargePhaseJSON{
			Kind: string(ph.Kind), StartSeconds: ph.StartSeconds, EndSeconds: ph.EndSeconds,
			StartCurrentAmps: ph.StartCurrentAmps, EndCurrentAmps: ph.EndCurrentAmps,
			StartVoltageVolts: ph.StartVolts, EndVoltageVolts: ph.EndVolts,
			StartStateOfCharge: ph.StartSOC, EndStateOfCharge: ph.EndSOC,
			ChargeAmpHours: ph.ChargeAh, EnergyWattHours: ph.EnergyWh,
		})
	}
	for _, wn := range res.Warnings {
		out.Warnings = append(out.Warnings, chargeWarningJSON{Code: string(wn.Code), Message: wn.Message})
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(out)
}

// hm formats seconds as h:mm.
func hm(s float64) string {
	m := int(math.Round(s / 60))
	return fmt.Sprintf("%d:%02d", m/60, m%60)
}

func writeChargeText(w io.Writer, typ *cell.Type, p cell.Pack, res *charge.Result) error {
	fmt.Fprintf(w, "%s, %ds%dp (%.4g V nominal, %.4g Ah), %s charge at up to %.3g A",
		typ.Name, p.Series, p.Parallel, p.NominalVolts(), p.CapacityAh(), res.Method, res.CurrentAmps)
	if res.Method != cell.ChargeNickel {
		fmt.Fprintf(w, ", %.3f V", res.ChargeVolts)
	}
	if res.FloatVolts > 0 {
		fmt.Fprintf(w, " (float %.3f V)", res.FloatVolts)
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "PHASE\tSTART\tEND\tCHARGE A (into pack)\tVOLTS\tSOC %\tAh\tWh")
	for _, ph := range res.Phases {
		end := hm(ph.EndSeconds)
		if ph.Kind == charge.PhaseFloat && ph.EndSeconds == ph.StartSeconds {
			end = "open"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%.3g → %.3g\t%.3f → %.3f\t%.1f → %.1f\t%.3g\t%.3g\n",
			ph.Kind, hm(ph.StartSeconds), end, math.Abs(ph.StartCurrentAmps), math.Abs(ph.EndCurrentAmps),
			ph.StartVolts, ph.EndVolts, 100*ph.StartSOC, 100*ph.EndSOC, ph.ChargeAh, ph.EnergyWh)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(w)
	point := func(label string, t charge.Totals) {
		if !t.Reached {
			fmt.Fprintf(w, "%-10s not reached (charge ends at %.1f %% SOC after %s)\n", label, 100*t.SOC, hm(t.Seconds))
			return
		}
		fmt.Fprintf(w, "%-10s %s h:mm, %.3g Ah and %.4g Wh into the pack, %.4g Wh from the supply\n",
			label, hm(t.Seconds), t.ChargeAh, t.EnergyWh, t.SupplyWh)
	}
	point(fmt.Sprintf("to %.0f %%:", 100*res.TargetSOC), res.Target)
	point("to full:", res.Full)
	fmt.Fprintf(w, "termination: %s\n", res.Termination)
	if len(res.Warnings) > 0 {
		fmt.Fprintln(w)
		fmt.Fprintln(w, "warnings:")
		for _, wn := range res.Warnings {
			fmt.Fprintf(w, "  [%s] %s\n", wn.Code, wn.Message)
		}
	}
	fmt.Fprintln(w)
	fmt.Fprintln(w, "cautions:")
	for _, c := range res.Cautions {
		fmt.Fprintf(w, "  - %s\n", c)
	}
	return nil
}
