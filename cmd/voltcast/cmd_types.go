package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"text/tabwriter"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
)

func init() {
	register("types", command{
		summary: "list the built-in cell types (generic parameter sets per chemistry)",
		run:     runTypes,
	})
}

// typeSummary is one row of voltcast types --json. Values are per cell.
type typeSummary struct {
	Name                string  `json:"name"`
	Description         string  `json:"description"`
	Chemistry           string  `json:"chemistry"`
	ChargeMethod        string  `json:"charge_method"`
	Rechargeable        bool    `json:"rechargeable"`
	NominalVolts        float64 `json:"nominal_voltage_volts"`
	CapacityAmpHours    float64 `json:"capacity_amp_hours"`
	ChargeVolts         float64 `json:"charge_voltage_volts,omitempty"`
	CutoffVolts         float64 `json:"cutoff_voltage_volts"`
	ChargeMinCelsius    float64 `json:"charge_min_celsius,omitempty"`
	ChargeMaxCelsius    float64 `json:"charge_max_celsius,omitempty"`
	DischargeMinCelsius float64 `json:"discharge_min_celsius"`
	DischargeMaxCelsius float64 `json:"discharge_max_celsius"`
}

func summarise(t *cell.Type) typeSummary {
	s := typeSummary{
		Name: t.Name, Description: t.Description, Chemistry: string(t.Chemistry),
		ChargeMethod: string(t.ChargeMethod), Rechargeable: t.Rechargeable(),
		NominalVolts: t.NominalVolts, CapacityAmpHours: t.CapacityAh,
		CutoffVolts:         t.Limits.CutoffVolts,
		DischargeMinCelsius: t.Limits.DischargeMinCelsius, DischargeMaxCelsius: t.Limits.DischargeMaxCelsius,
	}
	if s.Rechargeable {
		s.ChargeVolts = t.Limits.ChargeVolts
		s.ChargeMinCelsius, s.ChargeMaxCelsius = t.Limits.ChargeMinCelsius, t.Limits.ChargeMaxCelsius
	}
	return s
}

func runTypes(_ context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("types", stderr)
	asJSON := fs.Bool("json", false, "print JSON instead of a table")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast types [--json]")
		fmt.Fprintln(stderr, "Lists the built-in generic cell types; values are per cell, the maker's datasheet overrides them.")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	all := chem.All()
	rows := make([]typeSummary, len(all))
	for i, t := range all {
		rows[i] = summarise(t)
	}
	if *asJSON {
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(struct {
			Types []typeSummary `json:"types"`
		}{rows})
	}
	w := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintln(w, "NAME\tCHEMISTRY\tNOMINAL V\tCAPACITY Ah\tCHARGE\tCHARGE °C\tDISCHARGE °C")
	for _, r := range rows {
		var charge, window string
		switch {
		case r.ChargeMethod == string(cell.ChargeNickel):
			charge = "nickel: CC, -ΔV/timer stop"
			window = fmt.Sprintf("%g…%g", r.ChargeMinCelsius, r.ChargeMaxCelsius)
		case r.Rechargeable:
			charge = fmt.Sprintf("%s to %.2f V", r.ChargeMethod, r.ChargeVolts)
			window = fmt.Sprintf("%g…%g", r.ChargeMinCelsius, r.ChargeMaxCelsius)
		default:
			charge, window = "never (primary)", "never"
		}
		fmt.Fprintf(w, "%s\t%s\t%.2f\t%.3g\t%s\t%s\t%g…%g\n", r.Name, r.Chemistry, r.NominalVolts,
			r.CapacityAmpHours, charge, window, r.DischargeMinCelsius, r.DischargeMaxCelsius)
	}
	if err := w.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(stdout, "Values are per cell and generic; the cell maker's datasheet, local codes and licensed practice take precedence.")
	return nil
}
