package sim

import (
	"errors"
	"math"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/table"
)

// limits are plausible per-cell limits for a lithium test cell; the values do not
// matter to the checks below except the cut-off, which each test states.
func limits(cutoff float64) cell.Limits {
	return cell.Limits{
		ChargeVolts: 4.2, CutoffVolts: cutoff, FloorVolts: math.Min(2.5, cutoff), MaxChargeRate: 1,
		StandardChargeRate: 0.5, MaxDischargeRate: 2, TerminationRate: 0.05, ChargeMinCelsius: 0,
		ChargeMaxCelsius: 45, DischargeMinCelsius: -20, DischargeMaxCelsius: 60,
	}
}

func surface(t testing.TB, soc, v []float64) *table.Surface {
	t.Helper()
	sf, err := table.NewSurface(soc, []float64{cell.Kelvin(25)}, [][]float64{v})
	if err != nil {
		t.Fatal(err)
	}
	return sf
}

// e4Type is the 1-RC cell of ../shared/REFERENCE.md worked example E4 (R0 = 50 mΩ,
// R1 = 30 mΩ, C1 = 1000 F). E4 holds the OCV at 3.70 V; a table must not be flat, so
// the OCV rises linearly from 3.6 to 3.8 V and the capacity is 10⁹ Ah: over 90 s at
// 2 A the state of charge moves by 5·10⁻¹¹, the OCV by 10⁻¹¹ V.
func e4Type(t testing.TB) *cell.Type {
	t.Helper()
	typ := &cell.Type{
		Name: "test-e4", Chemistry: cell.ChemistryNMC, ChargeMethod: cell.ChargeCCCV,
		CapacityAh: 1e9, NominalVolts: 3.7, OCV: surface(t, []float64{0, 1}, []float64{3.6, 3.8}),
		R0:       cell.Param{Value: 0.050},
		Branches: []cell.Branch{{R: cell.Param{Value: 0.030}, C: cell.Param{Value: 1000}}},
		Limits:   limits(3.0),
	}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	return typ
}

// e4 is the closed form of ../shared/REFERENCE.md E4: V(t) = 3.70 − 0.10 − 0.06·(1 − e^(−t/30)).
func e4(t float64) float64 { return 3.70 - 0.10 - 0.06*(1-math.Exp(-t/30)) }

// TestRunE4 checks the 1-RC step response of Run against the closed form of E4 at the
// example's time points to 1e-6 V, with 1 s steps and with one step per time point, and
// the ZOH branch voltage after 30 one-second steps against E4's 0.0379272 V.
func TestRunE4(t *testing.T) {
	prob := &Problem{
		Pack:    cell.Pack{Type: e4Type(t), Series: 1, Parallel: 1},
		Initial: cell.State{SOC: 0.5}, Celsius: 25, Load: ConstantCurrent(2.0),
	}
	// E4's tabulated values (5 decimals) agree with the closed form to 5e-6 V.
	tab := map[float64]float64{0: 3.60000, 1: 3.59803, 10: 3.58299, 30: 3.56207, 60: 3.54812, 90: 3.54299}
	res, err := Run(nil, prob, &Settings{Step: 1, Horizon: 90})
	if err != nil {
		t.Fatal(err)
	}
	if res.Status != StatusHorizon || len(res.Samples) != 91 {
		t.Fatalf("Run: status %v with %d samples; want horizon with 91", res.Status, len(res.Samples))
	}
	for _, smp := range res.Samples {
		w, ok := tab[smp.Time]
		if !ok {
			continue
		}
		if got := smp.Volts; math.Abs(got-e4(smp.Time)) > 1e-6 || math.Abs(got-w) > 5e-6 {
			t.Errorf("1 s steps: V(%g s) = %.7f; E4 closed form %.7f, table %.5f", smp.Time, got, e4(smp.Time), w)
		}
		if smp.Time == 30 && math.Abs(smp.RC[0]-0.0379272) > 5e-8 {
			t.Errorf("v1 after 30 ZOH steps = %.7f; E4 gives 0.0379272", smp.RC[0])
		}
	}
	for tp := range tab {
		if tp == 0 {
			continue
		}
		res, err := Run(nil, prob, &Settings{Step: tp, Horizon: tp})
		if err != nil {
			t.Fatal(err)
		}
		last := res.Samples[len(res.Samples)-1]
		if res.Steps != 1 || last.Time != tp || math.Abs(last.Volts-e4(tp)) > 1e-6 {
			t.Errorf("one %g s step: %d steps, V(%g) = %.7f; E4 closed form %.7f", tp, res.Steps, last.Time, last.Volts, e4(tp))
		}
	}
}

// TestRunE8 checks coulomb counting against ../shared/REFERENCE.md worked example E8:
// Q = 2.5 Ah, z0 = 0.80, 1.0 A for 0.5 h gives z = 0.60.
func TestRunE8(t *testing.T) {
	typ := *e4Type(t)
	typ.CapacityAh = 2.5
	typ.OCV = surface(t, []float64{0, 1}, []float64{3.5, 4.1})
	prob := &Problem{
		Pack:    cell.Pack{Type: &typ, Series: 1, Parallel: 1},
		Initial: cell.State{SOC: 0.80}, Celsius: 25,
		Load: Load{Segments: []Segment{{Duration: 1800, Kind: Current, Value: 1.0}}},
	}
	for _, step := range []float64{1, 7, 1800} {
		res, err := Run(nil, prob, &Settings{Step: step, Interval: 1800})
		if err != nil {
			t.Fatal(err)
		}
		if res.Status != StatusLoadEnded || math.Abs(res.Final.SOC-0.60) > 1e-12 || math.Abs(res.AmpHours-0.5) > 1e-12 {
			t.Errorf("step %g s: status %v, z = %.15f, %.15f Ah; E8 gives z = 0.60 after 0.5 Ah", step, res.Status, res.Final.SOC, res.AmpHours)
		}
	}
	// Two cells in parallel carry half the current each: E8 with 2 A on a 1p2 pack.
	prob.Pack.Parallel = 2
	prob.Load.Segments[0].Value = 2.0
	res, err := Run(nil, prob, nil)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(res.Final.SOC-0.60) > 1e-12 {
		t.Errorf("1s2p at 2 A: z = %.15f; want 0.60", res.Final.SOC)
	}
}

func TestDraw(t *testing.T) {
	const e, r = 12.0, 0.1 // maximum power e²/(4r) = 360 W
	for _, p := range []float64{1, 100, 359.999, -50, -1000} {
		i, err := Draw(Power, p, e, r)
		if err != nil {
			t.Fatalf("Draw(power %g) error %v", p, err)
		}
		if got := (e - r*i) * i; math.Abs(got-p) > 1e-9*math.Abs(p) {
			t.Errorf("Draw(power %g): v·i = %g", p, got)
		}
		if i >= e/(2*r) {
			t.Errorf("Draw(power %g) = %g A, beyond the maximum-power current %g A", p, i, e/(2*r))
		}
	}
	if _, err := Draw(Power, 360.001, e, r); !errors.Is(err, ErrPowerLimit) {
		t.Errorf("Draw(power above e²/4r) error = %v; want ErrPowerLimit", err)
	}
	if _, err := Draw(Power, 1, -0.5, r); !errors.Is(err, ErrPowerLimit) {
		t.Errorf("Draw(power from a reversed source) error = %v; want ErrPowerLimit", err)
	}
	if i, _ := Draw(Power, 24, e, 0); i != 2 {
		t.Errorf("Draw(24 W, no resistance) = %g A; want 2", i)
	}
	if i, _ := Draw(Resistance, 2.9, e, r); math.Abs(i-4) > 1e-12 {
		t.Errorf("Draw(2.9 Ω) = %g A; want 12/(0.1+2.9) = 4", i)
	}
}

// TestPowerAndResistanceEnergy checks that constant-power and constant-resistance runs
// deliver what the load laws imply: P·t, and ∫v²/R dt (integrated here from the
// samples), on a 2-RC cell whose parameters depend on state of charge.
func TestPowerAndResistanceEnergy(t *testing.T) {
	typ := tableType(t)
	pack := cell.Pack{Type: typ, Series: 3, Parallel: 2}
	prob := &Problem{Pack: pack, Initial: cell.State{SOC: 0.9}, Celsius: 25, Load: ConstantPower(60)}
	res, err := Run(nil, prob, &Settings{Step: 5, Interval: 5})
	if err != nil {
		t.Fatal(err)
	}
	if res.Status != StatusCutoff {
		t.Fatalf("constant power: status %v; want cutoff", res.Status)
	}
	for _, smp := range res.Samples {
		if math.Abs(smp.Watts-60) > 1e-9 {
			t.Fatalf("sample at %g s draws %g W; want 60", smp.Time, smp.Watts)
		}
	}
	if want := 60 * res.Seconds / 3600; math.Abs(res.WattHours-want) > 2e-4*want {
		t.Errorf("constant power: %.6f Wh over %g s; P·t = %.6f Wh", res.WattHours, res.Seconds, want)
	}

	prob.Load = ConstantResistance(0.6)
	res, err = Run(nil, prob, &Settings{Step: 1, Interval: 1})
	if err != nil {
		t.Fatal(err)
	}
	var wh, ah float64
	for k := 1; k < len(res.Samples); k++ {
		a, b := res.Samples[k-1], res.Samples[k]
		if math.Abs(b.Amps-b.Volts/0.6) > 1e-9 {
			t.Fatalf("sample at %g s: i = %g, v/R = %g", b.Time, b.Amps, b.Volts/0.6)
		}
		dt := (b.Time - a.Time) / 3600
		wh += (a.Volts*a.Volts + b.Volts*b.Volts) / 0.6 / 2 * dt
		ah += (a.Volts + b.Volts) / 0.6 / 2 * dt
	}
	if math.Abs(res.WattHours-wh) > 1e-3*wh || math.Abs(res.AmpHours-ah) > 1e-3*ah {
		t.Errorf("constant resistance: %.5f Wh, %.5f Ah; samples integrate to %.5f Wh, %.5f Ah", res.WattHours, res.AmpHours, wh, ah)
	}
}

// tableType is a 2-RC cell whose OCV, R0 and RC parameters are tables over state of
// charge (values invented for the test, shaped like a lithium cell).
func tableType(t testing.TB) *cell.Type {
	t.Helper()
	z := []float64{0, 0.05, 0.1, 0.2, 0.4, 0.6, 0.8, 1}
	param := func(v ...float64) cell.Param { return cell.Param{Table: surface(t, z, v)} }
	typ := &cell.Type{
		Name: "test-2rc", Chemistry: cell.ChemistryNMC, ChargeMethod: cell.ChargeCCCV,
		CapacityAh: 3.0, NominalVolts: 3.6,
		OCV: surface(t, z, []float64{3.0, 3.35, 3.48, 3.58, 3.68, 3.80, 3.96, 4.17}),
		R0:  param(0.060, 0.045, 0.038, 0.034, 0.032, 0.031, 0.031, 0.032),
		Branches: []cell.Branch{
			{R: param(0.040, 0.025, 0.018, 0.015, 0.014, 0.014, 0.015, 0.016), C: param(600, 900, 1100, 1300, 1400, 1400, 1300, 1200)},
			{R: param(0.050, 0.030, 0.022, 0.018, 0.016, 0.016, 0.017, 0.018), C: param(15000, 22000, 28000, 32000, 35000, 35000, 33000, 30000)},
		},
		Limits: limits(3.0),
	}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	return typ
}

// TestRunStops checks each way a run ends, including a duty cycle that repeats.
func TestRunStops(t *testing.T) {
	typ := tableType(t)
	pack := cell.Pack{Type: typ, Series: 1, Parallel: 1}
	cases := []struct {
		name string
		prob Problem
		set  Settings
		want Status
	}{
		{"cutoff", Problem{Pack: pack, Initial: cell.State{SOC: 0.2}, Celsius: 25, Load: ConstantCurrent(3)}, Settings{}, StatusCutoff},
		{"empty past cutoff", Problem{Pack: pack, Initial: cell.State{SOC: 0.2}, Celsius: 25, Load: ConstantCurrent(3)}, Settings{IgnoreCutoff: true}, StatusEmpty},
		{"full", Problem{Pack: pack, Initial: cell.State{SOC: 0.9}, Celsius: 25, Load: ConstantCurrent(-3)}, Settings{}, StatusFull},
		{"horizon", Problem{Pack: pack, Initial: cell.State{SOC: 0.9}, Celsius: 25, Load: ConstantCurrent(0.1)}, Settings{Horizon: 600}, StatusHorizon},
		{"load ended", Problem{Pack: pack, Initial: cell.State{SOC: 0.9}, Celsius: 25, Load: Load{Segments: []Segment{{10, Current, 1}, {20, Power, 3}}}}, Settings{}, StatusLoadEnded},
		{"power limit", Problem{Pack: pack, Initial: cell.State{SOC: 0.5}, Celsius: 25, Load: ConstantPower(200)}, Settings{}, StatusPowerLimit},
		{"duty cycle", Problem{Pack: pack, Initial: cell.State{SOC: 0.5}, Celsius: 25, Load: Load{Repeat: true, Segments: []Segment{{10, Current, 9}, {20, Current, 0}}}}, Settings{Step: 2}, StatusCutoff},
	}
	for _, c := range cases {
		res, err := Run(nil, &c.prob, &c.set)
		if err != nil {
			t.Errorf("%s: %v", c.name, err)
			continue
		}
		if res.Status != c.want {
			t.Errorf("%s: status %v after %g s; want %v", c.name, res.Status, res.Seconds, c.want)
		}
		if n := len(res.Samples); n == 0 || res.Samples[n-1].Time != res.Seconds {
			t.Errorf("%s: last sample is not at the end (%g s)", c.name, res.Seconds)
		}
	}
}

func TestRunRejects(t *testing.T) {
	typ := tableType(t)
	ok := Problem{Pack: cell.Pack{Type: typ, Series: 1, Parallel: 1}, Initial: cell.State{SOC: 0.5}, Celsius: 25, Load: ConstantCurrent(1)}
	bad := []struct {
		field string
		edit  func(p *Problem, s *Settings)
	}{
		{"initial.state_of_charge", func(p *Problem, _ *Settings) { p.Initial.SOC = 1.2 }},
		{"initial.state_of_charge", func(p *Problem, _ *Settings) { p.Initial.SOC = math.NaN() }},
		{"initial.rc_voltages[1]", func(p *Problem, _ *Settings) { p.Initial.V[1] = math.Inf(1) }},
		{"temperature_celsius", func(p *Problem, _ *Settings) { p.Celsius = -61 }},
		{"temperature_celsius", func(p *Problem, _ *Settings) { p.Celsius = math.NaN() }},
		{"series", func(p *Problem, _ *Settings) { p.Pack.Series = 0 }},
		{"load.segments", func(p *Problem, _ *Settings) { p.Load = Load{} }},
		{"load.segments[0].value", func(p *Problem, _ *Settings) { p.Load = ConstantCurrent(math.NaN()) }},
		{"load.segments[0].value", func(p *Problem, _ *Settings) { p.Load = ConstantResistance(-1) }},
		{"load.segments[0].duration_seconds", func(p *Problem, _ *Settings) { p.Load.Repeat = true }},
		{"load.segments[0].duration_seconds", func(p *Problem, _ *Settings) {
			p.Load = Load{Segments: []Segment{{0, Current, 1}}}
		}},
		{"load.segments[1].kind", func(p *Problem, _ *Settings) {
			p.Load = Load{Segments: []Segment{{1, Current, 1}, {1, 0, 1}}}
		}},
		{"load.segments", func(p *Problem, _ *Settings) { p.Load = Load{Segments: make([]Segment, MaxSegments+1)} }},
		{"pack_cutoff_volts", func(p *Problem, _ *Settings) { p.CellCutoffVolts, p.PackCutoffVolts = 3, 12 }},
		{"cell_cutoff_volts", func(p *Problem, _ *Settings) { p.CellCutoffVolts = -3 }},
		{"settings.step", func(_ *Problem, s *Settings) { s.Step = math.Inf(1) }},
		{"settings.interval", func(_ *Problem, s *Settings) { s.Interval, s.Horizon = 1e-3, 1e6 }},
		{"settings.step", func(_ *Problem, s *Settings) { s.Step, s.Interval, s.Horizon = 1e-3, 1e6, 1e6 }},
	}
	for _, b := range bad {
		p, s := ok, Settings{}
		p.Load = ConstantCurrent(1)
		b.edit(&p, &s)
		_, err := Run(nil, &p, &s)
		var fe *cell.FieldError
		if !errors.As(err, &fe) || fe.Field != b.field || !errors.Is(err, cell.ErrInvalid) {
			t.Errorf("Run with bad %s: error %v; want a FieldError on %s", b.field, err, b.field)
		}
	}
}

func TestKindText(t *testing.T) {
	for k := Current; k <= Resistance; k++ {
		b, err := k.MarshalText()
		if err != nil {
			t.Fatal(err)
		}
		var got Kind
		if err := got.UnmarshalText(b); err != nil || got != k {
			t.Errorf("round trip of %v gave %v, %v", k, got, err)
		}
	}
	if _, err := ParseKind("voltage"); !errors.Is(err, cell.ErrInvalid) {
		t.Errorf("ParseKind(voltage) error = %v; want ErrInvalid", err)
	}
}

func TestCursorRepeats(t *testing.T) {
	l := Load{Repeat: true, Segments: []Segment{{0.1, Current, 1}, {0.2, Current, 0}}}
	c := l.Cursor()
	for range 3000 * 2 {
		if !c.Next() {
			t.Fatal("a repeating cursor ran out")
		}
	}
	if k, n := c.Index(); k != 0 || n != 3000 || math.Abs(c.Start()-900) > 1e-9 {
		t.Errorf("after 6000 segments: index %d, cycle %d, start %.12f; want 0, 3000, 900", k, n, c.Start())
	}
	f := Load{Segments: []Segment{{1, Current, 1}}}
	c = f.Cursor()
	if c.Next() || c.End() != 1 {
		t.Errorf("a finite load's cursor moved past its last segment")
	}
}

// TestTheveninMatchesCell checks that the source form e − r·i gives the terminal voltage
// of cell.Pack.Voltage in both directions, with and without a charge-side resistance.
func TestTheveninMatchesCell(t *testing.T) {
	typ := *tableType(t)
	for _, chargeR0 := range []*cell.Param{nil, {Value: 0.08}} {
		typ.ChargeR0 = chargeR0
		c := Circuit{Pack: cell.Pack{Type: &typ, Series: 3, Parallel: 2, ResistanceFactor: 1.5}, Kelvin: cell.Kelvin(25)}
		s := cell.State{SOC: 0.37, V: [cell.MaxBranches]float64{0.02, 0.01}}
		for _, i := range []float64{5, -5} {
			e, r := c.Thevenin(&s, i < 0)
			if got, want := e-r*i, c.Pack.Voltage(&s, i, c.Kelvin); math.Abs(got-want) > 1e-12 {
				t.Errorf("ChargeR0 %v, i = %g A: e − r·i = %.12f; Pack.Voltage = %.12f", chargeR0, i, got, want)
			}
		}
	}
}
