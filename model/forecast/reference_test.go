package forecast

import (
	"math"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/sim"
	"github.com/voltcast/voltcast/model/table"
)

// twoRC is a 2-RC cell whose OCV, R0 and RC parameters are tables over state of charge
// at 0 °C and 25 °C (values invented for the tests, shaped like a lithium NMC cell:
// OCV after ../shared/REFERENCE.md §4, resistances in the range of §1c, time constants
// of about 20 s and 600 s as in §2.1). They are a test object, not an oracle.
func twoRC(t testing.TB) *cell.Type {
	t.Helper()
	z := []float64{0, 0.05, 0.1, 0.2, 0.4, 0.6, 0.8, 1}
	temps := []float64{cell.Kelvin(0), cell.Kelvin(25)}
	sf := func(cold, warm []float64) *table.Surface {
		s, err := table.NewSurface(z, temps, [][]float64{cold, warm})
		if err != nil {
			t.Fatal(err)
		}
		return s
	}
	scale := func(f float64, v ...float64) []float64 {
		out := make([]float64, len(v))
		for i := range v {
			out[i] = f * v[i]
		}
		return out
	}
	r0 := []float64{0.060, 0.045, 0.038, 0.034, 0.032, 0.031, 0.031, 0.032}
	r1 := []float64{0.040, 0.025, 0.018, 0.015, 0.014, 0.014, 0.015, 0.016}
	c1 := []float64{600, 900, 1100, 1300, 1400, 1400, 1300, 1200}
	r2 := []float64{0.050, 0.030, 0.022, 0.018, 0.016, 0.016, 0.017, 0.018}
	c2 := []float64{15000, 22000, 28000, 32000, 35000, 35000, 33000, 30000}
	ocv := []float64{3.0, 3.35, 3.48, 3.58, 3.68, 3.80, 3.96, 4.17}
	typ := &cell.Type{
		Name: "test-2rc", Chemistry: cell.ChemistryNMC, ChargeMethod: cell.ChargeCCCV,
		CapacityAh: 3.0, NominalVolts: 3.6,
		OCV: sf(scale(0.995, ocv...), ocv),
		R0:  cell.Param{Table: sf(scale(2.2, r0...), r0)},
		Branches: []cell.Branch{
			{R: cell.Param{Table: sf(scale(2.5, r1...), r1)}, C: cell.Param{Table: sf(c1, c1)}},
			{R: cell.Param{Table: sf(scale(1.8, r2...), r2)}, C: cell.Param{Table: sf(c2, c2)}},
		},
		CoulombicEfficiency: 0.99,
		Limits:              testLimits(3.0),
	}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	return typ
}

func testLimits(cutoff float64) cell.Limits {
	return cell.Limits{
		ChargeVolts: 4.2, CutoffVolts: cutoff, FloorVolts: math.Min(2.5, cutoff), MaxChargeRate: 1,
		StandardChargeRate: 0.5, MaxDischargeRate: 2, TerminationRate: 0.05, ChargeMinCelsius: 0,
		ChargeMaxCelsius: 45, DischargeMinCelsius: -20, DischargeMaxCelsius: 60,
	}
}

// rk4 is an independent reference for the forecast: the 2-RC pack's differential
// equations, written here from scratch, integrated by the classical fourth-order
// Runge–Kutta method at a fixed 0.05 s step, with the load law (current, power or
// resistance) solved afresh at every stage, so that power and resistance loads hold
// exactly rather than per step. It shares only the parameter tables (model/table,
// tested on its own) with the code under test. The crossing is interpolated linearly
// between the two steps around it. It returns the time to cut-off, the charge (Ah) and
// the energy (Wh) delivered.
//
// State x = (z, v1, v2, Ah, Wh), per cell except the last two, which are for the pack:
//
//	dz/dt  = −η·ic/(3600·Q)             (η = 1 on discharge)
//	dvk/dt = (Rk(z)·ic − vk)/(Rk(z)·Ck(z))
//	v      = S·(OCV(z) − R0(z)·ic − v1 − v2)
//
// with the cell current ic from the load: I/P for a pack current I; for a power P the
// smaller root of S·P·(E·ic − R0·ic²) = P; for a resistance Rl, ic = S·E/(S·R0 + P·Rl);
// here S, P are cells in series and parallel and E = OCV − v1 − v2.
func rk4(t testing.TB, typ *cell.Type, series, parallel int, celsius, z0 float64, load sim.Load, cutCell float64) (sec, ah, wh float64) {
	t.Helper()
	const h = 0.05
	tk := cell.Kelvin(celsius)
	S, P := float64(series), float64(parallel)
	q := 3600 * typ.CapacityAh
	current := func(x *[5]float64, sg sim.Segment) (ic, v float64) {
		z := x[0]
		r0 := typ.R0.Table.At(z, tk)
		e := typ.OCV.At(z, tk) - x[1] - x[2]
		switch sg.Kind {
		case sim.Current:
			ic = sg.Value / P
		case sim.Power:
			a, b, c := r0*S*P, -e*S*P, sg.Value // a·ic² + b·ic + c = 0
			disc := b*b - 4*a*c
			if disc < 0 {
				t.Fatalf("reference: power %g W beyond the pack's limit", sg.Value)
			}
			ic = (-b - math.Sqrt(disc)) / (2 * a)
		case sim.Resistance:
			ic = S * e / (S*r0 + P*sg.Value)
		}
		return ic, S * (e - r0*ic)
	}
	deriv := func(x *[5]float64, sg sim.Segment) (d [5]float64) {
		z := x[0]
		ic, v := current(x, sg)
		eta := 1.0
		if ic < 0 {
			eta = typ.CoulombicEfficiency
		}
		d[0] = -eta * ic / q
		for k := range 2 {
			r := typ.Branches[k].R.Table.At(z, tk)
			c := typ.Branches[k].C.Table.At(z, tk)
			d[1+k] = (r*ic - x[1+k]) / (r * c)
		}
		d[3] = ic * P / 3600
		d[4] = v * ic * P / 3600
		return d
	}
	// Segment boundaries fall on the step grid: durations are multiples of h.
	segSteps := make([]int, len(load.Segments))
	for k, sg := range load.Segments {
		if math.IsInf(sg.Duration, 1) {
			segSteps[k] = math.MaxInt
			continue
		}
		segSteps[k] = int(math.Round(sg.Duration / h))
		if math.Abs(float64(segSteps[k])*h-sg.Duration) > 1e-9 {
			t.Fatalf("reference: segment %d lasts %g s, not a multiple of %g s", k, sg.Duration, h)
		}
	}
	x := [5]float64{z0, 0, 0, 0, 0}
	seg, left := 0, segSteps[0]
	for n := 0; n < 200e6/h; n++ {
		sg := load.Segments[seg]
		_, v0 := current(&x, sg)
		if v0/S <= cutCell {
			return float64(n) * h, x[3], x[4] // at a boundary, the new segment pulls below
		}
		k1 := deriv(&x, sg)
		var y [5]float64
		for i := range y {
			y[i] = x[i] + h/2*k1[i]
		}
		k2 := deriv(&y, sg)
		for i := range y {
			y[i] = x[i] + h/2*k2[i]
		}
		k3 := deriv(&y, sg)
		for i := range y {
			y[i] = x[i] + h*k3[i]
		}
		k4 := deriv(&y, sg)
		var x1 [5]float64
		for i := range x1 {
			x1[i] = x[i] + h/6*(k1[i]+2*k2[i]+2*k3[i]+k4[i])
		}
		if _, v1 := current(&x1, sg); v1/S <= cutCell {
			f := (v0/S - cutCell) / (v0/S - v1/S)
			return (float64(n) + f) * h, x[3] + f*(x1[3]-x[3]), x[4] + f*(x1[4]-x[4])
		}
		x = x1
		if left--; left == 0 {
			seg = (seg + 1) % len(load.Segments)
			left = segSteps[seg]
		}
	}
	t.Fatal("reference: no cut-off within 200 000 000 s")
	return 0, 0, 0
}

// TestAgainstRK4 checks the forecast (default settings) against the independent
// fine-step reference above within 0.1 % in time, charge and energy, for constant
// current, power and resistance and a duty cycle that mixes all three with a rest and
// a charging (regenerative) segment, on a 3s2p pack of the 2-RC cell at 10 °C.
func TestAgainstRK4(t *testing.T) {
	typ := twoRC(t)
	duty := sim.Load{Repeat: true, Segments: []sim.Segment{
		{Duration: 60, Kind: sim.Current, Value: 6},
		{Duration: 30, Kind: sim.Current, Value: 0},
		{Duration: 20.5, Kind: sim.Power, Value: 60},
		{Duration: 5, Kind: sim.Current, Value: -3},
		{Duration: 12.35, Kind: sim.Resistance, Value: 1.5},
	}}
	cases := []struct {
		name string
		z0   float64
		load sim.Load
	}{
		{"constant current", 0.5, sim.ConstantCurrent(5)},
		{"constant power", 0.5, sim.ConstantPower(50)},
		{"constant resistance", 0.5, sim.ConstantResistance(2.2)},
		{"duty cycle", 0.4, duty},
	}
	if testing.Short() {
		cases = cases[:2]
	}
	const series, parallel, celsius = 3, 2, 10
	for _, c := range cases {
		prob := &Problem{Problem: sim.Problem{
			Pack: cell.Pack{Type: typ, Series: series, Parallel: parallel}, Initial: cell.State{SOC: c.z0},
			Celsius: celsius, Load: c.load,
		}}
		res, err := Run(nil, prob, nil)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		sec, ah, wh := rk4(t, typ, series, parallel, celsius, c.z0, c.load, typ.Limits.CutoffVolts)
		t.Logf("%s: forecast %.2f s, %.5f Ah, %.4f Wh in %d steps (%d evaluations); RK4 %.2f s, %.5f Ah, %.4f Wh",
			c.name, res.Seconds, res.AmpHours, res.WattHours, res.Steps, res.Evaluations, sec, ah, wh)
		if res.Status != StatusCutoff {
			t.Errorf("%s: status %v; want cutoff", c.name, res.Status)
		}
		for _, q := range []struct {
			what      string
			got, want float64
		}{{"time", res.Seconds, sec}, {"charge", res.AmpHours, ah}, {"energy", res.WattHours, wh}} {
			if e := math.Abs(q.got/q.want - 1); e > 1e-3 {
				t.Errorf("%s: %s %.6g; RK4 reference %.6g (%.3f %% apart, want ≤ 0.1 %%)", c.name, q.what, q.got, q.want, 100*e)
			}
		}
		if v := res.FinalVolts / series; math.Abs(v-typ.Limits.CutoffVolts) > 1e-3 {
			t.Errorf("%s: stopped at %.6f V per cell; the cut-off is %g V", c.name, v, typ.Limits.CutoffVolts)
		}
	}
}
