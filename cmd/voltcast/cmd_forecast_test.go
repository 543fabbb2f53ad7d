package main

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/table"
)

// runVoltcast runs the tool in process and returns the exit code, stdout and stderr.
func runVoltcast(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(context.Background(), args, &out, &errb)
	return code, out.String(), errb.String()
}

// writeIdealType writes a JSON parameter file for the ideal cell of
// ../shared/REFERENCE.md example E1 (common practice: capacity ÷ current): capacityAh,
// no resistance, an OCV nearly flat from 3.6 V down to 3.5 V that drops to 2.0 V in
// the last 10⁻⁵ of the charge, through the 3.0 V cut-off.
func writeIdealType(t *testing.T, capacityAh float64) string {
	t.Helper()
	ocv, err := table.NewSurface([]float64{0, 1e-5, 0.5, 1}, []float64{cell.Kelvin(25)}, [][]float64{{2.0, 3.5, 3.55, 3.6}})
	if err != nil {
		t.Fatal(err)
	}
	typ := cell.Type{
		Name: "test-ideal", Chemistry: cell.ChemistryNMC, ChargeMethod: cell.ChargeCCCV,
		CapacityAh: capacityAh, NominalVolts: 3.55, OCV: ocv,
		Limits: cell.Limits{
			ChargeVolts: 4.2, CutoffVolts: 3.0, FloorVolts: 2.5, MaxChargeRate: 1, StandardChargeRate: 0.5,
			MaxDischargeRate: 2, ChargeMinCelsius: 0, ChargeMaxCelsius: 45, DischargeMinCelsius: -20, DischargeMaxCelsius: 60,
		},
	}
	b, err := json.Marshal(&typ)
	if err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), "ideal.json")
	if err := os.WriteFile(p, b, 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

type forecastOut struct {
	Status                  string   `json:"status"`
	ReachedCutoff           bool     `json:"reached_cutoff"`
	TimeToCutoffSeconds     *float64 `json:"time_to_cutoff_seconds"`
	TimeToCutoffLowSeconds  *float64 `json:"time_to_cutoff_low_seconds"`
	TimeToCutoffHighSeconds *float64 `json:"time_to_cutoff_high_seconds"`
	ChargeAmpHours          float64  `json:"charge_amp_hours"`
	EnergyWattHours         float64  `json:"energy_watt_hours"`
	FinalStateOfCharge      *float64 `json:"final_state_of_charge"`
	FinalVoltageVolts       float64  `json:"final_voltage_volts"`
	CutoffVoltageVolts      float64  `json:"cutoff_voltage_volts"`
	Trace                   []struct {
		TimeSeconds float64 `json:"time_seconds"`
	} `json:"trace"`
	Warnings []string `json:"warnings"`
	Cautions []string `json:"cautions"`
}

func forecastJSONOf(t *testing.T, args ...string) forecastOut {
	t.Helper()
	code, out, errs := runVoltcast(t, append([]string{"forecast"}, args...)...)
	if code != 0 {
		t.Fatalf("voltcast forecast %s: exit %d: %s", strings.Join(args, " "), code, errs)
	}
	var f forecastOut
	if err := json.Unmarshal([]byte(out), &f); err != nil {
		t.Fatalf("voltcast forecast --json output is not JSON: %v\n%s", err, out)
	}
	if f.TimeToCutoffSeconds == nil || f.FinalStateOfCharge == nil || len(f.Cautions) == 0 {
		t.Fatalf("voltcast forecast --json lacks time_to_cutoff_seconds, final_state_of_charge or cautions:\n%s", out)
	}
	return f
}

// TestForecastE1 drives the acceptance form with a JSON parameter file of the ideal
// cell: 2.4 Ah at 1.2 A lasts 2.0 h (REFERENCE.md E1); on a 4s2p pack, 2.4 A. The
// ideal cell's cut-off lies in the last 10⁻⁵ of its charge, so 7200 s − 0.072 s to
// 7200 s is right (model/forecast TestIdealRuntimeE1).
func TestForecastE1(t *testing.T) {
	typ := writeIdealType(t, 2.4)
	for _, c := range []struct {
		series, parallel string
		amps             string
	}{{"1", "1", "1.2"}, {"4", "2", "2.4"}} {
		f := forecastJSONOf(t, "--type", typ, "--soc", "1", "--temperature-celsius", "25", "--current-amps", c.amps,
			"--series", c.series, "--parallel", c.parallel, "--json")
		if got := *f.TimeToCutoffSeconds; f.Status != "cutoff" || !f.ReachedCutoff || got < 7200-0.08 || got > 7200+1e-3 {
			t.Errorf("%ss%sp at %s A: %s after %.4f s; E1 gives 7200 s", c.series, c.parallel, c.amps, f.Status, got)
		}
		if f.TimeToCutoffLowSeconds != nil || f.TimeToCutoffHighSeconds != nil {
			t.Errorf("low/high seconds present without a sigma")
		}
	}
}

// TestForecastPackCutoff checks that --cutoff-volts is a pack voltage, and the ±1σ range
// against the ideal cell's proportionality t = z·Q/I (E1): from 0.8 ± 0.05 of 2.4 Ah at
// 1.2 A, 5760 s ± 360 s.
func TestForecastPackCutoff(t *testing.T) {
	typ := writeIdealType(t, 2.4)
	f := forecastJSONOf(t, "--type", typ, "--soc", "0.8", "--temperature-celsius", "25", "--current-amps", "1.2",
		"--series", "4", "--cutoff-volts", "12", "--soc-sigma", "0.05", "--json")
	if f.CutoffVoltageVolts != 12 || math.Abs(f.FinalVoltageVolts-12) > 1e-3 {
		t.Errorf("pack cut-off 12 V: applied %g V, stopped at %g V", f.CutoffVoltageVolts, f.FinalVoltageVolts)
	}
	if f.TimeToCutoffLowSeconds == nil || f.TimeToCutoffHighSeconds == nil {
		t.Fatal("no low/high seconds with --soc-sigma")
	}
	if lo, hi := *f.TimeToCutoffLowSeconds, *f.TimeToCutoffHighSeconds; math.Abs(lo-5400) > 0.2 || math.Abs(hi-6120) > 0.2 {
		t.Errorf("range %.2f … %.2f s; want 5400 … 6120 s", lo, hi)
	}
}

func TestForecastLoads(t *testing.T) {
	base := []string{"--type", "generic-nmc-18650", "--soc", "0.9", "--temperature-celsius", "25", "--series", "4", "--parallel", "2", "--json"}
	prof := filepath.Join(t.TempDir(), "duty.csv")
	if err := os.WriteFile(prof, []byte("duration_s,kind,value\n# a pulse and a rest\n20,current,15\n40,rest,\n30,power,40\n10,resistance,3\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, load := range [][]string{
		{"--current-amps", "6"}, {"--power-watts", "80"}, {"--resistance-ohms", "2.5"}, {"--profile", prof},
	} {
		f := forecastJSONOf(t, append(base, load...)...)
		if !f.ReachedCutoff || *f.TimeToCutoffSeconds <= 0 || f.ChargeAmpHours <= 0 || f.EnergyWattHours <= 0 {
			t.Errorf("%v: %s after %g s, %g Ah, %g Wh", load, f.Status, *f.TimeToCutoffSeconds, f.ChargeAmpHours, f.EnergyWattHours)
		}
		// Energy over charge is the mean pack voltage: between the cut-off and full.
		if v := f.EnergyWattHours / f.ChargeAmpHours; v < 12 || v > 4*4.2 {
			t.Errorf("%v: mean voltage %g V is outside 12 … 16.8 V", load, v)
		}
	}
	f := forecastJSONOf(t, append(base, "--current-amps", "6", "--trace-points", "5")...)
	if len(f.Trace) != 5 || f.Trace[4].TimeSeconds != *f.TimeToCutoffSeconds {
		t.Errorf("trace of %d points; want 5 ending at %g s", len(f.Trace), *f.TimeToCutoffSeconds)
	}
	// Does not reach: a tiny current, a short horizon.
	f = forecastJSONOf(t, append(base, "--current-amps", "0.001", "--horizon-hours", "10")...)
	if f.Status != "horizon" || f.ReachedCutoff || *f.TimeToCutoffSeconds != 36000 {
		t.Errorf("tiny load: status %s, reached %v, %g s; want horizon at 36000 s", f.Status, f.ReachedCutoff, *f.TimeToCutoffSeconds)
	}
}

func TestForecastTable(t *testing.T) {
	code, out, errs := runVoltcast(t, "forecast", "--type", "generic-nmc-18650", "--soc", "0.8", "--temperature-celsius", "25",
		"--current-amps", "9", "--soc-sigma", "0.03", "--capacity-sigma", "0.05")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{"time to cut-off", "range (±1σ)", "charge delivered", "energy delivered", "warning:", "caution:", "datasheet"} {
		if !strings.Contains(out, want) {
			t.Errorf("table output lacks %q:\n%s", want, out)
		}
	}
}

// TestForecastErrors checks that bad input gives one line on stderr and a non-zero exit.
func TestForecastErrors(t *testing.T) {
	ok := []string{"--type", "generic-nmc-18650", "--soc", "0.8", "--temperature-celsius", "25"}
	cases := []struct {
		args []string
		code int
		want string
	}{
		{ok[:6:6], 2, "give exactly one load"},
		{append(ok[:6:6], "--current-amps", "1", "--power-watts", "3"), 2, "give exactly one load"},
		{append(ok[:6:6], "--current-amps", "-2"), 1, "positive current"},
		{append(ok[:6:6], "--current-amps", "NaN"), 1, "must be finite"},
		{append(ok[:6:6], "--current-amps", "+Inf"), 1, "must be finite"},
		{[]string{"--type", "generic-nmc-18650", "--soc", "1.5", "--temperature-celsius", "25", "--current-amps", "1"}, 1, "state of charge"},
		{[]string{"--type", "generic-nmc-18650", "--soc", "NaN", "--temperature-celsius", "25", "--current-amps", "1"}, 2, "--soc must be a number, got NaN"},
		{[]string{"--type", "generic-nmc-18650", "--soc", "0.5", "--temperature-celsius", "150", "--current-amps", "1"}, 1, "temperature"},
		{[]string{"--type", "generic-nmc-18650", "--soc", "0.5", "--current-amps", "1"}, 2, "--temperature-celsius is required"},
		{[]string{"--type", "no-such-cell", "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"}, 2, "no-such-cell"},
		{append(ok[:6:6], "--current-amps", "1", "--series", "0"), 1, "series"},
		{append(ok[:6:6], "--current-amps", "1", "--soc-sigma", "2"), 1, "soc_sigma"},
		{append(ok[:6:6], "--profile", "/nonexistent/profile.csv"), 1, "profile"},
		{append(ok[:6:6], "--current-amps", "1", "--bogus"), 2, "bogus"},
	}
	for _, c := range cases {
		code, out, errs := runVoltcast(t, append([]string{"forecast"}, c.args...)...)
		lines := strings.Count(strings.TrimRight(errs, "\n"), "\n") + 1
		if code != c.code || !strings.Contains(errs, c.want) || out != "" {
			t.Errorf("forecast %v: exit %d, stderr %q; want exit %d mentioning %q and no output", c.args, code, errs, c.code, c.want)
		} else if c.code == 1 && lines != 1 {
			t.Errorf("forecast %v: %d lines on stderr; want one", c.args, lines)
		}
	}
}
