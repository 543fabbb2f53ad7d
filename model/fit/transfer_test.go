package fit

import (
	"context"
	"fmt"
	"math"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
)

const trueI0 = 1.0 // A, exchange current of the synthetic charge-transfer branch

// transferType is the synthetic cell with its fast branch a charge-transfer branch
// (cell.Branch.ExchangeCurrent).
func transferType(t testing.TB) *cell.Type {
	t.Helper()
	typ := syntheticType(t)
	typ.Branches[0].ExchangeCurrent = &cell.Param{Value: trueI0}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	return typ
}

// multiPulse is a pulse test like the pan18650pf HPPC (PROVENANCE.md): at each level,
// 10 s discharge pulses at 0.5C, 1C, 2C and 4C, each followed by a 5 min rest, then 10 %
// of capacity at 1C and a 30 min rest.
func multiPulse(typ *cell.Type, nLevels int) Record {
	r := newRecorder(typ, 1, 0.1)
	r.hold(0, 600)
	for range nLevels {
		for _, c := range []float64{0.5, 1, 2, 4} {
			r.hold(c*trueQ, 10)
			r.hold(0, 300)
		}
		r.hold(trueQ, 360)
		r.hold(0, 1800)
	}
	r.rec.Name = "synthetic-multipulse"
	return r.rec
}

// TestFitChargeTransfer: pulses of four magnitudes identify the exchange current of the
// fast branch together with the other parameters (issue 3: recovery of known parameters
// from synthetic pulse data within 2 %), and Fit carries it into the type, which then
// reproduces the pulse test.
func TestFitChargeTransfer(t *testing.T) {
	typ := transferType(t)
	res, err := Fit(context.Background(), &Problem{OCVTest: lowRate(typ), PulseTests: []Record{multiPulse(typ, 4)}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if n := len(res.Pulses[0].Levels); n != 4 {
		t.Fatalf("%d levels; want 4", n)
	}
	for _, l := range res.Pulses[0].Levels {
		if l.Magnitudes < 7.9 {
			t.Errorf("level %.2f: magnitude spread %.2f; want 8", l.SOC, l.Magnitudes)
		}
		for _, c := range []struct {
			name      string
			got, want float64
		}{
			{"R0", l.R0.Value, trueR0}, {"R1", l.R[0].Value, trueR1}, {"tau1", l.Tau[0].Value, trueTau1},
			{"i0", l.I0[0].Value, trueI0}, {"R2", l.R[1].Value, trueR2}, {"tau2", l.Tau[1].Value, trueTau2},
		} {
			if math.Abs(c.got/c.want-1) > 0.02 {
				t.Errorf("level SOC %.2f: %s = %.5g; want %.5g within 2 %%", l.SOC, c.name, c.got, c.want)
			}
		}
		if !math.IsInf(l.I0[1].Value, 1) {
			t.Errorf("level SOC %.2f: slow branch fitted with i0 = %g; want ohmic", l.SOC, l.I0[1].Value)
		}
	}
	x := res.Type.Branches[0].ExchangeCurrent
	if x == nil {
		t.Fatal("fast branch has no exchange current")
	}
	if got := x.At(0.6, 298.15); math.Abs(got/trueI0-1) > 0.02 {
		t.Errorf("fitted i0 at SOC 0.6 = %.4g A; want %.4g within 2 %%", got, trueI0)
	}
	if res.Type.Branches[1].ExchangeCurrent != nil {
		t.Errorf("slow branch has an exchange current; want ohmic")
	}
	for _, f := range res.Report.Files {
		if f.Role == "pulse" && f.RMSE > 1e-3 {
			t.Errorf("%s: pulse-window RMSE %.2f mV on noise-free data", f.Name, f.RMSE*1e3)
		}
	}
}

// TestPulsesOneMagnitudeStaysOhmic: with one pulse magnitude per direction within a
// factor 2 (the synthetic HPPC: 2C discharge, 1.5C charge) the nonlinearity cannot be
// told from the resistance, so every branch stays ohmic and Fit writes no exchange
// current into the type.
func TestPulsesOneMagnitudeStaysOhmic(t *testing.T) {
	typ := syntheticType(t)
	p := &Problem{OCVTest: lowRate(typ), PulseTests: []Record{hppc(typ, 1, 6)}}
	res, err := Fit(context.Background(), p, nil)
	if err != nil {
		t.Fatal(err)
	}
	for _, l := range res.Pulses[0].Levels {
		for j, x := range l.I0 {
			if !math.IsInf(x.Value, 1) {
				t.Errorf("level SOC %.2f: branch %d fitted with i0 = %g; want ohmic", l.SOC, j+1, x.Value)
			}
		}
	}
	for j, b := range res.Type.Branches {
		if b.ExchangeCurrent != nil {
			t.Errorf("branch %d has an exchange current; want none", j+1)
		}
	}
}

// TestFitArrheniusBetweenTemperatures: with pulse tests at 0 and 25 °C of a cell whose
// resistances follow the Arrhenius law (REFERENCE.md §2.6), the fitted tables must
// follow the law between the tested temperatures too (linear interpolation in T would
// read about 10 % high half-way for 40 kJ/mol), and beyond them with the activation
// energy measured from the two tests.
func TestFitArrheniusBetweenTemperatures(t *testing.T) {
	const ea = 40e3 // J/mol, inside REFERENCE.md §2.6's "20–50 kJ/mol typical" (from memory there)
	typ := syntheticType(t)
	typ.R0.ActivationEnergy = ea
	for j := range typ.Branches {
		typ.Branches[j].R.ActivationEnergy = ea // C held: τ = R·C grows in the cold
	}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	var tests []Record
	for _, tk := range []float64{273.15, 298.15} {
		r := newRecorder(typ, 1, 1)
		r.tk = tk
		r.rec.Temperature[0] = tk
		r.hold(0, 600)
		for range 6 {
			r.hold(2*trueQ, 10)
			r.hold(0, 300)
			r.hold(trueQ, 360)
			r.hold(0, 1800)
		}
		r.rec.Name = fmt.Sprintf("synthetic-%.0fK", tk)
		tests = append(tests, r.rec)
	}
	res, err := Fit(context.Background(), &Problem{OCVTest: lowRate(typ), PulseTests: tests}, &Settings{NoRestAnchoring: true})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []float64{5, 12.5, 20, -10, 35} {
		tk := cell.Kelvin(c)
		want := typ.R0.At(0.5, tk)
		if got := res.Type.R0.At(0.5, tk); math.Abs(got/want-1) > 0.03 {
			t.Errorf("R0 at %g °C = %.4g mΩ; Arrhenius gives %.4g mΩ (within 3 %%)", c, got*1e3, want*1e3)
		}
	}
}
