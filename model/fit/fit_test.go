package fit

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/table"
)

// The synthetic cell: OCV from the NMC column of REFERENCE.md §4 (typical values, from
// memory there; used here only as a smooth monotone curve) and a 2-RC circuit whose
// values sit inside the 18650 ranges of REFERENCE.md §1c (20–50 mΩ, from memory) with
// time constants like §2.1's "fast 1–10 s" and a slower one inside the 10 s pulses'
// identifiable range.
var (
	nmcSOC = []float64{0, .1, .2, .3, .4, .5, .6, .7, .8, .9, 1}
	nmcOCV = []float64{3.30, 3.55, 3.62, 3.66, 3.70, 3.74, 3.80, 3.87, 3.95, 4.05, 4.18}
)

const (
	trueR0, trueR1, trueTau1, trueR2, trueTau2 = 0.025, 0.012, 4.0, 0.018, 45.0
	trueQ                                      = 2.5 // Ah
)

func syntheticType(t testing.TB) *cell.Type {
	t.Helper()
	ocv, err := table.NewSurface(nmcSOC, []float64{298.15}, [][]float64{nmcOCV})
	if err != nil {
		t.Fatal(err)
	}
	typ := &cell.Type{
		Name: "synthetic", ChargeMethod: cell.ChargeCCCV, CapacityAh: trueQ, NominalVolts: 3.7, OCV: ocv,
		R0: cell.Param{Value: trueR0},
		Branches: []cell.Branch{
			{R: cell.Param{Value: trueR1}, C: cell.Param{Value: trueTau1 / trueR1}},
			{R: cell.Param{Value: trueR2}, C: cell.Param{Value: trueTau2 / trueR2}},
		},
		Limits: LithiumLimits(3.0),
	}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	return typ
}

// recorder generates a lab record by stepping a pack with cell.Pack.Step, sampling
// every dt seconds for the first 10 s after a current change, then every second while
// current flows and for the first minute of a rest, and every 10 s after that (like the
// thinning of the pan18650pf HPPC files, PROVENANCE.md). The counter is the exact
// charge removed.
type recorder struct {
	p   cell.Pack
	st  cell.State
	tk  float64
	t   float64
	ah  float64
	dt  float64
	rec Record
}

func newRecorder(typ *cell.Type, z0, dt float64) *recorder {
	r := &recorder{p: cell.Pack{Type: typ, Series: 1, Parallel: 1}, st: cell.State{SOC: z0}, tk: 298.15, dt: dt}
	r.sample(0)
	return r
}

func (r *recorder) sample(i float64) {
	r.rec.Time = append(r.rec.Time, r.t)
	r.rec.Current = append(r.rec.Current, i)
	r.rec.Voltage = append(r.rec.Voltage, r.p.Voltage(&r.st, i, r.tk))
	r.rec.Temperature = append(r.rec.Temperature, r.tk)
	r.rec.DischargedAh = append(r.rec.DischargedAh, r.ah)
}

// hold applies current i for secs seconds.
func (r *recorder) hold(i, secs float64) {
	for el := 0.0; el < secs-1e-9; {
		step := r.dt
		switch {
		case i == 0 && el >= 60:
			step = 10
		case el >= 10:
			step = math.Max(r.dt, 1)
		}
		step = math.Min(step, secs-el)
		r.p.Step(&r.st, i, step, r.tk)
		r.t += step
		r.ah += i * step / 3600
		el += step
		r.sample(i)
	}
}

// hppc is a pulse test: from full and rested, at each level a 10 s 2C discharge pulse,
// 2 min rest, a 10 s 1.5C charge pulse, 2 min rest; then 10 % of capacity at 1C and a
// 30 min rest. It has nLevels levels.
func hppc(typ *cell.Type, dt float64, nLevels int) Record {
	r := newRecorder(typ, 1, dt)
	r.hold(0, 600)
	for range nLevels {
		r.hold(2*trueQ, 10)
		r.hold(0, 120)
		r.hold(-1.5*trueQ, 10)
		r.hold(0, 120)
		r.hold(trueQ, 360)
		r.hold(0, 1800)
	}
	r.rec.Name = "synthetic-hppc"
	return r.rec
}

func TestPulsesRecoverKnownParameters(t *testing.T) {
	typ := syntheticType(t)
	ocv := typ.OCV.Curve(0)
	for _, dt := range []float64{0.1, 1} {
		rec := hppc(typ, dt, 8)
		res, err := Pulses(context.Background(), rec, ocv, trueQ, nil)
		if err != nil {
			t.Fatalf("dt=%g: %v", dt, err)
		}
		if len(res.Levels) != 8 {
			t.Fatalf("dt=%g: %d levels; want 8", dt, len(res.Levels))
		}
		// Issue 3: "calibration recovers known parameters from synthetic pulse data
		// within 2 %".
		for _, l := range res.Levels {
			for _, c := range []struct {
				name      string
				got, want float64
			}{
				{"R0", l.R0.Value, trueR0}, {"R1", l.R[0].Value, trueR1}, {"tau1", l.Tau[0].Value, trueTau1},
				{"R2", l.R[1].Value, trueR2}, {"tau2", l.Tau[1].Value, trueTau2},
			} {
				if math.Abs(c.got/c.want-1) > 0.02 {
					t.Errorf("dt=%g s, level SOC %.2f: %s = %.5g; want %.5g within 2 %%", dt, l.SOC, c.name, c.got, c.want)
				}
			}
			if !(l.R0.Low <= trueR0*1.001 && l.R0.High >= trueR0*0.999) && !math.IsNaN(l.R0.Low) {
				t.Logf("dt=%g: R0 interval [%g, %g] misses the truth (noise-free data)", dt, l.R0.Low, l.R0.High)
			}
			if l.RMSE > 1e-4 {
				t.Errorf("dt=%g: level RMSE %.3g V on noise-free data", dt, l.RMSE)
			}
		}
		// With 1 s sampling the raw step includes 1 s of branch relaxation, so it
		// overestimates R0 (by about R1·(1−e^(−1/τ1)) + R2·(1−e^(−1/τ2)) ≈ 3 mΩ); the fitted
		// R0 must not.
		if dt == 1 {
			l := res.Levels[0]
			if want := trueR0 + trueR1*(1-math.Exp(-1/trueTau1)) + trueR2*(1-math.Exp(-1/trueTau2)); math.Abs(l.R0Step/want-1) > 0.05 {
				t.Errorf("R0Step = %.5g; want about %.5g", l.R0Step, want)
			}
		}
	}
}

// lowRate is a C/20 discharge from full to empty, 1 h rest, and a C/20 charge back.
func lowRate(typ *cell.Type) Record {
	r := newRecorder(typ, 1, 60)
	r.hold(0, 600)
	r.hold(trueQ/20, 20*3600*0.999)
	r.hold(0, 3600)
	r.hold(-trueQ/20, 20*3600*0.95)
	r.hold(0, 600)
	r.rec.Name = "synthetic-ocv"
	return r.rec
}

func TestOCVRecoversCurve(t *testing.T) {
	typ := syntheticType(t)
	res, err := OCV(lowRate(typ), nil)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(res.CapacityAh/(trueQ*0.999)-1) > 1e-3 {
		t.Errorf("capacity = %g Ah; want %g", res.CapacityAh, trueQ*0.999)
	}
	// Averaging the branches cancels the IR drop of a linear model exactly, so the
	// curve must match the true OCV to within the smoothing error (away from the ends,
	// where the branches start with their RC transients).
	ocv := typ.OCV.Curve(0)
	for k, z := range res.SOC {
		if z < 0.05 || z > 0.95 {
			continue
		}
		// The SOC axis of the fit is relative to the discharged capacity (0.999·Q).
		want := ocv.At(z*0.999 + 0.001)
		if math.Abs(res.Volts[k]-want) > 0.003 {
			t.Errorf("OCV(%.3f) = %.4f; want %.4f within 3 mV", z, res.Volts[k], want)
		}
	}
	for k := 1; k < len(res.Volts); k++ {
		if res.Volts[k] < res.Volts[k-1] {
			t.Fatalf("OCV not monotone at %g", res.SOC[k])
		}
	}
}

func TestFitEndToEnd(t *testing.T) {
	typ := syntheticType(t)
	p := &Problem{Name: "synthetic-fit", OCVTest: lowRate(typ), PulseTests: []Record{hppc(typ, 1, 5)}}
	var stages []string
	res, err := Fit(context.Background(), p, &Settings{Progress: func(pr Progress) { stages = append(stages, pr.Stage) }})
	if err != nil {
		t.Fatal(err)
	}
	if err := res.Type.Validate(); err != nil {
		t.Fatal(err)
	}
	if len(stages) == 0 {
		t.Error("no progress reported")
	}
	for _, fr := range res.Report.Files {
		// The model is the generator, so only the smoothing of the OCV and SOC-axis
		// effects remain.
		if fr.Role == "pulse" && fr.RMSE > 0.002 {
			t.Errorf("%s: RMSE %.2f mV on its own synthetic data", fr.Name, fr.RMSE*1e3)
		}
	}
	// Deterministic: a second fit gives the same numbers.
	res2, err := Fit(context.Background(), p, nil)
	if err != nil {
		t.Fatal(err)
	}
	a, b := res.Type.R0.At(0.5, 298.15), res2.Type.R0.At(0.5, 298.15)
	if a != b {
		t.Errorf("fit is not reproducible: R0 %v then %v", a, b)
	}
}

func TestBadInput(t *testing.T) {
	typ := syntheticType(t)
	ocv := typ.OCV.Curve(0)
	good := hppc(typ, 1, 4)
	clone := func(r Record) Record {
		r.Time = append([]float64(nil), r.Time...)
		r.Current = append([]float64(nil), r.Current...)
		r.Voltage = append([]float64(nil), r.Voltage...)
		return r
	}
	for _, tc := range []struct {
		name string
		rec  func() Record
		want string
	}{
		{"too few pulses", func() Record { return hppc(typ, 1, 2) }, "found pulses at 2 state-of-charge level(s), need at least 3"},
		{"NaN voltage", func() Record { r := clone(good); r.Voltage[100] = math.NaN(); return r }, "voltage is NaN"},
		{"time backwards", func() Record { r := clone(good); r.Time[50] = r.Time[48]; return r }, "does not follow"},
		{"milliamps", func() Record {
			r := clone(good)
			for k := range r.Current {
				r.Current[k] *= 1000
			}
			return r
		}, "is the current in mA"},
		{"missing column", func() Record { r := clone(good); r.Voltage = nil; return r }, "different lengths"},
		{"too short", func() Record {
			r := clone(good)
			return Record{Name: "x", Time: r.Time[:3], Current: r.Current[:3], Voltage: r.Voltage[:3], Temperature: r.Temperature[:3]}
		}, "3 samples, need at least 10"},
		{"celsius as kelvin", func() Record {
			r := clone(good)
			r.Temperature = make([]float64, len(r.Time))
			for k := range r.Temperature {
				r.Temperature[k] = 25
			}
			return r
		}, "°C given as K"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Pulses(context.Background(), tc.rec(), ocv, trueQ, nil)
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("Pulses error = %v; want it to contain %q", err, tc.want)
			}
			if err != nil && !errors.Is(err, ErrData) {
				t.Errorf("error does not wrap ErrData: %v", err)
			}
		})
	}
	// An OCV test without a low-rate discharge.
	if _, err := OCV(good, nil); err == nil || !strings.Contains(err.Error(), "not a low-rate test") {
		t.Errorf("OCV(pulse test) error = %v; want a low-rate complaint", err)
	}
	// A cancelled context stops the fit.
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := Pulses(ctx, good, ocv, trueQ, nil); !errors.Is(err, context.Canceled) {
		t.Errorf("Pulses with a cancelled context: %v", err)
	}
}

func TestSimulateMatchesReferenceE4(t *testing.T) {
	// REFERENCE.md E4: OCV 3.70 V constant, i = 2 A, R0 = 50 mΩ, R1 = 30 mΩ,
	// C1 = 1000 F: V(10 s) = 3.58299 V, V(30 s) = 3.56207 V.
	ocv, _ := table.NewSurface([]float64{0, 1}, []float64{298.15}, [][]float64{{3.70, 3.70 + 1e-9}})
	typ := &cell.Type{Name: "e4", ChargeMethod: cell.ChargeCCCV, CapacityAh: 1e6, NominalVolts: 3.7, OCV: ocv,
		R0: cell.Param{Value: 0.05}, Branches: []cell.Branch{{R: cell.Param{Value: 0.03}, C: cell.Param{Value: 1000}}}, Limits: LithiumLimits(3)}
	rec := Record{Name: "e4"}
	for k := 0; k <= 30; k++ {
		rec.Time = append(rec.Time, float64(k))
		rec.Current = append(rec.Current, 2)
		rec.Voltage = append(rec.Voltage, 3.7)
		rec.Temperature = append(rec.Temperature, 298.15)
	}
	rec.Current[0] = 0
	v := Simulate(nil, typ, rec, 0.5, nil)
	for _, c := range []struct {
		k    int
		want float64
	}{{10, 3.58299}, {30, 3.56207}} {
		if math.Abs(v[c.k]-c.want) > 2e-5 {
			t.Errorf("Simulate at %d s = %.5f; want %.5f (REFERENCE.md E4)", c.k, v[c.k], c.want)
		}
	}
	// The block average over a step lies between the step's end values.
	vb := Simulate(nil, typ, rec, 0.5, &SimSettings{BlockAverage: true})
	if !(vb[10] > v[10] && vb[10] < v[9]) {
		t.Errorf("block average %.5f not between %.5f and %.5f", vb[10], v[10], v[9])
	}
}

func BenchmarkPulses(b *testing.B) {
	typ := syntheticType(b)
	rec := hppc(typ, 0.5, 10)
	b.Logf("%d samples", rec.Len())
	ocv := typ.OCV.Curve(0)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Pulses(context.Background(), rec, ocv, trueQ, nil); err != nil {
			b.Fatal(err)
		}
	}
}

// TestShepherdLow: resistances following R = a + K/z exactly (Shepherd 1965's
// polarisation term, REFERENCE.md §2.5) give back K, and the table below the lowest
// level follows the same form up to the cap (our own arithmetic).
func TestShepherdLow(t *testing.T) {
	const a, k = 0.02, 0.004
	lz := []float64{0.8, 0.5, 0.4, 0.3, 0.2}
	lv := make([]float64, len(lz))
	for i, z := range lz {
		lv[i] = a + k/z
	}
	grid := []float64{0, 0.01, 0.1, 0.2, 0.5}
	row := []float64{9, 9, 9, lv[4], lv[1]}
	got, ok := shepherdLow(row, grid, lz, lv)
	if !ok || math.Abs(got-k) > 1e-9 {
		t.Fatalf("K = %g (ok %v); want %g", got, ok, k)
	}
	if want := a + k/0.1; math.Abs(row[2]-want) > 1e-9 {
		t.Errorf("R(0.1) = %g; want %g", row[2], want)
	}
	if want := shepherdCap * lv[4]; math.Abs(row[0]-want) > 1e-12 || math.Abs(row[1]-want) > 1e-12 {
		t.Errorf("R(0), R(0.01) = %g, %g; want the cap %g", row[0], row[1], want)
	}
	// Falling resistances toward empty (K < 0) leave the row alone.
	for i, z := range lz {
		lv[i] = a - 0.001/z
	}
	row = []float64{9, 9, 9, 9, 9}
	if _, ok := shepherdLow(row, grid, lz, lv); ok || row[0] != 9 {
		t.Errorf("negative K extended the table: %v", row)
	}
}
