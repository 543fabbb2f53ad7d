package table

import (
	"math"
	"math/rand/v2"
	"testing"
)

// TestGroupMatchesSurfaces holds Group.At to the members' Surface.At bit for bit (the
// group is only a faster way to read the same interpolants), inside the knots, on them,
// beyond both ends, at NaN, and at temperatures below, between, on and above the
// tabulated ones, for one and for several temperatures.
func TestGroupMatchesSurfaces(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	s := []float64{0, 0.05, 0.1, 0.3, 0.5, 0.8, 1}
	for _, temps := range [][]float64{{298.15}, {263.15, 273.15, 298.15, 318.15}} {
		var members []*Surface
		for range 5 {
			rows := make([][]float64, len(temps))
			for j := range rows {
				for range s {
					rows[j] = append(rows[j], 0.01+rng.Float64())
				}
			}
			sf, err := NewSurface(s, temps, rows)
			if err != nil {
				t.Fatal(err)
			}
			members = append(members, sf)
		}
		g, ok := NewGroup(members...)
		if !ok || g.Len() != len(members) {
			t.Fatalf("NewGroup of %d surfaces on one grid failed", len(members))
		}
		zs := append([]float64{-0.2, 0, 1, 1.3, math.NaN(), 0.05, 0.3}, s...)
		for range 200 {
			zs = append(zs, rng.Float64())
		}
		tks := append([]float64{250, 263.15, 273.15, 298.15, 318.15, 330}, temps...)
		for range 20 {
			tks = append(tks, 255+70*rng.Float64())
		}
		var dst [MaxGroup]float64
		for _, z := range zs {
			for _, tk := range tks {
				g.At(dst[:], z, tk)
				for m, sf := range members {
					want := sf.At(z, tk)
					if got := dst[m]; got != want && !(math.IsNaN(got) && math.IsNaN(want)) {
						t.Fatalf("%d temps: Group.At(%g, %g)[%d] = %.17g; Surface.At %.17g", len(temps), z, tk, m, got, want)
					}
				}
			}
		}
	}
}

// TestNewGroupRejects checks that surfaces on different grids, too many surfaces and
// none are refused rather than read on a wrong grid.
func TestNewGroupRejects(t *testing.T) {
	mk := func(s, temps []float64) *Surface {
		rows := make([][]float64, len(temps))
		for j := range rows {
			for i := range s {
				rows[j] = append(rows[j], float64(i+j+1))
			}
		}
		sf, err := NewSurface(s, temps, rows)
		if err != nil {
			t.Fatal(err)
		}
		return sf
	}
	a := mk([]float64{0, 0.5, 1}, []float64{298.15})
	cases := []struct {
		name    string
		members []*Surface
	}{
		{"none", nil},
		{"nil member", []*Surface{a, nil}},
		{"other soc knots", []*Surface{a, mk([]float64{0, 0.4, 1}, []float64{298.15})}},
		{"other temperatures", []*Surface{a, mk([]float64{0, 0.5, 1}, []float64{273.15})}},
		{"more temperatures", []*Surface{a, mk([]float64{0, 0.5, 1}, []float64{273.15, 298.15})}},
		{"too many", make([]*Surface, MaxGroup+1)},
	}
	for _, c := range cases {
		if g, ok := NewGroup(c.members...); ok || g != nil {
			t.Errorf("%s: NewGroup = %v, %v; want nil, false", c.name, g, ok)
		}
	}
}

func TestGroupAtShortDstPanics(t *testing.T) {
	sf, err := NewSurface([]float64{0, 1}, []float64{298.15}, [][]float64{{1, 2}})
	if err != nil {
		t.Fatal(err)
	}
	g, _ := NewGroup(sf, sf)
	defer func() {
		if recover() == nil {
			t.Error("Group.At with a one-element dst for two members did not panic")
		}
	}()
	g.At(make([]float64, 1), 0.5, 298.15)
}
