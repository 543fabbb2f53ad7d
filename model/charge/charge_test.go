package charge

import (
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	"github.com/voltcast/voltcast/model/table"
)

// linearCell is an R0-only cell (no RC branches, no hysteresis, η = 1) with the linear
// open-circuit voltage OCV(z) = a + b·z, the case in which the CV phase has a closed form.
func linearCell(t testing.TB, capAh, a, b, r0 float64) *cell.Type {
	t.Helper()
	ocv, err := table.NewSurface([]float64{0, 1}, []float64{cell.RefKelvin}, [][]float64{{a, a + b}})
	if err != nil {
		t.Fatal(err)
	}
	typ := &cell.Type{
		Name: "linear-test-cell", Chemistry: cell.ChemistryNMC, ChargeMethod: cell.ChargeCCCV,
		CapacityAh: capAh, NominalVolts: 3.6, OCV: ocv, R0: cell.Param{Value: r0},
		Limits: cell.Limits{
			ChargeVolts: 4.2, CutoffVolts: 3.0, FloorVolts: 2.5, MaxChargeRate: 1, StandardChargeRate: 0.5,
			MaxDischargeRate: 2, TerminationRate: 0.05, ChargeMinCelsius: 0, ChargeMaxCelsius: 45,
			DischargeMinCelsius: -20, DischargeMaxCelsius: 60,
		},
	}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	return typ
}

func pack(t testing.TB, typ *cell.Type, series, parallel int) cell.Pack {
	t.Helper()
	p, err := cell.NewPack(typ, series, parallel)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

func builtin(t testing.TB, name string) *cell.Type {
	t.Helper()
	typ, err := chem.Lookup(name)
	if err != nil {
		t.Fatal(err)
	}
	return typ
}

func mustPlan(t testing.TB, req *Request, set *Settings) *Result {
	t.Helper()
	res, err := Plan(req, set)
	if err != nil {
		t.Fatalf("Plan: %v", err)
	}
	return res
}

func hasWarning(res *Result, code WarningCode) bool {
	for _, w := range res.Warnings {
		if w.Code == code {
			return true
		}
	}
	return false
}

func phaseOf(res *Result, kind PhaseKind) *Phase {
	for i := range res.Phases {
		if res.Phases[i].Kind == kind {
			return &res.Phases[i]
		}
	}
	return nil
}

// TestCVDecayAnalytic checks the constant-voltage phase against its closed form.
//
// Derivation. Pack current i is positive on discharge, so on charge i = −I with I > 0.
// For an R0-only cell with OCV(z) = a + b·z the terminal voltage is
// v = OCV(z) − R0·i = a + b·z + R0·I, and coulomb counting (REFERENCE.md §2.2) gives
// dz/dt = −η·i/(3600·Q) = η·I/(3600·Q) with Q in Ah. Holding v = V_cv constant and
// differentiating, b·dz/dt + R0·dI/dt = 0, so dI/dt = −(b·η/(3600·Q·R0))·I and
//
//	I(t) = I0·exp(−t/τ),  τ = 3600·Q·R0/(η·b)  (seconds),
//
// where I0 is the CC current at the start of CV. The CV phase ends at I = I_term after
// t_cv = τ·ln(I0/I_term) and puts in τ·(I0 − I_term)/3600 Ah. The CC phase before it is
// exact too: it ends when a + b·z + R0·I0 = V_cv.
//
// Tolerance: the planner's CV step map is the (1,1) Padé approximant of exp(−Δt/τ),
// whose relative error after time t is about (t/τ)·(Δt/τ)²/12; with steps sized for
// 1 % current change (Δt/τ ≈ 0.01) that is ≈ 2e-5 at t = 2.3τ (measured: 3e-6). The checks allow 5e-5.
func TestCVDecayAnalytic(t *testing.T) {
	const (
		capAh = 2.0
		a, b  = 3.4, 0.8 // V, V per unit SOC
		r0    = 0.05     // Ω
		i0    = 1.0      // A (0.5 C)
		vcv   = 4.2
	)
	typ := linearCell(t, capAh, a, b, r0)
	res := mustPlan(t, &Request{
		Pack: pack(t, typ, 1, 1), State: cell.State{SOC: 0.2}, TemperatureCelsius: 25,
		MaxCurrentAmps: i0, Efficiency: 1,
	}, &Settings{SOCCeiling: 1.2})
	tau := 3600 * capAh * r0 / b
	iterm := 0.05 * capAh
	zcv := (vcv - a - r0*i0) / b
	tcc := (zcv - 0.2) * capAh / i0 * 3600
	tcv := tau * math.Log(i0/iterm)
	if res.Termination != TerminationTaper {
		t.Fatalf("termination %s; want taper", res.Termination)
	}
	cc, cv := phaseOf(res, PhaseConstantCurrent), phaseOf(res, PhaseConstantVoltage)
	if cc == nil || cv == nil {
		t.Fatalf("phases %+v; want constant-current then constant-voltage", res.Phases)
	}
	if math.Abs(cc.EndSeconds-tcc) > 1e-6*tcc || math.Abs(cc.EndSOC-zcv) > 1e-9 {
		t.Errorf("CC ends at %.6f s, SOC %.9f; closed form %.6f s, %.9f", cc.EndSeconds, cc.EndSOC, tcc, zcv)
	}
	if got := cv.EndSeconds - cv.StartSeconds; math.Abs(got-tcv) > 5e-5*tcv {
		t.Errorf("CV lasts %.3f s; closed form τ·ln(I0/Iterm) = %.3f s", got, tcv)
	}
	if got, want := cv.ChargeAh, tau*(i0-iterm)/3600; math.Abs(got-want) > 5e-5*want {
		t.Errorf("CV charge %.6f Ah; closed form %.6f Ah", got, want)
	}
	if math.Abs(cv.StartVolts-vcv) > 1e-6 || math.Abs(cv.EndVolts-vcv) > 1e-3 {
		t.Errorf("CV voltage %.6f → %.6f V; want the %.2f V set point", cv.StartVolts, cv.EndVolts, vcv)
	}
	// The current part-way through the CV phase, from a plan stopped at a target SOC
	// inside it: the closed form gives z(t) = zcv + τ·I0·(1 − e^(−t/τ))/(3600·Q) and the
	// current there, I = I0·e^(−t/τ) = (V_cv − a − b·z)/R0.
	ztarget := zcv + 0.6*(tau*(i0-iterm)/3600)/capAh
	res2 := mustPlan(t, &Request{
		Pack: pack(t, typ, 1, 1), State: cell.State{SOC: 0.2}, TemperatureCelsius: 25,
		MaxCurrentAmps: i0, Efficiency: 1, TargetSOC: ztarget,
	}, &Settings{SOCCeiling: 1.2})
	x := 1 - (ztarget-zcv)*3600*capAh/(tau*i0) // e^(−t/τ) at the target
	wantT := tcc - tau*math.Log(x)
	if math.Abs(res2.Target.Seconds-wantT) > 5e-5*(wantT-tcc) {
		t.Errorf("time to SOC %.4f = %.3f s; closed form %.3f s", ztarget, res2.Target.Seconds, wantT)
	}
	last := res2.Phases[len(res2.Phases)-1]
	if wantI := -i0 * x; math.Abs(last.EndCurrentAmps-wantI) > 2e-3*i0 {
		t.Errorf("current at SOC %.4f = %.5f A; closed form %.5f A", ztarget, last.EndCurrentAmps, wantI)
	}
}

// TestE7CCCVTime checks REFERENCE.md worked example E7: a 3.0 Ah NMC cell charged from
// empty at 0.5 C (1.5 A) to 4.20 V, the CC phase delivering 80 % and the CV current
// tapering exponentially to C/20 (0.15 A): t_CC = 1.600 h, τ = 0.6 Ah/1.35 A = 0.4444 h,
// t_CV = τ·ln 10 = 1.0234 h, total ≈ 2.62 h.
func TestE7CCCVTime(t *testing.T) {
	const e7Hours = 1.6 + 0.6/1.35*math.Ln10 // 2.6234 h, E7's own arithmetic

	// (a) The model cell E7 describes. An R0-only cell with a linear OCV has exactly an
	// exponential CV taper (see TestCVDecayAnalytic), with τ = 3600·Q·R0/b. E7's two
	// assumptions fix R0/b: τ = 0.4444 h gives R0/b = 0.4444/3.0 = 0.14815, and CC
	// ending at 80 % (a + 0.8·b + 1.5·R0 = 4.2) with b = 1 V gives a = 3.17778 V. The
	// planner must then reproduce E7's 2.62 h to its step error (5e-5, see above).
	{
		b := 1.0
		r0 := 0.6 / 1.35 / 3.0 * b
		a := 4.2 - 0.8*b - 1.5*r0
		typ := linearCell(t, 3.0, a, b, r0)
		res := mustPlan(t, &Request{
			Pack: pack(t, typ, 1, 1), TemperatureCelsius: 25, MaxCurrentAmps: 1.5, Efficiency: 1,
		}, &Settings{SOCCeiling: 1.05})
		got := res.Full.Seconds / 3600
		if math.Abs(got-e7Hours) > 5e-5*e7Hours {
			t.Errorf("E7 model cell: full in %.5f h; E7 gives %.5f h", got, e7Hours)
		}
		if cc := phaseOf(res, PhaseConstantCurrent); cc == nil || math.Abs(cc.ChargeAh/3.0-0.8) > 1e-6 {
			t.Errorf("E7 model cell: CC phase %+v; want 80 %% of 3.0 Ah", cc)
		}
	}

	// (b) A cell with REFERENCE.md §4's NMC OCV curve (from memory) and an R0 chosen
	// so that CC at 0.5 C ends near 80 %: R0 = (4.20 − OCV(0.8))/1.5 = (4.20 − 3.95)/1.5.
	// Its OCV is curved, so the taper is not exactly exponential and E7's 2.62 h is only
	// an estimate for it; the check allows 5 %, the same order as E7's own "70–85 %"
	// spread of the CC fraction (common practice), which moves the total by ±4 %.
	{
		typ := builtin(t, "generic-nmc-18650")
		typ.Branches = nil
		typ.Hysteresis = cell.Hysteresis{}
		typ.CoulombicEfficiency = 1
		typ.R0 = cell.Param{Value: (4.20 - 3.95) / 1.5}
		res := mustPlan(t, &Request{
			Pack: pack(t, typ, 1, 1), TemperatureCelsius: 25, MaxCurrentAmps: 1.5, Efficiency: 1,
		}, &Settings{SOCCeiling: 1.05})
		cc := phaseOf(res, PhaseConstantCurrent)
		if cc == nil || math.Abs(cc.ChargeAh/3.0-0.8) > 0.01 {
			t.Fatalf("§4 NMC cell: CC phase %+v; want ≈ 80 %%", cc)
		}
		got := res.Full.Seconds / 3600
		t.Logf("§4 NMC cell: CC %.3f h (%.1f %%), total %.3f h; E7 %.3f h", cc.EndSeconds/3600, 100*cc.ChargeAh/3, got, e7Hours)
		if math.Abs(got-e7Hours) > 0.05*e7Hours {
			t.Errorf("§4 NMC cell: full in %.4f h; E7 gives ≈ %.2f h (±5 %%)", got, e7Hours)
		}
	}
}

// TestCoulombCountingE8 checks REFERENCE.md E8 through a charge plan: 2.5 Ah at SOC
// 0.60, charged at 0.5 A with η = 0.99, reaches 0.798 after exactly 1 h.
func TestCoulombCountingE8(t *testing.T) {
	typ := linearCell(t, 2.5, 3.6, 0.1, 0.01) // low voltage, so the charge stays in CC
	typ.CoulombicEfficiency = 0.99
	res := mustPlan(t, &Request{
		Pack: pack(t, typ, 1, 1), State: cell.State{SOC: 0.60}, TemperatureCelsius: 25,
		MaxCurrentAmps: 0.5, Efficiency: 1, TargetSOC: 0.798,
	}, nil)
	if math.Abs(res.Target.Seconds-3600) > 1e-6 {
		t.Errorf("time to 0.798 = %.9f s; E8 gives 3600 s", res.Target.Seconds)
	}
	if math.Abs(res.Target.ChargeAh-0.5) > 1e-9 {
		t.Errorf("charge to 0.798 = %.12f Ah; E8 gives 0.5 Ah", res.Target.ChargeAh)
	}
}

// TestNiMHStandardCharge checks the IEC 61951-2 standard charge (0.1 It for 16 h,
// via REFERENCE.md §2.8 and E7): it puts 160 % of capacity in.
func TestNiMHStandardCharge(t *testing.T) {
	typ := builtin(t, "generic-nimh-aa")
	res := mustPlan(t, &Request{
		Pack: pack(t, typ, 8, 1), TemperatureCelsius: 20, MaxCurrentAmps: 0.1 * 2.4, Efficiency: 1,
	}, nil)
	if res.Termination != TerminationTimer {
		t.Errorf("termination %s; want timer", res.Termination)
	}
	if math.Abs(res.Full.Seconds-16*3600) > 1e-6 {
		t.Errorf("standard charge lasts %.3f h; IEC 61951-2 gives 16 h", res.Full.Seconds/3600)
	}
	if got := res.Full.ChargeAh / 2.4; math.Abs(got-1.6) > 1e-9 {
		t.Errorf("standard charge puts in %.4f × capacity; IEC 61951-2 gives 1.6 (160 %%)", got)
	}
	if phaseOf(res, PhaseOvercharge) == nil {
		t.Error("no overcharge phase after full")
	}
	// A fast charge (1 C) stops on −ΔV (modelled) long before the 150 % backup timer
	// (public charger design notes, REFERENCE.md §1a).
	fast := mustPlan(t, &Request{
		Pack: pack(t, typ, 8, 1), TemperatureCelsius: 20, MaxCurrentAmps: 2.4, Efficiency: 1,
	}, nil)
	if fast.Termination != TerminationDeltaV {
		t.Errorf("1 C termination %s; want minus-delta-v", fast.Termination)
	}
	if got := fast.Full.ChargeAh / 2.4; got >= 1.5 || got < 1 {
		t.Errorf("1 C charge puts in %.3f × capacity; want between full and the 1.5 × backup timer", got)
	}
	// Backup timer: with a very low charge efficiency full is never reached in time.
	typ.CoulombicEfficiency = 0.5
	slow := mustPlan(t, &Request{
		Pack: pack(t, typ, 8, 1), TemperatureCelsius: 20, MaxCurrentAmps: 2.4, Efficiency: 1,
	}, nil)
	if slow.Termination != TerminationTimer || math.Abs(slow.Full.ChargeAh/2.4-1.5) > 1e-9 {
		t.Errorf("η = 0.5: termination %s after %.3f × capacity; want the 1.5 × backup timer", slow.Termination, slow.Full.ChargeAh/2.4)
	}
}

// TestLeadAcidCompensation checks the −3 mV/°C/cell temperature compensation of the
// absorption voltage (BU-LA via REFERENCE.md §1a): 2.40 V/cell at 25 °C becomes
// 2.40 + 0.003·15 = 2.445 V/cell at 10 °C, and 2.40 − 0.003·15 = 2.355 at 40 °C.
func TestLeadAcidCompensation(t *testing.T) {
	typ := builtin(t, "generic-vrla-2v-cell")
	for _, c := range []struct{ celsius, absorb, float float64 }{
		{25, 2.40, 2.27}, {10, 2.445, 2.315}, {40, 2.355, 2.225},
	} {
		res := mustPlan(t, &Request{
			Pack: pack(t, typ, 6, 1), TemperatureCelsius: c.celsius, MaxCurrentAmps: 1.4, Efficiency: 0.85,
		}, nil)
		if got := res.ChargeVolts / 6; math.Abs(got-c.absorb) > 1e-12 {
			t.Errorf("%g °C: absorption %.4f V/cell; want %.3f", c.celsius, got, c.absorb)
		}
		if got := res.FloatVolts / 6; math.Abs(got-c.float) > 1e-12 {
			t.Errorf("%g °C: float %.4f V/cell; want %.3f", c.celsius, got, c.float)
		}
		abs := phaseOf(res, PhaseAbsorption)
		if abs == nil || math.Abs(abs.EndVolts/6-c.absorb) > 1e-3 {
			t.Errorf("%g °C: absorption phase %+v; want it held at %.3f V/cell", c.celsius, abs, c.absorb)
		}
		if got := res.Phases[len(res.Phases)-1]; got.Kind != PhaseFloat {
			t.Errorf("%g °C: last phase %s; want float", c.celsius, got.Kind)
		}
		if !strings.Contains(strings.Join(res.Cautions, " "), "hydrogen") {
			t.Errorf("lead-acid cautions lack ventilation: %q", res.Cautions)
		}
	}
}

func TestPrimaryRefused(t *testing.T) {
	for _, name := range []string{"generic-alkaline-aa", "generic-li-mno2-coin", "generic-li-socl2-aa"} {
		_, err := Plan(&Request{
			Pack: pack(t, builtin(t, name), 1, 1), TemperatureCelsius: 20, MaxCurrentAmps: 0.1, Efficiency: 0.9,
		}, nil)
		if !errors.Is(err, ErrPrimaryCell) {
			t.Errorf("%s: Plan = %v; want ErrPrimaryCell", name, err)
		}
	}
	if c := Cautions(cell.ChemistryAlkaline, cell.ChargeNone); len(c) < 2 || !strings.Contains(c[1], "Never charge primary") {
		t.Errorf("primary cautions %q", c)
	}
}

// TestTemperatureWindow checks BU-410's Li-ion charge window of 0…45 °C (refuse
// outside it) and the cold derate below 5 °C.
func TestTemperatureWindow(t *testing.T) {
	typ := builtin(t, "generic-nmc-18650")
	for _, c := range []float64{-5, -0.1, 45.5, 60} {
		_, err := Plan(&Request{Pack: pack(t, typ, 1, 1), TemperatureCelsius: c, MaxCurrentAmps: 1.5, Efficiency: 0.9}, nil)
		if !errors.Is(err, ErrTemperature) {
			t.Errorf("%g °C: Plan = %v; want ErrTemperature", c, err)
		}
	}
	res := mustPlan(t, &Request{Pack: pack(t, typ, 1, 1), TemperatureCelsius: 2, MaxCurrentAmps: 1.5, Efficiency: 0.9}, nil)
	if !hasWarning(res, WarnColdDerate) || math.Abs(res.CurrentAmps-0.3) > 1e-12 {
		t.Errorf("2 °C: current %g A, warnings %+v; want the 0.1 C (0.3 A) derate", res.CurrentAmps, res.Warnings)
	}
	warm := mustPlan(t, &Request{Pack: pack(t, typ, 1, 1), TemperatureCelsius: 25, MaxCurrentAmps: 1.5, Efficiency: 0.9}, nil)
	if hasWarning(warm, WarnColdDerate) || warm.CurrentAmps != 1.5 {
		t.Errorf("25 °C: current %g A, warnings %+v; want 1.5 A, no derate", warm.CurrentAmps, warm.Warnings)
	}
	if !strings.Contains(strings.Join(warm.Cautions, " "), "trickle") {
		t.Errorf("lithium cautions lack the no-trickle note: %q", warm.Cautions)
	}
}

// TestDeadlineLowestCurrent checks that with a deadline the planner picks the lowest
// current meeting it: the chosen current meets the deadline, 2 % less misses it, and a
// later deadline never asks for more current.
func TestDeadlineLowestCurrent(t *testing.T) {
	typ := builtin(t, "generic-nmc-18650")
	p := pack(t, typ, 4, 2) // 6 Ah
	base := Request{Pack: p, State: cell.State{SOC: 0.15}, TemperatureCelsius: 25, TargetSOC: 0.8,
		MaxCurrentAmps: 6, Efficiency: 0.92}
	prev := math.Inf(1)
	for _, hours := range []float64{1.2, 1.5, 2, 3, 5, 8} {
		req := base
		req.DeadlineSeconds = hours * 3600
		res := mustPlan(t, &req, nil)
		if hasWarning(res, WarnDeadline) {
			t.Fatalf("%g h: unexpected deadline warning %+v", hours, res.Warnings)
		}
		if res.Target.Seconds > req.DeadlineSeconds*(1+1e-9) {
			t.Errorf("%g h: target reached after %.1f s, past the deadline", hours, res.Target.Seconds)
		}
		if res.CurrentAmps > prev*(1+1e-9) {
			t.Errorf("%g h: current %.4f A above the %.4f A chosen for an earlier deadline", hours, res.CurrentAmps, prev)
		}
		prev = res.CurrentAmps
		lower := base
		lower.MaxCurrentAmps = 0.98 * res.CurrentAmps
		if slow := mustPlan(t, &lower, nil); slow.Target.Seconds <= req.DeadlineSeconds {
			t.Errorf("%g h: %.4f A (2 %% less than chosen) still meets the deadline (%.1f s)", hours, lower.MaxCurrentAmps, slow.Target.Seconds)
		}
	}
	req := base
	req.DeadlineSeconds = 1800 // 65 % of 6 Ah in 30 min needs 1.3 C, above the 1 C limit
	res := mustPlan(t, &req, nil)
	if !hasWarning(res, WarnDeadline) || res.CurrentAmps != 6 {
		t.Errorf("impossible deadline: current %g, warnings %+v; want 6 A and deadline-unreachable", res.CurrentAmps, res.Warnings)
	}
}

// TestPowerLimit checks a constant-power phase: the charger's power limit binds at the
// top of the CC phase, and there V·I equals the limit (to the step's voltage rise).
func TestPowerLimit(t *testing.T) {
	typ := builtin(t, "generic-nmc-18650")
	p := pack(t, typ, 4, 1)
	res := mustPlan(t, &Request{Pack: p, State: cell.State{SOC: 0.1}, TemperatureCelsius: 25,
		MaxCurrentAmps: 3, MaxPowerWatts: 45, Efficiency: 0.9}, nil)
	cp := phaseOf(res, PhaseConstantPower)
	if cp == nil {
		t.Fatalf("phases %+v; want a constant-power phase", res.Phases)
	}
	for _, pw := range []float64{-cp.StartVolts * cp.StartCurrentAmps, -cp.EndVolts * cp.EndCurrentAmps} {
		if math.Abs(pw-45) > 0.2 {
			t.Errorf("constant-power phase at %.3f W; want 45 W", pw)
		}
	}
	if math.Abs(res.Full.SupplyWh-res.Full.EnergyWh/0.9) > 1e-9 {
		t.Errorf("supply %.4f Wh; want pack energy %.4f Wh ÷ 0.9", res.Full.SupplyWh, res.Full.EnergyWh)
	}
}

func TestChargerVoltageLow(t *testing.T) {
	typ := builtin(t, "generic-nmc-18650")
	res := mustPlan(t, &Request{Pack: pack(t, typ, 4, 1), State: cell.State{SOC: 0.2}, TemperatureCelsius: 25,
		MaxCurrentAmps: 1.5, MaxVoltageVolts: 16.4, Efficiency: 0.9}, nil)
	if !hasWarning(res, WarnChargerVoltLow) || res.Full.Reached || res.Target.Reached {
		t.Errorf("16.4 V charger on 4s NMC (16.8 V needed): warnings %+v, full %+v", res.Warnings, res.Full)
	}
	if !hasWarning(res, WarnTargetNotReached) || res.Full.SOC > 0.95 {
		t.Errorf("ends at SOC %.3f with warnings %+v; want well short of full", res.Full.SOC, res.Warnings)
	}
	// A missed target reports where the charge ends, not zeros.
	if res.Target.SOC != res.Full.SOC || res.Target.Seconds != res.Full.Seconds || res.Target.ChargeAh != res.Full.ChargeAh {
		t.Errorf("missed target %+v; want the end of the charge %+v", res.Target, res.Full)
	}

	// A charger below the rest voltage cannot charge at all: the plan ends at once, at
	// the starting SOC, and says so rather than blaming the horizon.
	res = mustPlan(t, &Request{Pack: pack(t, typ, 1, 1), State: cell.State{SOC: 0.5}, TemperatureCelsius: 25,
		MaxCurrentAmps: 1, MaxVoltageVolts: 3, Efficiency: 0.9}, nil)
	if res.Target.Reached || res.Target.SOC != 0.5 || res.Full.SOC != 0.5 || res.Full.ChargeAh != 0 {
		t.Errorf("3 V charger on a 3.74 V cell: target %+v, full %+v; want both unreached at 50 %%", res.Target, res.Full)
	}
	for _, w := range res.Warnings {
		if w.Code == WarnNotFull && strings.Contains(w.Message, "horizon") {
			t.Errorf("not-full warning %q blames the horizon; the charge ended on %s", w.Message, res.Termination)
		}
	}
}

func TestAlreadyAtTarget(t *testing.T) {
	typ := builtin(t, "generic-lfp-26650")
	res := mustPlan(t, &Request{Pack: pack(t, typ, 1, 1), State: cell.State{SOC: 0.9}, TemperatureCelsius: 25,
		TargetSOC: 0.8, MaxCurrentAmps: 1, Efficiency: 0.9, DeadlineSeconds: 3600}, nil)
	if !hasWarning(res, WarnAtTarget) || res.Target.Seconds != 0 || len(res.Phases) != 0 {
		t.Errorf("already at target: %+v", res)
	}
	if !res.Full.Reached || res.Full.Seconds <= 0 {
		t.Errorf("time to full %+v; want a positive time", res.Full)
	}
}

// TestPhasesConsistent checks bookkeeping over every rechargeable built-in type: the
// phases tile the time line, their charge adds up to the total, SOC never falls, and
// the charge equals the SOC gained × capacity ÷ η until the cell is full (REFERENCE.md
// §2.2 coulomb counting).
func TestPhasesConsistent(t *testing.T) {
	for _, typ := range chem.All() {
		if !typ.Rechargeable() {
			continue
		}
		p := pack(t, typ, 2, 1)
		res := mustPlan(t, &Request{Pack: p, State: cell.State{SOC: 0.3}, TemperatureCelsius: 20,
			MaxCurrentAmps: typ.Limits.StandardChargeRate * typ.CapacityAh, Efficiency: 0.9}, nil)
		if !res.Full.Reached {
			t.Errorf("%s: not full: %+v", typ.Name, res)
			continue
		}
		var ah float64
		end := 0.0
		for i, ph := range res.Phases {
			if math.Abs(ph.StartSeconds-end) > 1e-6 {
				t.Errorf("%s: phase %d starts at %g s; previous ended at %g s", typ.Name, i, ph.StartSeconds, end)
			}
			if ph.EndSOC < ph.StartSOC-1e-12 {
				t.Errorf("%s: phase %d SOC falls %g → %g", typ.Name, i, ph.StartSOC, ph.EndSOC)
			}
			ah += ph.ChargeAh
			end = ph.EndSeconds
		}
		if math.Abs(ah-res.Full.ChargeAh) > 1e-6*res.Full.ChargeAh {
			t.Errorf("%s: phases add to %g Ah; total %g Ah", typ.Name, ah, res.Full.ChargeAh)
		}
		if typ.ChargeMethod != cell.ChargeNickel {
			want := (res.Full.SOC - 0.3) * typ.CapacityAh / typ.Efficiency()
			if math.Abs(res.Full.ChargeAh-want) > 1e-3*want {
				t.Errorf("%s: %g Ah in for ΔSOC %g; coulomb counting gives %g Ah", typ.Name, res.Full.ChargeAh, res.Full.SOC-0.3, want)
			}
		}
	}
}

func TestBadInput(t *testing.T) {
	typ := builtin(t, "generic-nmc-18650")
	good := Request{Pack: pack(t, typ, 1, 1), State: cell.State{SOC: 0.2}, TemperatureCelsius: 25,
		MaxCurrentAmps: 1.5, Efficiency: 0.9}
	nan := math.NaN()
	for _, c := range []struct {
		field string
		edit  func(r *Request)
	}{
		{"state.soc", func(r *Request) { r.State.SOC = nan }},
		{"state.soc", func(r *Request) { r.State.SOC = 1.2 }},
		{"state.soc", func(r *Request) { r.State.SOC = -0.1 }},
		{"state.v[0]", func(r *Request) { r.State.V[0] = math.Inf(1) }},
		{"temperature_celsius", func(r *Request) { r.TemperatureCelsius = -70 }},
		{"temperature_celsius", func(r *Request) { r.TemperatureCelsius = 101 }},
		{"temperature_celsius", func(r *Request) { r.TemperatureCelsius = nan }},
		{"target_soc", func(r *Request) { r.TargetSOC = 1.5 }},
		{"target_soc", func(r *Request) { r.TargetSOC = nan }},
		{"max_current_amps", func(r *Request) { r.MaxCurrentAmps = -1 }},
		{"max_current_amps", func(r *Request) { r.MaxCurrentAmps = 0 }},
		{"max_current_amps", func(r *Request) { r.MaxCurrentAmps = math.Inf(1) }},
		{"max_voltage_volts", func(r *Request) { r.MaxVoltageVolts = -4 }},
		{"max_power_watts", func(r *Request) { r.MaxPowerWatts = nan }},
		{"efficiency", func(r *Request) { r.Efficiency = 0 }},
		{"efficiency", func(r *Request) { r.Efficiency = 1.2 }},
		{"deadline_seconds", func(r *Request) { r.DeadlineSeconds = -1 }},
		{"termination_c_rate", func(r *Request) { r.TerminationRate = -0.05 }},
		{"pack.series", func(r *Request) { r.Pack.Series = 0 }},
		{"pack.type", func(r *Request) { r.Pack.Type = nil }},
		{"pack.type.capacity_amp_hours", func(r *Request) {
			bad := *r.Pack.Type
			bad.CapacityAh = nan
			r.Pack.Type = &bad
		}},
	} {
		req := good
		c.edit(&req)
		_, err := Plan(&req, nil)
		var fe *cell.FieldError
		if !errors.As(err, &fe) || !errors.Is(err, cell.ErrInvalid) {
			t.Errorf("%s: Plan = %v; want a *cell.FieldError", c.field, err)
			continue
		}
		if fe.Field != c.field {
			t.Errorf("%s: error names field %q (%v)", c.field, fe.Field, err)
		}
	}
	if _, err := Plan(nil, nil); !errors.Is(err, cell.ErrInvalid) {
		t.Errorf("Plan(nil) = %v; want ErrInvalid", err)
	}
}

func TestDoesNotMutateRequest(t *testing.T) {
	typ := builtin(t, "generic-lfp-26650")
	req := Request{Pack: pack(t, typ, 4, 1), State: cell.State{SOC: 0.2, H: -0.01}, TemperatureCelsius: 25,
		MaxCurrentAmps: 3.3, Efficiency: 0.9, DeadlineSeconds: 4 * 3600}
	before := req
	mustPlan(t, &req, nil)
	if req != before {
		t.Errorf("Plan changed the request: %+v → %+v", before, req)
	}
}

// BenchmarkPlanCCCV is a full CC-CV plan for a 4s2p pack of the built-in NMC cell
// (two RC branches), from 10 % to full at 0.5 C.
func BenchmarkPlanCCCV(b *testing.B) {
	typ := builtin(b, "generic-nmc-18650")
	req := &Request{Pack: pack(b, typ, 4, 2), State: cell.State{SOC: 0.1}, TemperatureCelsius: 25,
		MaxCurrentAmps: 3, Efficiency: 0.92}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Plan(req, nil); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkPlanDeadline is the same pack charged to 80 % by a 3 h deadline (a bisection
// over the current).
func BenchmarkPlanDeadline(b *testing.B) {
	typ := builtin(b, "generic-nmc-18650")
	req := &Request{Pack: pack(b, typ, 4, 2), State: cell.State{SOC: 0.1}, TemperatureCelsius: 25,
		TargetSOC: 0.8, MaxCurrentAmps: 6, Efficiency: 0.92, DeadlineSeconds: 3 * 3600}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Plan(req, nil); err != nil {
			b.Fatal(err)
		}
	}
}

// TestPrecharge checks the lithium precharge at ≤ 0.1 C below the cut-off voltage
// (REFERENCE.md §1a, common practice) and the below-floor warning (§5).
func TestPrecharge(t *testing.T) {
	typ := builtin(t, "generic-nmc-18650")
	// A cell just after a heavy discharge: rested OCV 3.30 V, but 0.35 V still across
	// the slow RC branch puts the terminal at 2.95 V, below the 3.0 V cut-off.
	res := mustPlan(t, &Request{Pack: pack(t, typ, 1, 1), State: cell.State{V: [cell.MaxBranches]float64{0, 0.35}},
		TemperatureCelsius: 25, MaxCurrentAmps: 1.5, Efficiency: 0.9}, nil)
	pre := phaseOf(res, PhasePrecharge)
	if pre == nil || math.Abs(pre.StartCurrentAmps+0.3) > 1e-12 || !hasWarning(res, WarnBelowCutoff) {
		t.Fatalf("phases %+v, warnings %+v; want a 0.1 C (0.3 A) precharge and a below-cutoff warning", res.Phases, res.Warnings)
	}
	if math.Abs(pre.EndVolts-3.0) > 1e-6 {
		t.Errorf("precharge ends at %.6f V; want the 3.0 V cut-off", pre.EndVolts)
	}
	if res.Phases[1].Kind != PhaseConstantCurrent || hasWarning(res, WarnBelowFloor) {
		t.Errorf("after precharge %s, warnings %+v", res.Phases[1].Kind, res.Warnings)
	}
	deep := mustPlan(t, &Request{Pack: pack(t, typ, 1, 1), State: cell.State{V: [cell.MaxBranches]float64{0, 0.9}},
		TemperatureCelsius: 25, MaxCurrentAmps: 1.5, Efficiency: 0.9}, nil)
	if !hasWarning(deep, WarnBelowFloor) {
		t.Errorf("terminal 2.4 V (< 2.5 V floor): warnings %+v; want below-floor", deep.Warnings)
	}
}

// FuzzPlan checks that no request makes Plan panic or return a result with non-finite
// numbers.
func FuzzPlan(f *testing.F) {
	f.Add(0.2, 25.0, 0.8, 1.5, 0.0, 0.0, 0.9, 0.0, 0.0, uint8(0))
	f.Add(0.0, 10.0, 1.0, 2.0, 14.0, 30.0, 0.85, 20000.0, 0.02, uint8(6))
	f.Add(0.5, 20.0, 0.0, 0.24, 0.0, 0.0, 1.0, 3600.0, 0.0, uint8(5))
	names := chem.Names()
	f.Fuzz(func(t *testing.T, soc, temp, target, amps, volts, watts, eff, deadline, term float64, which uint8) {
		typ := builtin(t, names[int(which)%len(names)])
		req := &Request{Pack: cell.Pack{Type: typ, Series: 2, Parallel: 1}, State: cell.State{SOC: soc},
			TemperatureCelsius: temp, TargetSOC: target, MaxCurrentAmps: amps, MaxVoltageVolts: volts,
			MaxPowerWatts: watts, Efficiency: eff, DeadlineSeconds: deadline, TerminationRate: term}
		res, err := Plan(req, &Settings{MaxSeconds: 48 * 3600})
		if err != nil {
			return
		}
		for _, v := range []float64{res.Target.Seconds, res.Full.Seconds, res.Full.ChargeAh, res.Full.EnergyWh, res.Full.SupplyWh, res.CurrentAmps} {
			if !cell.Finite(v) || v < 0 {
				t.Fatalf("non-finite or negative figure %g in %+v", v, res)
			}
		}
	})
}

// FuzzPlanValid maps arbitrary numbers into valid requests (any built-in rechargeable
// type, any SOC, temperature, limits and deadline) and checks the plan's invariants:
// finite figures, time and charge never decreasing from target to full, and the
// supply energy equal to the pack energy ÷ efficiency.
func FuzzPlanValid(f *testing.F) {
	f.Add(0.2, 25.0, 0.8, 1.5, 0.0, 0.0, 0.9, 0.0, uint8(0))
	f.Add(0.95, -10.0, 0.99, 0.01, 3.0, 1.0, 0.5, 5e4, uint8(3))
	var types []*cell.Type
	for _, typ := range chem.All() {
		if typ.Rechargeable() {
			types = append(types, typ)
		}
	}
	frac := func(x float64) float64 {
		if !cell.Finite(x) {
			return 0.5
		}
		return math.Abs(x - math.Trunc(x))
	}
	f.Fuzz(func(t *testing.T, soc, temp, target, amps, volts, watts, eff, deadline float64, which uint8) {
		typ := types[int(which)%len(types)]
		p := cell.Pack{Type: typ, Series: 3, Parallel: 2}
		oneC := p.RatedCapacityAh()
		req := &Request{Pack: p, State: cell.State{SOC: frac(soc)},
			TemperatureCelsius: typ.Limits.ChargeMinCelsius + frac(temp)*(typ.Limits.ChargeMaxCelsius-typ.Limits.ChargeMinCelsius),
			TargetSOC:          frac(target),
			MaxCurrentAmps:     (0.001 + 2*frac(amps)) * oneC,
			MaxVoltageVolts:    frac(volts) * 5 * 3,
			MaxPowerWatts:      frac(watts) * 20 * oneC,
			Efficiency:         0.05 + 0.95*frac(eff),
			DeadlineSeconds:    frac(deadline) * 20 * 3600,
		}
		res, err := Plan(req, &Settings{MaxSeconds: 48 * 3600})
		if err != nil {
			t.Fatalf("valid request %+v: %v", req, err)
		}
		for _, v := range []float64{res.Target.Seconds, res.Full.Seconds, res.Full.ChargeAh, res.Full.EnergyWh, res.CurrentAmps} {
			if !cell.Finite(v) || v < 0 {
				t.Fatalf("non-finite or negative figure %g in %+v", v, res)
			}
		}
		if res.Target.Reached && res.Full.Reached && (res.Target.Seconds > res.Full.Seconds+1e-6 || res.Target.ChargeAh > res.Full.ChargeAh+1e-9) {
			t.Fatalf("target %+v after full %+v", res.Target, res.Full)
		}
		if math.Abs(res.Full.SupplyWh*req.Efficiency-res.Full.EnergyWh) > 1e-9*math.Max(1, res.Full.EnergyWh) {
			t.Fatalf("supply %g Wh, pack %g Wh, efficiency %g", res.Full.SupplyWh, res.Full.EnergyWh, req.Efficiency)
		}
	})
}
