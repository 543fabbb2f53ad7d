package ageing

import (
	"errors"
	"math"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
)

// TestRainflowE10 checks the rainflow count against the worked example E10 of
// ../shared/REFERENCE.md, believed to be the illustration of ASTM E1049-85 §5.4.4
// (from memory), and its state of charge variant.
func TestRainflowE10(t *testing.T) {
	tests := []struct {
		name string
		x    []float64
		want []RangeCount
	}{
		{
			// REFERENCE.md E10: turning points −2, 1, −3, 5, −1, 3, −4, 4, −2.
			name: "astm-turning-points",
			x:    []float64{-2, 1, -3, 5, -1, 3, -4, 4, -2},
			want: []RangeCount{{3, 0.5}, {4, 1.5}, {6, 0.5}, {8, 1}, {9, 0.5}},
		},
		{
			// REFERENCE.md E10: SOC 50, 80, 40, 70, 20, 90, 50 % as fractions.
			name: "soc-history",
			x:    []float64{0.50, 0.80, 0.40, 0.70, 0.20, 0.90, 0.50},
			want: []RangeCount{{0.30, 1.5}, {0.40, 0.5}, {0.60, 0.5}, {0.70, 0.5}},
		},
		{
			// The same E10 history with points inside monotone runs and a plateau added:
			// reduction to turning points must give the same count (E1049-85 §5.4.4).
			name: "astm-with-intermediate-points",
			x:    []float64{-2, 0, 1, 1, -1, -3, 0, 2, 5, -1, 1, 3, 3, -4, 0, 4, -2},
			want: []RangeCount{{3, 0.5}, {4, 1.5}, {6, 0.5}, {8, 1}, {9, 0.5}},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			cycles, err := Rainflow(nil, tc.x)
			if err != nil {
				t.Fatalf("Rainflow: %v", err)
			}
			got := Spectrum(cycles, 1e-9)
			if len(got) != len(tc.want) {
				t.Fatalf("Spectrum(Rainflow(%v)) = %v; want %v", tc.x, got, tc.want)
			}
			for k := range got {
				if math.Abs(got[k].Range-tc.want[k].Range) > 1e-9 || math.Abs(got[k].Count-tc.want[k].Count) > 1e-12 {
					t.Errorf("range %d = %+v; want %+v", k, got[k], tc.want[k])
				}
			}
		})
	}
}

// TestRainflowHalfCycleTotal checks the identity Σ count·range = (total variation)/2,
// which holds for every complete rainflow count (each full cycle is two reversals of
// its range, each half cycle one), on an irregular history.
func TestRainflowHalfCycleTotal(t *testing.T) {
	x := []float64{0.9, 0.35, 0.6, 0.2, 0.75, 0.5, 0.95, 0.1, 0.4, 0.3, 0.8}
	cycles, err := Rainflow(nil, x)
	if err != nil {
		t.Fatal(err)
	}
	var tv float64
	for k := 1; k < len(x); k++ {
		tv += math.Abs(x[k] - x[k-1])
	}
	if got := CountedCycles(cycles); math.Abs(got-tv/2) > 1e-12 {
		t.Errorf("CountedCycles = %g; want total variation/2 = %g", got, tv/2)
	}
	for _, c := range cycles {
		if c.Count != 0.5 && c.Count != 1 {
			t.Errorf("cycle %+v has count %g; want 0.5 or 1", c, c.Count)
		}
		if math.Abs(c.Range-math.Abs(x[c.To]-x[c.From])) > 1e-15 || math.Abs(c.Mean-(x[c.To]+x[c.From])/2) > 1e-15 {
			t.Errorf("cycle %+v does not match its end points %g, %g", c, x[c.From], x[c.To])
		}
	}
}

func TestRainflowDegenerate(t *testing.T) {
	for _, x := range [][]float64{nil, {0.5}, {0.5, 0.5, 0.5}} {
		c, err := Rainflow(nil, x)
		if err != nil || len(c) != 0 {
			t.Errorf("Rainflow(%v) = %v, %v; want no cycles", x, c, err)
		}
	}
	c, err := Rainflow(nil, []float64{0.2, 0.7})
	if err != nil || len(c) != 1 || c[0].Count != 0.5 || math.Abs(c[0].Range-0.5) > 1e-15 {
		t.Errorf("Rainflow(0.2, 0.7) = %v, %v; want one half cycle of 0.5", c, err)
	}
	if _, err := Rainflow(nil, []float64{0.1, math.NaN()}); !errors.Is(err, cell.ErrInvalid) {
		t.Errorf("Rainflow with NaN: err = %v; want ErrInvalid", err)
	}
}

func TestTurningPoints(t *testing.T) {
	tests := []struct {
		x    []float64
		want []int
	}{
		{nil, nil},
		{[]float64{1}, []int{0}},
		{[]float64{1, 2, 3}, []int{0, 2}},
		{[]float64{1, 3, 3, 2}, []int{0, 1, 3}},
		{[]float64{1, 1, 2, 0, 0}, []int{0, 2, 3}},
		{[]float64{2, 2, 2}, []int{0}},
	}
	for _, tc := range tests {
		got := TurningPoints(nil, tc.x)
		if len(got) != len(tc.want) {
			t.Errorf("TurningPoints(%v) = %v; want %v", tc.x, got, tc.want)
			continue
		}
		for k := range got {
			if got[k] != tc.want[k] {
				t.Errorf("TurningPoints(%v) = %v; want %v", tc.x, got, tc.want)
				break
			}
		}
	}
}
