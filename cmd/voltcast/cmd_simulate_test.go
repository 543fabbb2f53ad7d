package main

import (
	"encoding/csv"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

func writeProfile(t *testing.T, body string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), "profile.csv")
	if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// TestSimulateE8 runs ../shared/REFERENCE.md example E8 through the tool: Q = 2.5 Ah,
// z0 = 0.80, 1.0 A for 0.5 h gives z = 0.60 (and 0.5 Ah delivered).
func TestSimulateE8(t *testing.T) {
	typ := writeIdealType(t, 2.5)
	prof := writeProfile(t, "duration_s,kind,value\n1800,current,1.0\n")
	code, out, errs := runVoltcast(t, "simulate", "--type", typ, "--soc", "0.8", "--temperature-celsius", "25",
		"--profile", prof, "--step-seconds", "10", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var s struct {
		Status             string  `json:"status"`
		DurationSeconds    float64 `json:"duration_seconds"`
		ChargeAmpHours     float64 `json:"charge_amp_hours"`
		FinalStateOfCharge float64 `json:"final_state_of_charge"`
	}
	if err := json.Unmarshal([]byte(out), &s); err != nil {
		t.Fatal(err)
	}
	if s.Status != "load-ended" || s.DurationSeconds != 1800 || math.Abs(s.FinalStateOfCharge-0.6) > 1e-12 || math.Abs(s.ChargeAmpHours-0.5) > 1e-12 {
		t.Errorf("E8: %s after %g s, z = %.15f, %.15f Ah; want load-ended at 1800 s, z = 0.60, 0.5 Ah", s.Status, s.DurationSeconds, s.FinalStateOfCharge, s.ChargeAmpHours)
	}
}

func TestSimulateOutputs(t *testing.T) {
	dir := t.TempDir()
	csvPath, svgPath := filepath.Join(dir, "trace.csv"), filepath.Join(dir, "plot.svg")
	code, out, errs := runVoltcast(t, "simulate", "--type", "generic-nmc-18650", "--soc", "0.9", "--temperature-celsius", "25",
		"--series", "4", "--power-watts", "60", "--interval-seconds", "30", "--out", csvPath, "--svg", svgPath)
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	for _, want := range []string{"stopped", "energy delivered", "caution:"} {
		if !strings.Contains(out, want) {
			t.Errorf("summary lacks %q:\n%s", want, out)
		}
	}
	f, err := os.Open(csvPath)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if got := strings.Join(recs[0], ","); got != "time_s,soc,voltage_v,current_a,power_w,rc1_v,rc2_v" {
		t.Errorf("CSV header %q", got)
	}
	if len(recs) < 10 {
		t.Fatalf("CSV has %d rows", len(recs))
	}
	for _, r := range recs[1:] {
		if w, _ := strconv.ParseFloat(r[4], 64); math.Abs(w-60) > 1e-6 {
			t.Fatalf("row %v: power %s W; the load is 60 W", r, r[4])
		}
	}
	svg, err := os.ReadFile(svgPath)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(svg), "<svg") || !strings.Contains(string(svg), "state of charge") {
		t.Errorf("%s is not the expected SVG plot", svgPath)
	}
	// --out - puts the CSV on standard output and nothing else.
	code, out, errs = runVoltcast(t, "simulate", "--type", "generic-nmc-18650", "--soc", "0.9", "--temperature-celsius", "25",
		"--current-amps", "3", "--horizon-hours", "0.1", "--interval-seconds", "60", "--out", "-")
	if code != 0 || !strings.HasPrefix(out, "time_s,soc,") || strings.Count(out, "\n") != 8 {
		t.Errorf("--out -: exit %d, %q, stderr %q; want a header and 7 rows", code, out, errs)
	}
}

func TestSimulateErrors(t *testing.T) {
	ok := []string{"simulate", "--type", "generic-nmc-18650", "--soc", "0.8", "--temperature-celsius", "25"}
	cases := []struct {
		args []string
		want string
	}{
		{[]string{"--profile", writeProfile(t, "duration_s,kind,value\n10,current,1\n5,voltage,3\n")}, "line 3: unknown kind"},
		{[]string{"--profile", writeProfile(t, "duration_s,value\n10,1\n")}, "no kind column"},
		{[]string{"--profile", writeProfile(t, "duration_s,kind,value\nten,current,1\n")}, "line 2: duration_s"},
		{[]string{"--profile", writeProfile(t, "duration_s,kind,value\n")}, "no segments"},
		{[]string{"--profile", writeProfile(t, "duration_s,kind,value\n-5,current,1\n")}, "duration_seconds"},
		{[]string{"--current-amps", "1", "--step-seconds", "-1"}, "settings.step"},
		{[]string{"--current-amps", "1", "--horizon-hours", "NaN"}, "horizon"},
		{[]string{"--current-amps", "-1", "--type", "generic-alkaline-aa"}, "primary"},
	}
	for _, c := range cases {
		code, out, errs := runVoltcast(t, append(append([]string(nil), ok...), c.args...)...)
		if code == 0 || !strings.Contains(errs, c.want) || strings.Count(errs, "\n") != 1 || out != "" {
			t.Errorf("simulate %v: exit %d, stderr %q, stdout %q; want one error line mentioning %q", c.args, code, errs, out, c.want)
		}
	}
}
