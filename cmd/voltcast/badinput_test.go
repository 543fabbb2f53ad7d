package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/model/chem"
)

// writeTypeVariant writes the built-in generic-nmc-18650 type as a JSON parameter file
// after mut changes its generic JSON form.
func writeTypeVariant(t *testing.T, name string, mut func(m map[string]any)) string {
	t.Helper()
	typ, err := chem.Lookup("generic-nmc-18650")
	if err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(typ)
	if err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b, &m); err != nil {
		t.Fatal(err)
	}
	mut(m)
	if b, err = json.Marshal(m); err != nil {
		t.Fatal(err)
	}
	p := filepath.Join(t.TempDir(), name+".json")
	if err := os.WriteFile(p, b, 0o600); err != nil {
		t.Fatal(err)
	}
	return p
}

// obj returns m[k] as a JSON object.
func obj(m map[string]any, k string) map[string]any { return m[k].(map[string]any) }

// TestBadInputOneLine drives every offline subcommand, and the flag checks of the
// client subcommands (which must refuse before dialling), with impossible input: each
// must exit non-zero with one line on stderr naming the problem, and print nothing.
func TestBadInputOneLine(t *testing.T) {
	nmc := []string{"--type", "generic-nmc-18650"}
	at := func(sub string, extra ...string) []string {
		return append(append([]string{sub}, nmc...), extra...)
	}
	ocv := func(m map[string]any) []any { return obj(m, "ocv")["values"].([]any)[0].([]any) }
	negCap := writeTypeVariant(t, "neg-capacity", func(m map[string]any) { m["capacity_amp_hours"] = -3.0 })
	negR0 := writeTypeVariant(t, "neg-r0", func(m map[string]any) { obj(m, "series_resistance_ohms")["value"] = -0.01 })
	negRC := writeTypeVariant(t, "neg-rc", func(m map[string]any) {
		obj(m["rc_branches"].([]any)[0].(map[string]any), "resistance_ohms")["value"] = -0.01
	})
	dip := writeTypeVariant(t, "ocv-dip", func(m map[string]any) { ocv(m)[5] = 3.5 })
	knots := writeTypeVariant(t, "soc-knots", func(m map[string]any) { obj(m, "ocv")["soc"].([]any)[5] = 0.35 })
	// A parameter file must not make a primary chemistry chargeable.
	primary := writeTypeVariant(t, "primary-cccv", func(m map[string]any) { m["chemistry"] = "alkaline" })
	huge := filepath.Join(t.TempDir(), "huge.json")
	if err := os.WriteFile(huge, []byte(strings.Repeat(" ", maxTypeFileBytes+1)), 0o600); err != nil {
		t.Fatal(err)
	}
	log := filepath.Join(t.TempDir(), "log.csv")
	if err := os.WriteFile(log, []byte("time_s,current_a,voltage_v,temp_c\n0,0,3.9,25\n1,1,3.85,25\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	const srv = "127.0.0.1:1" // never dialled: the flags are refused first

	for _, c := range []struct {
		name string
		args []string
		code int
		want string
	}{
		// forecast and simulate share the pack flags.
		{"forecast soc NaN", at("forecast", "--soc", "NaN", "--temperature-celsius", "25", "--current-amps", "1"), 2, "--soc must be a number, got NaN"},
		{"forecast temperature NaN", at("forecast", "--soc", "0.5", "--temperature-celsius", "NaN", "--current-amps", "1"), 2, "--temperature-celsius must be a number"},
		{"forecast temperature Inf", at("forecast", "--soc", "0.5", "--temperature-celsius", "Inf", "--current-amps", "1"), 1, "temperature"},
		{"forecast temperature -61", at("forecast", "--soc", "0.5", "--temperature-celsius", "-61", "--current-amps", "1"), 1, "-60 to 100"},
		{"forecast soc below 0", at("forecast", "--soc", "-0.1", "--temperature-celsius", "25", "--current-amps", "1"), 1, "state of charge"},
		{"forecast current -Inf", at("forecast", "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "-Inf"), 1, "must be finite"},
		{"forecast power NaN", at("forecast", "--soc", "0.5", "--temperature-celsius", "25", "--power-watts", "NaN"), 1, "must be finite"},
		{"forecast resistance negative", at("forecast", "--soc", "0.5", "--temperature-celsius", "25", "--resistance-ohms", "-1"), 1, "resistance"},
		{"forecast cutoff NaN", at("forecast", "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1", "--cutoff-volts", "NaN"), 1, "pack_cutoff_volts"},
		{"forecast capacity factor NaN", at("forecast", "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1", "--capacity-factor", "NaN"), 1, "capacity_factor"},
		{"forecast json and csv on stdout", at("forecast", "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1", "--trace-out", "-", "--json"), 2, "standard output"},
		{"simulate soc NaN", at("simulate", "--soc", "NaN", "--temperature-celsius", "25", "--current-amps", "1"), 2, "--soc must be a number, got NaN"},
		{"simulate current Inf", at("simulate", "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "Inf"), 1, "must be finite"},
		{"simulate temperature 101", at("simulate", "--soc", "0.5", "--temperature-celsius", "101", "--current-amps", "1"), 1, "-60 to 100"},
		{"simulate json and csv on stdout", at("simulate", "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1", "--out", "-", "--json"), 2, "standard output"},
		// Impossible JSON type files.
		{"type negative capacity", []string{"--type", negCap, "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"}, 1, "capacity_amp_hours"},
		{"type negative R0", []string{"--type", negR0, "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"}, 1, "series_resistance_ohms"},
		{"type negative RC resistance", []string{"--type", negRC, "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"}, 1, "rc_branches[0].resistance_ohms"},
		{"type OCV dips", []string{"--type", dip, "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"}, 1, "must not decrease"},
		{"type SOC knots out of order", []string{"--type", knots, "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"}, 1, "increase strictly"},
		{"type primary made chargeable", []string{"--type", primary, "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"}, 1, "primary"},
		{"type file too large", []string{"--type", huge, "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"}, 1, "larger than"},
		{"type file missing", []string{"--type", "./no-such-type.json", "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"}, 1, "no such file"},
	} {
		if !strings.HasPrefix(c.name, "type ") {
			checkOneLine(t, c.name, c.args, c.code, c.want)
			continue
		}
		for _, sub := range []string{"forecast", "simulate"} {
			checkOneLine(t, c.name+" ("+sub+")", append([]string{sub}, c.args...), c.code, c.want)
		}
	}

	for _, c := range []struct {
		name string
		args []string
		code int
		want string
	}{
		{"charge primary file", []string{"charge", "--type", primary, "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "1"}, 1, "primary"},
		{"charge li-mno2", []string{"charge", "--type", "generic-li-mno2-coin", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "0.01"}, 1, "primary cells must never be charged"},
		{"charge temperature 150", at("charge", "--soc", "0.5", "--temperature-celsius", "150", "--charger-current-amps", "1"), 1, "-60 to 100"},
		{"charge current Inf", at("charge", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "Inf"), 1, "max_current_amps"},
		{"charge target NaN", at("charge", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "1", "--target-soc", "NaN"), 1, "target_soc"},
		{"charge power negative", at("charge", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "1", "--charger-power-watts", "-1"), 1, "max_power_watts"},
		{"charge voltage Inf", at("charge", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "1", "--charger-voltage-volts", "Inf"), 1, "max_voltage_volts"},
		{"estimate initial soc NaN", at("estimate", "--in", log, "--out", "-", "--initial-soc", "NaN"), 2, "--initial-soc must be a number, got NaN"},
		{"estimate temperature NaN", at("estimate", "--in", log, "--out", "-", "--initial-soc", "0.5", "--temperature-celsius", "NaN"), 2, "--temperature-celsius must be a number"},
		{"estimate missing file", at("estimate", "--in", "no-such-log.csv", "--out", "-", "--initial-soc", "0.5"), 1, "no such file"},
		{"lifetime end of life NaN", []string{"lifetime", "--in", log, "--end-of-life-fraction", "NaN"}, 2, "--end-of-life-fraction"},
		{"lifetime missing file", []string{"lifetime", "--in", "no-such-capacity.csv"}, 1, "no such file"},
		{"fit missing file", []string{"fit", "--ocv-test", "no-such-ocv.csv", "--pulse-test", "no-such-pulse.csv", "--out", filepath.Join(t.TempDir(), "t.json")}, 1, "no such file"},
		// Client subcommands check their flags before dialling.
		{"remote forecast current Inf", []string{"forecast", "--server", srv, "--battery", "b1", "--current-amps", "Inf"}, 2, "--current-amps must be a finite number"},
		{"remote forecast power NaN", []string{"forecast", "--server", srv, "--battery", "b1", "--power-watts", "NaN"}, 2, "--power-watts must be a finite number"},
		{"remote forecast temperature 200", []string{"forecast", "--server", srv, "--battery", "b1", "--current-amps", "1", "--temperature-celsius", "200"}, 2, "-60 to 100"},
		{"remote charge target 2", []string{"charge", "--server", srv, "--battery", "b1", "--target-soc", "2"}, 2, "--target-soc"},
		{"remote charge current NaN", []string{"charge", "--server", srv, "--battery", "b1", "--charger-current-amps", "NaN"}, 2, "--charger-current-amps"},
		{"remote charge efficiency 0", []string{"charge", "--server", srv, "--battery", "b1", "--charger-efficiency", "0"}, 2, "--charger-efficiency"},
		{"remote charge temperature NaN", []string{"charge", "--server", srv, "--battery", "b1", "--temperature-celsius", "NaN"}, 2, "-60 to 100"},
		{"ingest temperature Inf", []string{"ingest", "--server", srv, "--battery", "b1", "--in", log, "--start-time", "2025-06-01T08:00:00Z", "--temperature-celsius", "Inf"}, 2, "-60 to 100"},
		{"ingest chunk 0", []string{"ingest", "--server", srv, "--battery", "b1", "--in", log, "--start-time", "2025-06-01T08:00:00Z", "--chunk-samples", "0"}, 2, "--chunk-samples"},
		{"create series wraps int32", []string{"batteries", "create", "b1", "--server", srv, "--type", "generic-nmc-18650", "--series", "4294967297"}, 2, "--series must be 1 to 1000"},
		{"create initial soc NaN", []string{"batteries", "create", "b1", "--server", srv, "--type", "generic-nmc-18650", "--series", "4", "--initial-soc", "NaN"}, 2, "--initial-soc"},
		{"create initial soc 1.5", []string{"batteries", "create", "b1", "--server", srv, "--type", "generic-nmc-18650", "--series", "4", "--initial-soc", "1.5"}, 2, "--initial-soc"},
		{"health end of life NaN", []string{"health", "--server", srv, "--battery", "b1", "--end-of-life-fraction", "NaN"}, 2, "--end-of-life-fraction"},
	} {
		checkOneLine(t, c.name, c.args, c.code, c.want)
	}
}

// checkOneLine runs the tool and checks for exit code, one line on stderr mentioning
// want, and no output.
func checkOneLine(t *testing.T, name string, args []string, code int, want string) {
	t.Helper()
	got, out, errs := runVoltcast(t, args...)
	lines := strings.Count(strings.TrimRight(errs, "\n"), "\n") + 1
	if got != code || !strings.Contains(errs, want) || lines != 1 || out != "" {
		t.Errorf("%s: voltcast %q: exit %d, stderr %q, stdout %q; want exit %d, one line mentioning %q, no output",
			name, args, got, errs, out, code, want)
	}
}

// TestSimulateChargingCautions checks that a simulation whose load charges the pack
// shows the chemistry's charge cautions, and warns when it charges outside the charge
// temperature window (0 to 45 °C for the generic NMC type, BU-410 via REFERENCE.md) or
// above the 4.20 V per-cell charge voltage (common practice for NMC); a discharge shows
// only the discharge caution.
func TestSimulateChargingCautions(t *testing.T) {
	base := []string{"simulate", "--type", "generic-nmc-18650", "--soc", "0.5", "--json"}
	var s struct {
		Warnings []string `json:"warnings"`
		Cautions []string `json:"cautions"`
	}
	decode := func(args ...string) {
		t.Helper()
		code, out, errs := runVoltcast(t, append(append([]string{}, base...), args...)...)
		if code != 0 {
			t.Fatalf("voltcast %q: exit %d: %s", args, code, errs)
		}
		s.Warnings, s.Cautions = nil, nil
		if err := json.Unmarshal([]byte(out), &s); err != nil {
			t.Fatalf("%v\n%s", err, out)
		}
	}
	decode("--temperature-celsius", "-10", "--current-amps", "-1", "--horizon-hours", "2")
	all := strings.Join(s.Cautions, " ")
	if !strings.Contains(all, "Do not discharge") || !strings.Contains(all, "datasheet") || !strings.Contains(all, "Lithium-ion") {
		t.Errorf("charging simulation cautions %q; want the discharge and the lithium charge cautions", s.Cautions)
	}
	warn := strings.Join(s.Warnings, " ")
	if !strings.Contains(warn, "charge window 0 to 45") || !strings.Contains(warn, "above the 4.200 V charge limit") {
		t.Errorf("charging at -10 °C to full: warnings %q; want the charge window and the charge voltage", s.Warnings)
	}
	decode("--temperature-celsius", "25", "--current-amps", "1", "--horizon-hours", "0.5")
	if len(s.Warnings) != 0 || len(s.Cautions) != 1 || !strings.Contains(s.Cautions[0], "datasheet") {
		t.Errorf("discharge simulation: warnings %q, cautions %q; want no warnings and the discharge caution", s.Warnings, s.Cautions)
	}
	// With the CSV on standard output, the cautions go to standard error.
	code, out, errs := runVoltcast(t, "simulate", "--type", "generic-nmc-18650", "--soc", "0.5", "--temperature-celsius", "25",
		"--current-amps", "-1", "--horizon-hours", "0.01", "--out", "-")
	if code != 0 || !strings.HasPrefix(out, "time_s,") || !strings.Contains(errs, "Lithium-ion") || strings.Contains(out, "caution") {
		t.Errorf("--out - while charging: exit %d, stderr %q; want the CSV alone on stdout and the cautions on stderr", code, errs)
	}
}
