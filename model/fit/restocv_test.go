package fit

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
)

// hppcToEmpty is an HPPC-style test in the shape of REFERENCE.md §2.7 (from full: at
// each 10 % step a discharge pulse and a charge pulse with short rests, then the rest of
// the 10 % at 1C and a 1 h rest for an OCV point), run to empty: ten levels that remove
// exactly the capacity (the 1C step is shortened by the pulses' net charge).
func hppcToEmpty(typ *cell.Type) Record {
	r := newRecorder(typ, 1, 1)
	r.hold(0, 600)
	pulseNet := (2*trueQ*10 - 1.5*trueQ*10) / trueQ // s of 1C
	for range 10 {
		r.hold(2*trueQ, 10)
		r.hold(0, 120)
		r.hold(-1.5*trueQ, 10)
		r.hold(0, 120)
		r.hold(trueQ, 360-pulseNet)
		r.hold(0, 3600)
	}
	r.rec.Name = "synthetic-hppc-to-empty"
	return r.rec
}

// TestRestOCVRecoversCurve: OCV points from the 1 h rests of a simulated HPPC test
// (generated with cell.Pack.Step) must sit on the generating OCV curve, and the capacity
// must be the charge the test removed.
func TestRestOCVRecoversCurve(t *testing.T) {
	base := syntheticType(t)
	slow := *base
	slow.Branches = []cell.Branch{base.Branches[0], {R: cell.Param{Value: 0.05}, C: cell.Param{Value: 1200 / 0.05}}}
	slow.Hysteresis = cell.Hysteresis{Max: 0.015, Gamma: 30}
	for _, tc := range []struct {
		name string
		typ  *cell.Type
		// tol is the largest OCV error at the knots, V.
		tol float64
		// rawOff: the last rested value alone must be at least this far off somewhere
		// (so that the tail extrapolation is what is being checked), V.
		rawOff float64
	}{
		// τ2 = 45 s: relaxed to e^(−80) after 1 h; the knots must match to 0.2 mV.
		{"fast branches", base, 2e-4, 0},
		// τ2 = 1200 s and 15 mV hysteresis: 1 h leaves ≈ 1.6 mV of relaxation, which the
		// single-exponential tail fit must remove (to 0.3 mV), and the hysteresis state
		// is replayed exactly.
		{"slow branch and hysteresis", &slow, 3e-4, 1e-3},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if err := tc.typ.Validate(); err != nil {
				t.Fatal(err)
			}
			rec := hppcToEmpty(tc.typ)
			res, err := RestOCV(rec, &RestOCVSettings{Hysteresis: tc.typ.Hysteresis})
			if err != nil {
				t.Fatal(err)
			}
			if res.Source != SourceRests || len(res.Rests) != 10 {
				t.Fatalf("source %q with %d rests; want %q with 10", res.Source, len(res.Rests), SourceRests)
			}
			if math.Abs(res.CapacityAh/trueQ-1) > 1e-3 {
				t.Errorf("capacity %.5f Ah; want %.5f (the charge the test removed)", res.CapacityAh, trueQ)
			}
			if res.SOC[0] != 0 || res.SOC[len(res.SOC)-1] != 1 || res.BottomExtrapolated {
				t.Errorf("knots %v (bottom extrapolated %v); want 0 … 1 with a measured bottom", res.SOC, res.BottomExtrapolated)
			}
			ocv := tc.typ.OCV.Curve(0)
			worstRaw := 0.0
			for k, z := range res.SOC {
				if d := res.Volts[k] - ocv.At(z); math.Abs(d) > tc.tol {
					t.Errorf("OCV(%.4f) = %.5f V; want %.5f within %.1f mV", z, res.Volts[k], ocv.At(z), tc.tol*1e3)
				}
			}
			// Volts = Measured + Unrelaxed − h, so Volts − Unrelaxed is the last rested value
			// corrected for hysteresis only.
			for _, rp := range res.Rests {
				worstRaw = math.Max(worstRaw, math.Abs(rp.Volts-rp.Unrelaxed-ocv.At(rp.SOC)))
			}
			if worstRaw < tc.rawOff {
				t.Errorf("the last rested values are at most %.2f mV off; the case should need ≥ %.1f mV of extrapolation", worstRaw*1e3, tc.rawOff*1e3)
			}
			t.Logf("%s: last rested values up to %.2f mV off; table within %.1f mV; %s", tc.name, worstRaw*1e3, tc.tol*1e3, res.Method)
		})
	}
}

// TestFitWithoutLowRateTest: Fit takes the OCV from the pulse test's rests when no
// OCV test is given, and when the OCV test given is not a low-rate test but has rests;
// a test with neither keeps the strict error.
func TestFitWithoutLowRateTest(t *testing.T) {
	typ := syntheticType(t)
	pulse := hppcToEmpty(typ)
	for _, tc := range []struct {
		name string
		ocv  Record
	}{{"no ocv test", Record{}}, {"pulse test as ocv test", pulse}} {
		res, err := Fit(context.Background(), &Problem{OCVTest: tc.ocv, PulseTests: []Record{pulse}}, nil)
		if err != nil {
			t.Fatalf("%s: %v", tc.name, err)
		}
		if res.OCV.Source != SourceRests || !strings.Contains(strings.Join(res.Report.Notes, "\n"), "ocv method: rested voltages of synthetic-hppc-to-empty") {
			t.Errorf("%s: source %q, notes %q; want the rests named", tc.name, res.OCV.Source, res.Report.Notes)
		}
		if math.Abs(res.Type.CapacityAh/trueQ-1) > 1e-3 {
			t.Errorf("%s: capacity %.4f Ah; want %.4f", tc.name, res.Type.CapacityAh, trueQ)
		}
		for _, fr := range res.Report.Files {
			// The generator is the model; only the OCV's linear interpolation between
			// the 10 % knots remains (the NMC curve of REFERENCE.md §4 is piecewise
			// linear on the same knots, so little).
			if fr.RMSE > 0.003 {
				t.Errorf("%s: %s (%s) RMSE %.2f mV on its own synthetic data", tc.name, fr.Name, fr.Role, fr.RMSE*1e3)
			}
		}
	}
	// A 1C discharge without rests is neither a low-rate test nor a source of rests.
	r := newRecorder(typ, 1, 1)
	r.hold(trueQ, 3000)
	r.rec.Name = "cc-1c"
	_, err := Fit(context.Background(), &Problem{OCVTest: r.rec, PulseTests: []Record{pulse}}, nil)
	if err == nil || !errors.Is(err, ErrNotLowRate) || !errors.Is(err, ErrData) ||
		!strings.Contains(err.Error(), "not a low-rate test") || !strings.Contains(err.Error(), "rest") {
		t.Errorf("err = %v; want the strict low-rate error and the missing rests", err)
	}
}
