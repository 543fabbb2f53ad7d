package main

import (
	"bytes"
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/labdata"
)

// datasetsOrSkip returns the shared datasets folder, or skips the test when it is absent.
func datasetsOrSkip(t *testing.T, name string) string {
	t.Helper()
	root, err := labdata.DatasetsDir()
	if err == nil {
		_, err = labdata.Dataset(name)
	}
	if errors.Is(err, labdata.ErrNoDatasets) {
		t.Skipf("skipping: %v", err)
	}
	if err != nil {
		t.Fatal(err)
	}
	return root
}

// voltageGuardMV holds the CI bound of the profiles that miss the target: the
// number this subset measured when it was last changed, plus about 10 %. (The subset fits
// the 25 °C pulse test only, so its numbers differ slightly from docs/validation.md, whose
// fit also has the cold pulse tests.) They are regression guards, not targets;
// docs/validation.md reports the misses and why (polarisation that builds up under
// sustained load at low state of charge, which the 10 s pulses do not reveal).
var voltageGuardMV = map[string]float64{
	"drive_25degC_Cycle1.csv": 19, // measured 17.2 mV (16.9 before the charge-transfer branch)
	"drive_25degC_HWFET.csv":  27, // measured 24.5 mV (25.1 before)
	"drive_25degC_US06.csv":   35, // measured 31.9 mV (31.9 before)
}

// socGuardPct likewise bounds the SOC RMSE and max error (%) where the target is missed.
// Every 25 °C profile of the subset now meets the target (measured RMSE 0.67–0.98 %,
// max 1.27–1.99 %), so it is empty and the targets are asserted.
var socGuardPct = map[string][2]float64{}

// TestValidationFastSubset is the CI subset of `make validate`: the pan18650pf cell
// (Kollmeyer 2018, doi:10.17632/wykht8y7tg.1, CC BY 4.0), fitted from its C/20 OCV test
// and 25 °C pulse test only, checked on the five 25 °C drive cycles (voltage and SOC) and
// on its 1C discharge (runtime), with the targets of issue 3 as assertions.
func TestValidationFastSubset(t *testing.T) {
	root := datasetsOrSkip(t, "pan18650pf")
	cells := modelCells(true)
	if len(cells) != 1 {
		t.Fatalf("quick subset has %d cells", len(cells))
	}
	res, err := validateCell(context.Background(), root, cells[0])
	if err != nil {
		t.Fatal(err)
	}
	if len(res.voltage) != 5 || len(res.soc) != 5 || len(res.runtime) != 1 {
		t.Fatalf("subset has %d voltage, %d SOC and %d runtime rows; want 5, 5, 1", len(res.voltage), len(res.soc), len(res.runtime))
	}
	for _, v := range res.voltage {
		limit, why := targetVoltageWarmMV, "issue 3 target"
		if g, ok := voltageGuardMV[v.profile]; ok {
			limit, why = g, "regression guard (target missed, see docs/validation.md)"
		}
		t.Logf("%s: voltage RMSE %.1f mV, max %.0f mV", v.profile, v.rmse, v.max)
		if !(v.rmse <= limit) {
			t.Errorf("%s: voltage RMSE %.1f mV; want ≤ %g mV (%s)", v.profile, v.rmse, limit, why)
		}
	}
	for _, s := range res.soc {
		rl, ml, why := targetSOCRMSEPct, targetSOCMaxPct, "issue 3 target"
		if g, ok := socGuardPct[s.profile]; ok {
			rl, ml, why = g[0], g[1], "regression guard (target missed, see docs/validation.md)"
		}
		t.Logf("%s: EKF SOC RMSE %.2f %%, max %.2f %%; counter from the true start %.2f %%", s.profile, s.ekfRMSE, s.ekfMax, s.ccRMSE)
		if !(s.ekfRMSE <= rl && s.ekfMax <= ml) {
			t.Errorf("%s: EKF SOC RMSE %.2f %%, max %.2f %%; want ≤ %g %% and ≤ %g %% (%s)", s.profile, s.ekfRMSE, s.ekfMax, rl, ml, why)
		}
		// The filter must beat a coulomb counter that starts from the same wrong SOC.
		if !(s.ekfRMSE < s.ccWrongRMSE) {
			t.Errorf("%s: EKF RMSE %.2f %% not below the wrongly started counter's %.2f %%", s.profile, s.ekfRMSE, s.ccWrongRMSE)
		}
	}
	for _, r := range res.runtime {
		t.Logf("%s: measured %.0f s, forecast %.0f s (%+.1f %%)", r.file, r.measured, r.forecastSec, r.errPct)
		if !(math.Abs(r.errPct) <= targetRuntimePct) {
			t.Errorf("%s: forecast %.0f s vs measured %.0f s (%+.1f %%); want within %g %% (issue 3)", r.file, r.forecastSec, r.measured, r.errPct, targetRuntimePct)
		}
	}
}

// TestFitCommand runs `voltcast fit` on the pan18650pf C/20 and 25 °C pulse tests and
// checks that the parameter file it writes loads as a type (the contract with forecast
// and estimate) and that the report and residual plot are written.
func TestFitCommand(t *testing.T) {
	root := datasetsOrSkip(t, "pan18650pf")
	d := filepath.Join(root, "pan18650pf")
	dir := t.TempDir()
	out := filepath.Join(dir, "pan.json")
	svg := filepath.Join(dir, "res.svg")
	var stdout, stderr bytes.Buffer
	code := run(context.Background(), []string{"fit",
		"--ocv-test", filepath.Join(d, "ocv_c20_25degC.csv"),
		"--pulse-test", filepath.Join(d, "hppc_25degC.csv"),
		"--chemistry", "nca", "--out", out, "--report-svg", svg}, &stdout, &stderr)
	if code != 0 {
		t.Fatalf("voltcast fit exited %d: %s", code, stderr.String())
	}
	typ, err := loadType(out)
	if err != nil {
		t.Fatalf("loadType(fitted): %v", err)
	}
	// PROVENANCE.md: the C/20 discharge removes 2.997 Ah.
	if math.Abs(typ.CapacityAh-2.997) > 0.002 {
		t.Errorf("fitted capacity %.4f Ah; want 2.997 Ah (PROVENANCE.md)", typ.CapacityAh)
	}
	for _, want := range []string{"hppc_25degC.csv", "rmse_mv", "r0_mohm"} {
		if !strings.Contains(stdout.String(), want) {
			t.Errorf("fit report lacks %q:\n%s", want, stdout.String())
		}
	}
	if !strings.Contains(stderr.String(), "fit: pulse") {
		t.Errorf("no progress on stderr: %q", stderr.String())
	}
	if b, err := os.ReadFile(svg); err != nil || !bytes.Contains(b, []byte("<svg")) {
		t.Errorf("residual plot not written: %v", err)
	}
}

func TestFitCommandBadInput(t *testing.T) {
	dir := t.TempDir()
	bad := filepath.Join(dir, "bad.csv")
	if err := os.WriteFile(bad, []byte("time_s,current_a,voltage_v,temp_c\n0,1,3.7,25\n0,1,3.6,25\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		args []string
		want string
		code int
	}{
		{[]string{"fit", "--out", "x.json"}, "--ocv-test, at least one --pulse-test and --out are required", 2},
		{[]string{"fit", "--ocv-test", bad, "--pulse-test", bad, "--out", filepath.Join(dir, "t.json")}, "duplicated timestamp", 1},
		{[]string{"fit", "--ocv-test", bad, "--pulse-test", bad, "--out", "t.json", "--current-sign", "up"}, "--current-sign", 2},
		{[]string{"fit", "--ocv-test", bad, "--pulse-test", bad, "--out", "t.json", "--chemistry", "unobtainium"}, "unknown --chemistry", 2},
	} {
		var stdout, stderr bytes.Buffer
		code := run(context.Background(), tc.args, &stdout, &stderr)
		if code != tc.code || !strings.Contains(stderr.String(), tc.want) {
			t.Errorf("%v: exit %d, stderr %q; want exit %d mentioning %q", tc.args, code, stderr.String(), tc.code, tc.want)
		}
	}
}
