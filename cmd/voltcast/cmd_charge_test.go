package main

import (
	"encoding/json"
	"math"
	"strings"
	"testing"
)

func TestChargeJSON(t *testing.T) {
	code, out, errs := runVoltcast(t, "charge", "--type", "generic-nmc-18650", "--series", "4", "--soc", "0.1",
		"--temperature-celsius", "25", "--charger-current-amps", "1.5", "--charger-efficiency", "0.9", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var got chargeJSON
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatalf("%v\n%s", err, out)
	}
	if got.TimeToFullSeconds == nil || *got.TimeToFullSeconds <= 0 || len(got.Phases) < 2 {
		t.Fatalf("time to full %v, phases %d; want a CC-CV plan", got.TimeToFullSeconds, len(got.Phases))
	}
	// Coulomb counting (REFERENCE.md §2.2): 90 % of 3.0 Ah at η = 0.995 is about 2.71 Ah.
	if math.Abs(got.Full.ChargeAmpHours-0.9*3/0.995) > 0.02 {
		t.Errorf("charge %.4f Ah; want ≈ %.4f", got.Full.ChargeAmpHours, 0.9*3/0.995)
	}
	if math.Abs(got.Full.SupplyEnergyWattHours-got.Full.EnergyWattHours/0.9) > 1e-9 {
		t.Errorf("supply %.4f Wh; want %.4f ÷ 0.9", got.Full.SupplyEnergyWattHours, got.Full.EnergyWattHours)
	}
	if got.Phases[0].StartCurrentAmps >= 0 {
		t.Errorf("charge current %g; want negative (positive = discharge)", got.Phases[0].StartCurrentAmps)
	}
	if len(got.Cautions) == 0 || !strings.Contains(strings.Join(got.Cautions, " "), "datasheet") {
		t.Errorf("cautions %q; want the datasheet note", got.Cautions)
	}
}

func TestChargeTextDeadline(t *testing.T) {
	code, out, errs := runVoltcast(t, "charge", "--type", "generic-lfp-26650", "--series", "4", "--soc", "0.2",
		"--target-soc", "0.8", "--temperature-celsius", "20", "--charger-current-amps", "3.3", "--deadline", "6h")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{"constant-current", "to 80 %:", "cautions:", "datasheet", "trickle"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "up to 3.3 A") {
		t.Errorf("a 6 h deadline for 60 %% of 3.3 Ah should need well under 3.3 A:\n%s", out)
	}
}

func TestChargeErrors(t *testing.T) {
	for _, c := range []struct {
		name string
		code int
		want string
		args []string
	}{
		{"primary", 1, "primary cells must never be charged",
			[]string{"--type", "generic-alkaline-aa", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "0.2"}},
		{"cold", 1, "temperature outside the charge window",
			[]string{"--type", "generic-nmc-18650", "--soc", "0.5", "--temperature-celsius", "-5", "--charger-current-amps", "1"}},
		{"soc", 1, "state.soc",
			[]string{"--type", "generic-nmc-18650", "--soc", "1.2", "--temperature-celsius", "20", "--charger-current-amps", "1"}},
		{"nan", 1, "state.soc",
			[]string{"--type", "generic-nmc-18650", "--soc", "NaN", "--temperature-celsius", "20", "--charger-current-amps", "1"}},
		{"negative current", 1, "max_current_amps",
			[]string{"--type", "generic-nmc-18650", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "-1"}},
		{"efficiency", 1, "efficiency",
			[]string{"--type", "generic-nmc-18650", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "1", "--charger-efficiency", "0"}},
		{"missing temperature", 2, "--temperature-celsius is required",
			[]string{"--type", "generic-nmc-18650", "--soc", "0.5", "--charger-current-amps", "1"}},
		{"unknown type", 2, "unknown cell type",
			[]string{"--type", "no-such", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "1"}},
		{"negative deadline", 2, "--deadline",
			[]string{"--type", "generic-nmc-18650", "--soc", "0.5", "--temperature-celsius", "20", "--charger-current-amps", "1", "--deadline", "-1h"}},
	} {
		code, out, errs := runVoltcast(t, append([]string{"charge"}, c.args...)...)
		if code != c.code || !strings.Contains(errs, c.want) {
			t.Errorf("%s: exit %d, stderr %q; want exit %d mentioning %q", c.name, code, errs, c.code, c.want)
		}
		if strings.Count(strings.TrimRight(errs, "\n"), "\n") != 0 || out != "" {
			t.Errorf("%s: want one line on stderr and nothing on stdout; got %q / %q", c.name, errs, out)
		}
	}
}
