package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
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

// loadedTo2Guard bounds the loaded-start protocol's time to within 2 % (s) for two 25 °C
// profiles, EKF started 20 % below the truth under load (docs/validation.md, "loaded
// start"). The issue sets no target for this time: these are regression guards, the
// number this subset measured when they were added plus about 15 %.
var loadedTo2Guard = map[string]float64{
	"drive_25degC_HWFET.csv": 290, // measured 253 s
	"drive_25degC_LA92.csv":  400, // measured 346 s
}

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
	guarded := 0
	for _, s := range res.loaded {
		g, ok := loadedTo2Guard[s.profile]
		if !ok || s.offset > 0 {
			continue
		}
		guarded++
		t.Logf("%s loaded start at %.0f s (%.2f A, SOC %.1f %%, error %+.1f %%): within 2 %% after %s s, RMSE %.2f %%, max %.2f %%",
			s.profile, s.startSec, s.startAmps, s.truthStart, s.offset, secs(s.within2), s.rmse, s.max)
		// The protocol's start: under load (|i| > C/5) and the full −20 % applied.
		if !(math.Abs(s.startAmps) > loadedStartRate*res.capacity) || math.Abs(s.offset+20) > 1e-9 {
			t.Errorf("%s: loaded start at %.2f A with offset %+.2f %%; want |i| > C/5 and −20 %%", s.profile, s.startAmps, s.offset)
		}
		if !(s.within2 <= g) {
			t.Errorf("%s: loaded start reaches 2 %% after %s s; want ≤ %g s (regression guard, no issue target)", s.profile, secs(s.within2), g)
		}
		if !(s.rmse <= targetSOCRMSEPct && s.max <= targetSOCMaxPct) {
			t.Errorf("%s: loaded start RMSE %.2f %%, max %.2f %%; want ≤ %g %% and ≤ %g %% (issue 3 target)", s.profile, s.rmse, s.max, targetSOCRMSEPct, targetSOCMaxPct)
		}
	}
	if guarded != len(loadedTo2Guard) {
		t.Errorf("%d loaded-start rows guarded; want %d", guarded, len(loadedTo2Guard))
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
		{[]string{"fit", "--out", "x.json"}, "at least one --pulse-test and --out are required", 2},
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

// k2 20 °C regression guards: the k2_lfp26650 type fitted from hppc_20degC.csv alone
// (ARTS Laboratory, University of South Carolina, GitHub
// ARTS-Laboratory/Dataset-battery-electro-thermal-characterization @50c2d90, no DOI,
// CC BY-SA 4.0) misses both issue 3 targets on the 1C discharge, so CI holds the
// measured numbers plus a margin; docs/validation.md reports the misses and why (the
// slow branch fitted to the HPPC's 265 s steps and 90 min rests overstates the
// polarisation under sustained load). 20 °C is the dataset's nearest temperature to the
// targets' 25 °C.
const (
	k2VoltageGuardMV  = 115 // measured 103.6 mV (target ≤ 15 mV)
	k2RuntimeGuardPct = 3.6 // measured −3.2 % (target within 2 %)
)

// TestValidationK2Subset is the k2_lfp26650 part of the CI subset: the cell has no
// low-rate test, so its type is fitted from the 20 °C HPPC test alone (OCV from the
// 90 min rests); checked on the 20 °C 1C discharge.
func TestValidationK2Subset(t *testing.T) {
	root := datasetsOrSkip(t, "k2_lfp26650")
	spec := k2Cells()[0]
	if spec.pulses[0] != "hppc_20degC.csv" {
		t.Fatalf("first k2 spec fits from %v; want the 20 °C HPPC", spec.pulses)
	}
	res, err := validateCell(context.Background(), root, spec)
	if err != nil {
		t.Fatal(err)
	}
	if src := res.fitted.OCV.Source; src != "rests" {
		t.Errorf("OCV source %q; want the HPPC rests", src)
	}
	// PROVENANCE.md: the HPPC test ends at ≈2.19 Ah discharged; the 1C discharge
	// delivers 2.197 Ah at 20 °C. The HPPC capacity is at its own rates.
	if c := res.fitted.Type.CapacityAh; math.Abs(c-2.19) > 0.01 {
		t.Errorf("capacity %.4f Ah; want ≈2.19 Ah (PROVENANCE.md)", c)
	}
	if len(res.voltage) != 1 || len(res.runtime) != 1 || len(res.soc) != 0 {
		t.Fatalf("%d voltage, %d runtime, %d SOC rows; want 1, 1, 0", len(res.voltage), len(res.runtime), len(res.soc))
	}
	v, r := res.voltage[0], res.runtime[0]
	t.Logf("%s: voltage RMSE %.1f mV (max %.0f); runtime measured %.0f s, forecast %.0f s (%+.2f %%)", v.profile, v.rmse, v.max, r.measured, r.forecastSec, r.errPct)
	// Measured 1C time to 2.5 V: 2.197 Ah / 2.60 A ≈ 3040 s (PROVENANCE.md).
	if math.Abs(r.measured-3041) > 15 {
		t.Errorf("measured runtime %.0f s; want ≈3041 s (2.197 Ah at 2.60 A, PROVENANCE.md)", r.measured)
	}
	if !(v.rmse <= k2VoltageGuardMV) {
		t.Errorf("voltage RMSE %.1f mV; want ≤ %d mV (regression guard; target ≤ 15 mV missed, see docs/validation.md)", v.rmse, k2VoltageGuardMV)
	}
	if !(math.Abs(r.errPct) <= k2RuntimeGuardPct) {
		t.Errorf("runtime error %+.2f %%; want within %g %% (regression guard; target 2 %% missed, see docs/validation.md)", r.errPct, k2RuntimeGuardPct)
	}
}

// TestFitCommandWithoutLowRateTest: `voltcast fit` on the k2_lfp26650 HPPC test (no
// low-rate test exists for that cell) without --ocv-test, and with the HPPC file given
// as --ocv-test (which used to fail as "not a low-rate test"), takes the OCV from the
// rests, says so, and keeps the LFP catalogue's hysteresis.
func TestFitCommandWithoutLowRateTest(t *testing.T) {
	root := datasetsOrSkip(t, "k2_lfp26650")
	hppc := filepath.Join(root, "k2_lfp26650", "hppc_20degC.csv")
	for _, extra := range [][]string{nil, {"--ocv-test", hppc}} {
		out := filepath.Join(t.TempDir(), "k2.json")
		args := append([]string{"fit", "--pulse-test", hppc, "--chemistry", "lfp", "--out", out}, extra...)
		var stdout, stderr bytes.Buffer
		if code := run(context.Background(), args, &stdout, &stderr); code != 0 {
			t.Fatalf("%v: exit %d: %s", args, code, stderr.String())
		}
		for _, want := range []string{"ocv method: rested voltages", "lower bound of the low-rate capacity", "hysteresis kept from the base type"} {
			if !strings.Contains(stdout.String(), want) {
				t.Errorf("%v: report lacks %q:\n%s", extra, want, stdout.String())
			}
		}
		typ, err := loadType(out)
		if err != nil {
			t.Fatalf("loadType: %v", err)
		}
		// PROVENANCE.md: the HPPC test ends at ≈2.19 Ah discharged.
		if math.Abs(typ.CapacityAh-2.19) > 0.01 {
			t.Errorf("%v: capacity %.4f Ah; want ≈2.19 Ah", extra, typ.CapacityAh)
		}
		if typ.Hysteresis.Max <= 0 {
			t.Errorf("%v: hysteresis %+v; want the LFP catalogue's kept", extra, typ.Hysteresis)
		}
	}
}

// TestFitCommandNeitherLowRateNorRests: a file with one 1C discharge and no rests is
// refused as an OCV test with the strict low-rate error, naming the missing rests.
func TestFitCommandNeitherLowRateNorRests(t *testing.T) {
	dir := t.TempDir()
	f := filepath.Join(dir, "cc.csv")
	var b strings.Builder
	b.WriteString("time_s,current_a,voltage_v,temp_c\n")
	for k := range 3000 {
		fmt.Fprintf(&b, "%d,2.6,%.4f,25\n", k, 3.3-0.3*float64(k)/3000)
	}
	if err := os.WriteFile(f, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	var stdout, stderr bytes.Buffer
	code := run(context.Background(), []string{"fit", "--ocv-test", f, "--pulse-test", f, "--out", filepath.Join(dir, "t.json")}, &stdout, &stderr)
	if code != 1 || !strings.Contains(stderr.String(), "not a low-rate test") || !strings.Contains(stderr.String(), "rest(s) of at least") {
		t.Errorf("exit %d, stderr %q; want exit 1 with the low-rate error and the missing rests", code, stderr.String())
	}
}
