package forecast

import (
	"errors"
	"math"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/sim"
	"github.com/voltcast/voltcast/model/table"
)

func surface(t testing.TB, soc, v []float64) *table.Surface {
	t.Helper()
	sf, err := table.NewSurface(soc, []float64{cell.Kelvin(25)}, [][]float64{v})
	if err != nil {
		t.Fatal(err)
	}
	return sf
}

func problem(typ *cell.Type, z0 float64, load sim.Load) *Problem {
	return &Problem{Problem: sim.Problem{
		Pack: cell.Pack{Type: typ, Series: 1, Parallel: 1}, Initial: cell.State{SOC: z0}, Celsius: 25, Load: load,
	}}
}

// idealSpan is the state-of-charge span of the ideal cell's final voltage drop.
const idealSpan = 1e-5

// idealType is the cell of ../shared/REFERENCE.md worked example E1 made ideal: 2.4 Ah,
// no resistance, no RC branches, an OCV that is nearly flat (3.6 V full to 3.5 V) until
// the last 10⁻⁵ of its charge, where it drops to 2.0 V, through the 3.0 V cut-off. The
// cut-off is therefore crossed at a state of charge between 0 and 10⁻⁵.
func idealType(t testing.TB) *cell.Type {
	t.Helper()
	typ := &cell.Type{
		Name: "test-ideal", Chemistry: cell.ChemistryNMC, ChargeMethod: cell.ChargeCCCV,
		CapacityAh: 2.4, NominalVolts: 3.55,
		OCV:    surface(t, []float64{0, idealSpan, 0.5, 1}, []float64{2.0, 3.5, 3.55, 3.6}),
		Limits: testLimits(3.0),
	}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	return typ
}

// TestIdealRuntimeE1 checks ../shared/REFERENCE.md E1 (common practice): 2.4 Ah at
// 1.2 A lasts 2.0 h in the ideal limit. The ideal cell reaches its cut-off somewhere in
// the last 10⁻⁵ of its charge, so the forecast may fall short of 7200 s by up to
// 10⁻⁵·7200 s = 0.072 s (plus the search tolerances, far smaller).
func TestIdealRuntimeE1(t *testing.T) {
	res, err := Run(nil, problem(idealType(t), 1, sim.ConstantCurrent(1.2)), nil)
	if err != nil {
		t.Fatal(err)
	}
	const tol = idealSpan*7200 + 1e-3
	if res.Status != StatusCutoff || res.Seconds > 7200+1e-3 || res.Seconds < 7200-tol {
		t.Errorf("ideal 2.4 Ah at 1.2 A: %v after %.4f s; E1 gives 7200 s (−%.3f s allowed)", res.Status, res.Seconds, tol)
	}
	if math.Abs(res.AmpHours-2.4) > 2.4*idealSpan+1e-6 {
		t.Errorf("ideal 2.4 Ah at 1.2 A delivered %.7f Ah; want 2.4", res.AmpHours)
	}
	if res.Steps > 40 {
		t.Errorf("ideal discharge took %d steps; the 5 %% SOC limit allows about 20", res.Steps)
	}
}

// TestFloorE8 stops at a floor state of charge and checks ../shared/REFERENCE.md E8:
// Q = 2.5 Ah, z0 = 0.80, 1.0 A reaches z = 0.60 after 0.5 h = 1800 s, exactly for
// coulomb counting (1e-12 in state of charge; the located time to 1 ms).
func TestFloorE8(t *testing.T) {
	typ := *idealType(t)
	typ.CapacityAh = 2.5
	prob := problem(&typ, 0.80, sim.ConstantCurrent(1.0))
	prob.SOCFloor = 0.60
	res, err := Run(nil, prob, nil)
	if err != nil {
		t.Fatal(err)
	}
	if res.Status != StatusSOCFloor || math.Abs(res.Seconds-1800) > 1e-3 || math.Abs(res.Final.SOC-0.60) > 1e-6 {
		t.Errorf("E8 to a 0.60 floor: %v at %.6f s, z = %.9f; want soc-floor at 1800 s, z = 0.60", res.Status, res.Seconds, res.Final.SOC)
	}
	// Coulomb counting itself is exact: one step of exactly 1800 s lands on 0.60.
	s := cell.State{SOC: 0.80}
	c := prob.Circuit()
	if _, err := c.Advance(&s, sim.Current, 1.0, 1800); err != nil || math.Abs(s.SOC-0.60) > 1e-12 {
		t.Errorf("E8: 1.0 A for 1800 s from 0.80 gives %.15f (%v); want 0.60", s.SOC, err)
	}
}

// peukertType is a lead-acid-like cell: OCV from the BCI table of
// ../shared/REFERENCE.md §4 (12 V values ÷ 6, linear between its 25 % points), an
// ohmic 0.8 mΩ (from the 3–6 mΩ of a 12 V 100 Ah block, ÷ 6; §1c, from memory), and a
// polarisation resistance K/z of Shepherd's form (§2.5: K·Q/(Q − it) = K/z), tabulated.
func peukertType(t testing.TB, k, capacityAh float64) *cell.Type {
	t.Helper()
	z := []float64{0, 0.01, 0.02, 0.03, 0.05, 0.07, 0.1, 0.15, 0.2, 0.3, 0.4, 0.5, 0.7, 1}
	r := make([]float64, len(z))
	for i, zi := range z {
		r[i] = 0.0008 + k/math.Max(zi, 0.005)
	}
	rt, err := table.NewSurface(z, []float64{cell.Kelvin(25)}, [][]float64{r})
	if err != nil {
		t.Fatal(err)
	}
	typ := &cell.Type{
		Name: "test-lead-acid", Chemistry: cell.ChemistryVRLA, ChargeMethod: cell.ChargeThreeStage,
		CapacityAh: capacityAh, NominalVolts: 2.0,
		OCV: surface(t, []float64{0, 0.25, 0.5, 0.75, 1},
			[]float64{11.89 / 6, 12.06 / 6, 12.24 / 6, 12.45 / 6, 12.65 / 6}),
		R0: cell.Param{Table: rt},
		Limits: cell.Limits{
			ChargeVolts: 2.4, FloatVolts: 2.27, CutoffVolts: 1.75, FloorVolts: 1.6, MaxChargeRate: 0.3,
			StandardChargeRate: 0.1, MaxDischargeRate: 1, ChargeMinCelsius: -20, ChargeMaxCelsius: 50,
			DischargeMinCelsius: -20, DischargeMaxCelsius: 50,
		},
	}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	return typ
}

// TestPeukertE2 compares the model's rate effect with Peukert's law on
// ../shared/REFERENCE.md example E2 (100 Ah at the 20 h rate, 5 A; k = 1.2; 20 A lasts
// 3.789 h, delivering 75.8 Ah).
//
// An equivalent circuit does not follow Peukert's power law: its capacity falls with
// rate because the resistive drop R(z)·I meets the cut-off earlier. So the one free
// constant of the polarisation resistance, K, is set so that the capacity delivered at
// 20 A is E2's fraction of that at 5 A, (5/20)^0.2 = 0.7579, and the capacity so that
// 5 A lasts 20 h; the checks are then made at a rate not used to set them (10 A).
//
// Tolerance: at 10 A Peukert's law with k = 1.2 gives 20·(5/10)^1.2 = 8.705 h. The
// model must lie within the band Peukert's law itself spans over the k published for
// lead-acid, 1.1 to 1.3 (REFERENCE.md §1c, WP-Peukert): 20·0.5^1.1 = 9.330 h to
// 20·0.5^1.3 = 8.123 h, and so must its effective exponent between 5 and 10 A and
// between 10 and 20 A. We measured 9.17 h (k ≈ 1.13 below 10 A, ≈ 1.27 above): the
// Shepherd-type resistance makes the rate effect grow with rate faster than a power
// law. Beyond the calibrated range the two part company (the test logs 40 A, where
// the model gives much less than Peukert), and at very low rates the model's capacity
// saturates where Peukert's law keeps growing (a known over-prediction of the law,
// WP-Peukert).
func TestPeukertE2(t *testing.T) {
	delivered := func(k, capAh, amps float64) (float64, Result) {
		res, err := Run(nil, problem(peukertType(t, k, capAh), 1, sim.ConstantCurrent(amps)), nil)
		if err != nil {
			t.Fatal(err)
		}
		if res.Status != StatusCutoff {
			t.Fatalf("lead-acid cell at %g A: status %v", amps, res.Status)
		}
		return res.AmpHours, res
	}
	target := math.Pow(0.25, 0.2) // E2: 75.8 Ah / 100 Ah
	lo, hi := 1e-5, 1e-2          // K in Ω: the ratio falls as K grows
	for range 60 {
		k := math.Sqrt(lo * hi)
		c5, _ := delivered(k, 100, 5)
		c20, _ := delivered(k, 100, 20)
		if c20/c5 > target {
			lo = k
		} else {
			hi = k
		}
	}
	k := math.Sqrt(lo * hi)
	c5, _ := delivered(k, 100, 5)
	capAh := 100 * 100 / c5 // the model capacity that delivers 100 Ah at 5 A
	hours := func(amps float64) float64 {
		_, res := delivered(k, capAh, amps)
		return res.Seconds / 3600
	}
	t5, t10, t20 := hours(5), hours(10), hours(20)
	t.Logf("K = %.6g Ω, model capacity %.3f Ah: 5 A %.3f h, 10 A %.3f h, 20 A %.3f h, 40 A %.3f h (Peukert k=1.2: 20, 8.705, 3.789, 1.649 h)",
		k, capAh, t5, t10, t20, hours(40))
	if math.Abs(t5-20) > 0.02 || math.Abs(t20-3.789) > 0.004 {
		t.Errorf("calibration: 5 A lasts %.4f h, 20 A %.4f h; E2 gives 20 h and 3.789 h", t5, t20)
	}
	if lo, hi := 20*math.Pow(0.5, 1.3), 20*math.Pow(0.5, 1.1); t10 < lo || t10 > hi {
		t.Errorf("10 A lasts %.3f h; Peukert with k = 1.1 to 1.3 gives %.3f to %.3f h (k = 1.2: 8.705 h)", t10, lo, hi)
	}
	// Effective Peukert exponent between two rates: I^k·t constant.
	kEff := func(i1, t1, i2, t2 float64) float64 { return math.Log(t1/t2) / math.Log(i2/i1) }
	for _, r := range [][4]float64{{5, t5, 10, t10}, {10, t10, 20, t20}} {
		if ke := kEff(r[0], r[1], r[2], r[3]); ke < 1.1 || ke > 1.3 {
			t.Errorf("effective Peukert exponent %g–%g A = %.3f; lead-acid has 1.1 to 1.3", r[0], r[2], ke)
		}
	}
}

func TestStatuses(t *testing.T) {
	typ := twoRC(t)
	cases := []struct {
		name string
		prob *Problem
		set  *Settings
		want Status
	}{
		{"cutoff", problem(typ, 1, sim.ConstantCurrent(3)), nil, StatusCutoff},
		{"does not reach within the horizon", problem(typ, 1, sim.ConstantCurrent(1e-6)), nil, StatusHorizon},
		{"load ends", problem(typ, 1, sim.Load{Segments: []sim.Segment{{Duration: 600, Kind: sim.Current, Value: 3}}}), nil, StatusLoadEnded},
		{"already below cut-off", problem(typ, 0.05, sim.ConstantCurrent(30)), nil, StatusCannotStart},
		{"power beyond the pack", problem(typ, 1, sim.ConstantPower(500)), nil, StatusCannotStart},
		{"step limit", problem(typ, 1, sim.ConstantCurrent(3)), &Settings{MaxSteps: 5}, StatusStepLimit},
		{"rest-heavy duty cycle reaches cut-off", problem(typ, 0.3, sim.Load{Repeat: true, Segments: []sim.Segment{
			{Duration: 1, Kind: sim.Current, Value: 6}, {Duration: 59, Kind: sim.Current, Value: 0}}}), nil, StatusCutoff},
	}
	floor := problem(typ, 0.5, sim.ConstantCurrent(3))
	floor.SOCFloor = 0.2
	cases = append(cases, struct {
		name string
		prob *Problem
		set  *Settings
		want Status
	}{"floor", floor, nil, StatusSOCFloor})
	// A cut-off below the ideal cell's voltage when empty: it empties first.
	empty := problem(idealType(t), 0.5, sim.ConstantCurrent(1.2))
	empty.CellCutoffVolts = 1.5
	cases = append(cases, struct {
		name string
		prob *Problem
		set  *Settings
		want Status
	}{"empty", empty, nil, StatusEmpty})
	// A cut-off below the voltage at maximum power: the power gives out first.
	pl := problem(typ, 1, sim.ConstantPower(8))
	pl.Pack.ResistanceFactor = 10
	pl.CellCutoffVolts = 0.5
	cases = append(cases, struct {
		name string
		prob *Problem
		set  *Settings
		want Status
	}{"power limit", pl, nil, StatusPowerLimit})
	for _, c := range cases {
		res, err := Run(nil, c.prob, c.set)
		if err != nil {
			t.Errorf("%s: %v", c.name, err)
			continue
		}
		if res.Status != c.want {
			t.Errorf("%s: status %v after %g s; want %v", c.name, res.Status, res.Seconds, c.want)
		}
		if c.want == StatusCannotStart && (res.Seconds != 0 || res.AmpHours != 0 || len(res.Warnings) == 0) {
			t.Errorf("%s: %g s, %g Ah, warnings %q; want 0 s, 0 Ah and a warning", c.name, res.Seconds, res.AmpHours, res.Warnings)
		}
		if c.want == StatusHorizon && res.Seconds != DefaultHorizon {
			t.Errorf("%s: ended at %g s; want the horizon %g s", c.name, res.Seconds, DefaultHorizon)
		}
		if c.want == StatusPowerLimit {
			// The last deliverable instant is just short of the maximum-power point, where
			// v = E/2; Draw fails just beyond it.
			e, r := c.prob.Circuit().Thevenin(&res.Final, false)
			if pmax := e * e / (4 * r); math.Abs(pmax/8-1) > 1e-3 {
				t.Errorf("%s: at the stop the pack could deliver %g W; want just about 8 W", c.name, pmax)
			}
		}
	}
}

// TestSteps checks the adaptive stepping: a 10-hour discharge (C/10) takes on the order
// of tens of steps, not 36 000, and stops within 1 µV of the cut-off.
func TestSteps(t *testing.T) {
	typ := twoRC(t)
	res, err := Run(nil, problem(typ, 1, sim.ConstantCurrent(0.3)), nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("C/10: %.0f s in %d steps, %d evaluations", res.Seconds, res.Steps, res.Evaluations)
	if res.Status != StatusCutoff || res.Seconds < 9*3600 || res.Steps > 500 {
		t.Errorf("C/10 discharge: %v after %.0f s in %d steps; want cut-off after about 10 h in a few hundred steps at most", res.Status, res.Seconds, res.Steps)
	}
	if math.Abs(res.FinalVolts-typ.Limits.CutoffVolts) > 1e-6 {
		t.Errorf("stopped at %.9f V; cut-off %g V", res.FinalVolts, typ.Limits.CutoffVolts)
	}
}

// TestCrossingConverges checks that the located crossing does not depend on the step
// control: with steps ten times finer in voltage and state of charge the time to
// cut-off moves by less than 1 s, and both stop within 1 mV of the cut-off.
func TestCrossingConverges(t *testing.T) {
	typ := twoRC(t)
	for _, load := range []sim.Load{sim.ConstantCurrent(4), sim.ConstantPower(12), sim.ConstantResistance(1.1)} {
		prob := problem(typ, 0.95, load)
		coarse, err := Run(nil, prob, nil)
		if err != nil {
			t.Fatal(err)
		}
		fine, err := Run(nil, prob, &Settings{MaxSOCStep: 0.002, MaxVoltsStep: 0.001})
		if err != nil {
			t.Fatal(err)
		}
		if d := math.Abs(coarse.Seconds - fine.Seconds); d > 1 {
			t.Errorf("%v: %.3f s with default steps, %.3f s with fine steps", load.Segments[0].Kind, coarse.Seconds, fine.Seconds)
		}
		for _, r := range []Result{coarse, fine} {
			if math.Abs(r.FinalVolts-3.0) > 1e-3 {
				t.Errorf("%v: stopped at %.6f V; cut-off 3.0 V", load.Segments[0].Kind, r.FinalVolts)
			}
		}
	}
}

// TestSpread checks the ±1σ range on the ideal cell, where the time is exactly
// proportional to both the state of charge and the capacity (E1: t = z·Q/I), so the
// range is t₀ ∓ √((σz·Q/I)² + (σQ·z·Q/I)²).
func TestSpread(t *testing.T) {
	prob := problem(idealType(t), 0.8, sim.ConstantCurrent(1.2))
	prob.SOCSigma, prob.CapacitySigma = 0.05, 0.1
	res, err := Run(nil, prob, nil)
	if err != nil {
		t.Fatal(err)
	}
	t0 := 0.8 * 7200.0
	d := math.Hypot(0.05*7200, 0.1*t0)
	const tol = 0.2 // s: each run may stop up to 0.072 s early (TestIdealRuntimeE1)
	if math.Abs(res.Seconds-t0) > tol || math.Abs(res.LowSeconds-(t0-d)) > tol || math.Abs(res.HighSeconds-(t0+d)) > tol {
		t.Errorf("range %.2f < %.2f < %.2f s; want %.2f < %.2f < %.2f s", res.LowSeconds, res.Seconds, res.HighSeconds, t0-d, t0, t0+d)
	}
	// Near full, the +σ state of charge is clamped at 1.
	prob.Initial.SOC, prob.CapacitySigma = 0.98, 0
	res, err = Run(nil, prob, nil)
	if err != nil {
		t.Fatal(err)
	}
	if up := res.HighSeconds - res.Seconds; math.Abs(up-0.02*7200) > tol {
		t.Errorf("at z = 0.98 ± 0.05 the range reaches %.2f s above; want %.2f s (clamped at full)", up, 0.02*7200)
	}
}

func TestTrace(t *testing.T) {
	typ := twoRC(t)
	prob := problem(typ, 0.9, sim.Load{Repeat: true, Segments: []sim.Segment{
		{Duration: 100, Kind: sim.Current, Value: 4}, {Duration: 50, Kind: sim.Power, Value: 5}}})
	res, err := Run(nil, prob, &Settings{TracePoints: 50})
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Trace) != 50 {
		t.Fatalf("trace has %d points; want 50", len(res.Trace))
	}
	for k, smp := range res.Trace {
		if want := res.Seconds * float64(k) / 49; math.Abs(smp.Time-want) > 1e-9*res.Seconds {
			t.Errorf("trace point %d at %g s; want %g s", k, smp.Time, want)
		}
	}
	last := res.Trace[49]
	// The trace is a second run with extra step boundaries; the power segments' held
	// current differs between the two to second order in the step.
	if math.Abs(last.Volts-res.FinalVolts) > 1e-3 || math.Abs(last.SOC-res.Final.SOC) > 2e-5 {
		t.Errorf("trace ends at %.5f V, z = %.6f; the forecast stopped at %.5f V, z = %.6f", last.Volts, last.SOC, res.FinalVolts, res.Final.SOC)
	}
	// Each trace point is a model state: simulating to it in 10 s steps gives the same,
	// to the second-order error with which the power segments' current is held per step.
	smp := res.Trace[20]
	s := cell.State{SOC: 0.9}
	r, err := sim.Run(nil, &prob.Problem, &sim.Settings{Step: 10, Interval: smp.Time, Horizon: smp.Time})
	if err != nil {
		t.Fatal(err)
	}
	s = r.Final
	if math.Abs(s.SOC-smp.SOC) > 2e-5 || math.Abs(r.Samples[len(r.Samples)-1].Volts-smp.Volts) > 2e-3 {
		t.Errorf("trace point at %g s: z = %.6f, %.4f V; simulation gives z = %.6f, %.4f V", smp.Time, smp.SOC, smp.Volts, s.SOC, r.Samples[len(r.Samples)-1].Volts)
	}
}

func TestWarnings(t *testing.T) {
	typ := twoRC(t)
	prob := problem(typ, 1, sim.ConstantCurrent(9)) // 3 C, above the 2 C rating
	prob.CellCutoffVolts = 2.4                      // below the 2.5 V floor
	prob.Celsius = -30                              // below the −20 °C discharge limit
	res, err := Run(nil, prob, nil)
	if err != nil {
		t.Fatal(err)
	}
	if len(res.Warnings) != 3 {
		t.Errorf("warnings %q; want three (cut-off, current, temperature)", res.Warnings)
	}
}

func TestRejects(t *testing.T) {
	typ := twoRC(t)
	primary := *typ
	primary.ChargeMethod = cell.ChargeNone
	bad := []struct {
		field string
		edit  func(p *Problem, s *Settings)
	}{
		{"initial.state_of_charge", func(p *Problem, _ *Settings) { p.Initial.SOC = math.NaN() }},
		{"initial.state_of_charge", func(p *Problem, _ *Settings) { p.Initial.SOC = -0.1 }},
		{"initial.state_of_charge", func(p *Problem, _ *Settings) { p.Initial.SOC = 1.01 }},
		{"temperature_celsius", func(p *Problem, _ *Settings) { p.Celsius = 101 }},
		{"temperature_celsius", func(p *Problem, _ *Settings) { p.Celsius = math.Inf(-1) }},
		{"load.segments[0].value", func(p *Problem, _ *Settings) { p.Load = sim.ConstantCurrent(-2) }},
		{"load.segments[0].value", func(p *Problem, _ *Settings) { p.Load = sim.ConstantCurrent(0) }},
		{"load.segments[0].value", func(p *Problem, _ *Settings) { p.Load = sim.ConstantPower(-5) }},
		{"load.segments[0].value", func(p *Problem, _ *Settings) { p.Load = sim.ConstantCurrent(math.Inf(1)) }},
		{"load.segments", func(p *Problem, _ *Settings) {
			p.Load = sim.Load{Repeat: true, Segments: []sim.Segment{{Duration: 10, Kind: sim.Current, Value: -1}, {Duration: 10, Kind: sim.Current}}}
		}},
		{"load.segments[0].value", func(p *Problem, _ *Settings) {
			p.Pack.Type = &primary
			p.Load = sim.Load{Repeat: true, Segments: []sim.Segment{{Duration: 10, Kind: sim.Current, Value: -1}, {Duration: 10, Kind: sim.Current, Value: 2}}}
		}},
		{"soc_floor", func(p *Problem, _ *Settings) { p.SOCFloor = 1 }},
		{"soc_sigma", func(p *Problem, _ *Settings) { p.SOCSigma = math.NaN() }},
		{"capacity_sigma", func(p *Problem, _ *Settings) { p.CapacitySigma = 0.9 }},
		{"cell_cutoff_volts", func(p *Problem, _ *Settings) { p.CellCutoffVolts = math.NaN() }},
		{"parallel", func(p *Problem, _ *Settings) { p.Pack.Parallel = -1 }},
		{"settings.horizon", func(_ *Problem, s *Settings) { s.Horizon = -1 }},
		{"settings.max_volts_step", func(_ *Problem, s *Settings) { s.MaxVoltsStep = math.NaN() }},
		{"settings.trace_points", func(_ *Problem, s *Settings) { s.TracePoints = 1 }},
	}
	for _, b := range bad {
		p := problem(typ, 0.8, sim.ConstantCurrent(2))
		var s Settings
		b.edit(p, &s)
		_, err := Run(nil, p, &s)
		var fe *cell.FieldError
		if !errors.As(err, &fe) || fe.Field != b.field || !errors.Is(err, cell.ErrInvalid) {
			t.Errorf("Run with bad %s: error %v; want a FieldError on %s", b.field, err, b.field)
		}
	}
	// A type that fails validation is reported, not stepped.
	broken := *typ
	broken.CapacityAh = -1
	if _, err := Run(nil, problem(&broken, 0.8, sim.ConstantCurrent(2)), nil); !errors.Is(err, cell.ErrInvalid) {
		t.Errorf("Run with a negative capacity: error %v; want ErrInvalid", err)
	}
}

// TestNoAllocs checks that a forecast without trace or warnings allocates nothing
// beyond what validating its cell type does (cell.Type.Validate builds some field
// names as it goes).
func TestNoAllocs(t *testing.T) {
	if raceEnabled {
		t.Skip("the race detector changes allocation counts")
	}
	for _, typ := range []*cell.Type{idealType(t), twoRC(t)} {
		prob := problem(typ, 1, sim.ConstantCurrent(1.2))
		base := testing.AllocsPerRun(20, func() { _ = typ.Validate() })
		if n := testing.AllocsPerRun(20, func() { _, _ = Run(nil, prob, nil) }); n != base {
			t.Errorf("%s: Run allocates %g times, validating the type %g; want no more", typ.Name, n, base)
		}
	}
}
