package ageing

import (
	"errors"
	"math"
	"path/filepath"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
)

func TestIntegrateTrapezoid(t *testing.T) {
	tests := []struct {
		name     string
		time     []float64
		current  []float64
		dis, chg float64
	}{
		// E1-style arithmetic (REFERENCE.md E1, common practice): 1.2 A for 2 h is 2.4 Ah.
		{"constant discharge", []float64{0, 7200}, []float64{1.2, 1.2}, 2.4, 0},
		{"constant charge", []float64{0, 3600}, []float64{-0.5, -0.5}, 0, 0.5},
		// A ramp from +2 A to −2 A over 1 h crosses zero at 30 min: two triangles of
		// ½·2 A·0.5 h = 0.5 Ah each, one discharged and one charged (trapezoid rule).
		{"sign change", []float64{0, 3600}, []float64{2, -2}, 0.5, 0.5},
		// −1 A → 3 A over 0.5 h crosses zero after 0.125 h: ½·1 A·0.125 h charged,
		// ½·3 A·0.375 h discharged, then 3 A for 0.5 h.
		{"sign change charge first", []float64{0, 1800, 3600}, []float64{-1, 3, 3}, 0.5*3*0.375 + 1.5, 0.5 * 1 * 0.125},
		{"empty", nil, nil, 0, 0},
		{"single sample", []float64{5}, []float64{3}, 0, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := Integrate(tc.time, tc.current)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(got.DischargedAh-tc.dis) > 1e-12 || math.Abs(got.ChargedAh-tc.chg) > 1e-12 {
				t.Errorf("Integrate = %+v; want discharged %g, charged %g", got, tc.dis, tc.chg)
			}
		})
	}
}

func TestIntegrateBadInput(t *testing.T) {
	tests := []struct {
		name    string
		time    []float64
		current []float64
	}{
		{"length mismatch", []float64{0, 1}, []float64{1}},
		{"nan current", []float64{0, 1}, []float64{1, math.NaN()}},
		{"inf time", []float64{0, math.Inf(1)}, []float64{1, 1}},
		{"time backwards", []float64{0, 2, 1}, []float64{1, 1, 1}},
		{"duplicate time", []float64{0, 1, 1}, []float64{1, 1, 1}},
	}
	for _, tc := range tests {
		if _, err := Integrate(tc.time, tc.current); !errors.Is(err, cell.ErrInvalid) {
			t.Errorf("%s: err = %v; want ErrInvalid", tc.name, err)
		}
	}
}

// TestIntegrateSamsungCurves checks the throughput of measured 1 Hz curves against the
// lab-derived Ah columns of the samsung30q_cycling dataset (ARTS Laboratory, University
// of South Carolina, CC BY-SA 4.0; see its PROVENANCE.md): discharged_ah at the last row
// of a curve file is the net trapezoid integral, and per_cycle_summary.csv lists
// dis_ah = 2.88799 Ah (cell A, cycle 1) and chg_ah = 2.39470 Ah (cell A, cycle 4).
func TestIntegrateSamsungCurves(t *testing.T) {
	dir := filepath.Join(datasetsDir(t), "samsung30q_cycling")
	tests := []struct {
		file       string
		wantNetAh  float64 // last discharged_ah of the file
		wantDirAh  float64 // summary dis_ah or chg_ah
		discharged bool
	}{
		{"discharge_curve_cellA_cycle1.csv", 2.88799, 2.88799, true},
		{"charge_curve_cellA_cycle4.csv", -2.3947, 2.39470, false},
	}
	for _, tc := range tests {
		t.Run(tc.file, func(t *testing.T) {
			c := readColumns(t, filepath.Join(dir, tc.file), nil, "time_s", "current_a", "discharged_ah")
			got, err := Integrate(c[0], c[1])
			if err != nil {
				t.Fatal(err)
			}
			// The file's values are rounded to 5 decimals.
			if net := got.DischargedAh - got.ChargedAh; math.Abs(net-tc.wantNetAh) > 2e-5 || math.Abs(net-c[2][len(c[2])-1]) > 2e-5 {
				t.Errorf("net throughput = %.6f Ah; want %.5f Ah", net, tc.wantNetAh)
			}
			dir := got.ChargedAh
			if tc.discharged {
				dir = got.DischargedAh
			}
			// The summary integrates the discharge (charge) current only; the split at the
			// first sample's tiny opposite current accounts for at most 1e-4 Ah.
			if math.Abs(dir-tc.wantDirAh) > 1e-4 {
				t.Errorf("throughput in the test's direction = %.6f Ah; want %.5f Ah", dir, tc.wantDirAh)
			}
		})
	}
	t.Run("equivalent full cycles", func(t *testing.T) {
		c := readColumns(t, filepath.Join(dir, "discharge_curve_cellA_cycle1.csv"), nil, "time_s", "current_a")
		got, err := Integrate(c[0], c[1])
		if err != nil {
			t.Fatal(err)
		}
		// Rated 3.0 Ah (PROVENANCE.md: Samsung INR18650-30Q, 3.0 Ah nominal).
		if efc := got.EquivalentFullCycles(3.0); math.Abs(efc-2.88799/3.0) > 1e-4 {
			t.Errorf("EquivalentFullCycles(3.0) = %g; want %g", efc, 2.88799/3.0)
		}
	})
}

// TestEquivalentFullCyclesSOC checks the SOC convention against the rainflow count of the
// REFERENCE.md E10 SOC history, which starts and ends at 50 %: then the sum of the SOC
// decreases equals Σ count·depth of the rainflow cycles (30 %·1.5 + 40 %·0.5 + 60 %·0.5 +
// 70 %·0.5 = 1.30).
func TestEquivalentFullCyclesSOC(t *testing.T) {
	soc := []float64{0.50, 0.80, 0.40, 0.70, 0.20, 0.90, 0.50}
	efc, err := EquivalentFullCyclesSOC(soc)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(efc-1.30) > 1e-12 {
		t.Errorf("EquivalentFullCyclesSOC = %g; want 1.30", efc)
	}
	cycles, err := Rainflow(nil, soc)
	if err != nil {
		t.Fatal(err)
	}
	if rf := CountedCycles(cycles); math.Abs(rf-efc) > 1e-12 {
		t.Errorf("CountedCycles(Rainflow) = %g; want EquivalentFullCyclesSOC = %g", rf, efc)
	}
	for _, bad := range [][]float64{{0.5, math.NaN()}, {0.5, 2}, {math.Inf(-1)}} {
		if _, err := EquivalentFullCyclesSOC(bad); !errors.Is(err, cell.ErrInvalid) {
			t.Errorf("EquivalentFullCyclesSOC(%v): err = %v; want ErrInvalid", bad, err)
		}
	}
	if got := (Throughput{DischargedAh: 1}).EquivalentFullCycles(0); !math.IsNaN(got) {
		t.Errorf("EquivalentFullCycles(0) = %g; want NaN", got)
	}
}
