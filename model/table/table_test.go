package table

import (
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/interp"
)

// nmcOCV is the typical NMC/graphite rested OCV column of ../shared/REFERENCE.md §4
// (values marked there as "from memory"; used only to exercise interpolation code).
var (
	socKnots = []float64{0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1}
	nmcOCV   = []float64{3.30, 3.55, 3.62, 3.66, 3.70, 3.74, 3.80, 3.87, 3.95, 4.05, 4.18}
)

// TestCurveMatchesGonum checks the interpolant against gonum's independent
// implementation of the same method (gonum.org/v1/gonum/interp.FritschButland), on a
// monotone OCV table and on non-monotone, unevenly spaced data.
func TestCurveMatchesGonum(t *testing.T) {
	for _, tc := range []struct {
		name string
		x, y []float64
	}{
		{"nmc-ocv", socKnots, nmcOCV},
		{"uneven-nonmonotone", []float64{0, 0.05, 0.3, 0.35, 0.9, 1}, []float64{1, 2, 2, 5, 3, 3.5}},
		{"three-points", []float64{0, 0.5, 1}, []float64{0, 1, 0.2}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			c, err := NewCurve(tc.x, tc.y)
			if err != nil {
				t.Fatal(err)
			}
			var ref interp.FritschButland
			if err := ref.Fit(tc.x, tc.y); err != nil {
				t.Fatal(err)
			}
			lo, hi := c.Domain()
			for i := 0; i <= 1000; i++ {
				v := lo + (hi-lo)*float64(i)/1000
				if got, want := c.At(v), ref.Predict(v); math.Abs(got-want) > 1e-12 {
					t.Fatalf("At(%g) = %.15g; gonum gives %.15g", v, got, want)
				}
				if got, want := c.Deriv(v), ref.PredictDerivative(v); math.Abs(got-want) > 1e-9*math.Max(1, math.Abs(want)) {
					t.Fatalf("Deriv(%g) = %.15g; gonum gives %.15g", v, got, want)
				}
			}
		})
	}
}

// TestCurveMonotone checks the defining property of Fritsch–Carlson interpolation
// (SIAM J. Numer. Anal. 17(2), 1980): monotone data give a monotone interpolant.
func TestCurveMonotone(t *testing.T) {
	// A flat-plateau table in the style of LFP (REFERENCE.md §4, from memory), where a
	// natural cubic spline overshoots.
	y := []float64{3.00, 3.20, 3.24, 3.26, 3.28, 3.29, 3.30, 3.31, 3.33, 3.34, 3.40}
	c, err := NewCurve(socKnots, y)
	if err != nil {
		t.Fatal(err)
	}
	prev := c.At(0)
	for i := 1; i <= 10000; i++ {
		v := float64(i) / 10000
		got := c.At(v)
		if got < prev-1e-15 {
			t.Fatalf("At(%g) = %g < At(%g) = %g: interpolant not monotone", v, got, v-1e-4, prev)
		}
		if d := c.Deriv(v); d < -1e-12 {
			t.Fatalf("Deriv(%g) = %g < 0", v, d)
		}
		prev = got
	}
}

func TestCurveKnotsAndExtrapolation(t *testing.T) {
	c, err := NewCurve(socKnots, nmcOCV)
	if err != nil {
		t.Fatal(err)
	}
	for i, x := range socKnots {
		if got := c.At(x); math.Abs(got-nmcOCV[i]) > 1e-15 {
			t.Errorf("At(%g) = %g; want knot value %g", x, got, nmcOCV[i])
		}
	}
	// Linear beyond the ends, with the end slope.
	d0 := c.Deriv(0)
	if got, want := c.At(-0.01), nmcOCV[0]-0.01*d0; math.Abs(got-want) > 1e-15 {
		t.Errorf("At(-0.01) = %g; want %g", got, want)
	}
	if c.Deriv(-1) != d0 {
		t.Errorf("Deriv(-1) = %g; want end slope %g", c.Deriv(-1), d0)
	}
}

func TestNewCurveRejects(t *testing.T) {
	for _, tc := range []struct {
		name string
		x, y []float64
	}{
		{"empty", nil, nil},
		{"one-point", []float64{0}, []float64{1}},
		{"length-mismatch", []float64{0, 1}, []float64{1}},
		{"nan-x", []float64{0, math.NaN()}, []float64{1, 2}},
		{"inf-y", []float64{0, 1}, []float64{1, math.Inf(1)}},
		{"repeated-x", []float64{0, 0.5, 0.5, 1}, []float64{1, 2, 3, 4}},
		{"decreasing-x", []float64{0, 1, 0.5}, []float64{1, 2, 3}},
	} {
		if _, err := NewCurve(tc.x, tc.y); !errors.Is(err, ErrTable) {
			t.Errorf("NewCurve(%s) error = %v; want ErrTable", tc.name, err)
		}
	}
}

func TestSurface(t *testing.T) {
	cold := make([]float64, len(nmcOCV))
	for i, v := range nmcOCV {
		cold[i] = v - 0.02
	}
	t0, t25 := 273.15, 298.15
	sf, err := NewSurface(socKnots, []float64{t0, t25}, [][]float64{cold, nmcOCV})
	if err != nil {
		t.Fatal(err)
	}
	// Linear in temperature between the curves, constant beyond them.
	for _, tc := range []struct{ z, tk, want float64 }{
		{0.5, t25, 3.74},
		{0.5, t0, 3.72},
		{0.5, (t0 + t25) / 2, 3.73},
		{0.5, 250, 3.72},
		{0.5, 330, 3.74},
	} {
		if got := sf.At(tc.z, tc.tk); math.Abs(got-tc.want) > 1e-12 {
			t.Errorf("At(%g, %g) = %.12g; want %g", tc.z, tc.tk, got, tc.want)
		}
	}
	if err := sf.NonDecreasing(); err != nil {
		t.Fatal(err)
	}
	// Inverse round trip at several temperatures.
	for _, tk := range []float64{260, t0, 285, t25} {
		for i := 0; i <= 100; i++ {
			z := float64(i) / 100
			if got := sf.Inverse(sf.At(z, tk), tk); math.Abs(got-z) > 1e-9 {
				t.Fatalf("Inverse(At(%g)) = %g at %g K", z, got, tk)
			}
		}
	}
	// Finite-difference check of the derivative.
	for _, z := range []float64{0.05, 0.33, 0.71, 0.98} {
		h := 1e-6
		fd := (sf.At(z+h, 280) - sf.At(z-h, 280)) / (2 * h)
		if d := sf.Deriv(z, 280); math.Abs(d-fd) > 1e-6 {
			t.Errorf("Deriv(%g) = %g; finite difference %g", z, d, fd)
		}
	}
}

func TestSurfaceRejects(t *testing.T) {
	if _, err := NewSurface(socKnots, nil, nil); !errors.Is(err, ErrTable) {
		t.Errorf("no temperatures: error = %v", err)
	}
	if _, err := NewSurface(socKnots, []float64{300, 290}, [][]float64{nmcOCV, nmcOCV}); !errors.Is(err, ErrTable) {
		t.Errorf("decreasing temperatures: error = %v", err)
	}
	if _, err := NewSurface(socKnots, []float64{300}, [][]float64{nmcOCV[:5]}); !errors.Is(err, ErrTable) {
		t.Errorf("short row: error = %v", err)
	}
	bad := append([]float64(nil), nmcOCV...)
	bad[4] = 3.5
	sf, err := NewSurface(socKnots, []float64{300}, [][]float64{bad})
	if err != nil {
		t.Fatal(err)
	}
	if err := sf.NonDecreasing(); !errors.Is(err, ErrTable) {
		t.Errorf("NonDecreasing on a dipping table = %v; want ErrTable", err)
	}
}

func TestSurfaceJSONRoundTrip(t *testing.T) {
	sf, err := NewSurface(socKnots, []float64{273.15, 298.15}, [][]float64{nmcOCV, nmcOCV})
	if err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(sf)
	if err != nil {
		t.Fatal(err)
	}
	var back Surface
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	for i := 0; i <= 50; i++ {
		z := float64(i) / 50
		if a, b := sf.At(z, 280), back.At(z, 280); math.Abs(a-b) > 1e-12 {
			t.Fatalf("round trip At(%g) = %g; want %g", z, b, a)
		}
	}
	if err := json.Unmarshal([]byte(`{"soc":[0,1],"temperatures_celsius":[25],"values":[[3,"x"]]}`), &back); err == nil {
		t.Error("malformed JSON accepted")
	}
	if err := json.Unmarshal([]byte(`{"soc":[0,1],"temperatures_celsius":[25],"values":[[3]]}`), &back); !errors.Is(err, ErrTable) {
		t.Errorf("short row JSON: error = %v; want ErrTable", err)
	}
}

func BenchmarkSurfaceAt(b *testing.B) {
	sf, err := NewSurface(socKnots, []float64{263.15, 273.15, 298.15, 318.15}, [][]float64{nmcOCV, nmcOCV, nmcOCV, nmcOCV})
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	var sink float64
	z := 0.0
	for b.Loop() {
		z = nextSOC(z)
		sink += sf.At(z, 290)
	}
	_ = sink
}

// TestAtDerivMatches holds the combined evaluations to At and Deriv bit for bit (the
// simulator and the filter rely on this to agree exactly): Curve.AtDeriv and
// Surface.AtDeriv on fine, coarse, unevenly spaced and single-temperature grids,
// inside, on and beyond the knots and the temperatures.
func TestAtDerivMatches(t *testing.T) {
	temps := []float64{263.15, 273.15, 298.15}
	rows := func(y []float64, shift float64) [][]float64 {
		out := make([][]float64, len(temps))
		for j := range temps {
			out[j] = make([]float64, len(y))
			for i, v := range y {
				out[j][i] = v + shift*float64(j)*(1+0.3*float64(i))
			}
		}
		return out
	}
	ocv, err := NewSurface(socKnots, temps, rows(nmcOCV, 0.01))
	if err != nil {
		t.Fatal(err)
	}
	bowl, err := NewSurface(append([]float64(nil), socKnots...), temps, rows([]float64{5, 4, 3, 2.5, 2.2, 2, 1.9, 2, 2.3, 2.6, 3}, -0.2))
	if err != nil {
		t.Fatal(err)
	}
	z3 := []float64{0, 0.5, 1}
	coarse, err := NewSurface(z3, temps[:2], [][]float64{{0.07, 0.045, 0.05}, {0.04, 0.025, 0.03}})
	if err != nil {
		t.Fatal(err)
	}
	flat, err := NewSurface([]float64{0, 0.05, 0.1, 0.2, 0.4, 0.6, 0.8, 1}, temps[2:], [][]float64{{3.0, 3.35, 3.48, 3.58, 3.68, 3.80, 3.96, 4.17}})
	if err != nil {
		t.Fatal(err)
	}
	surfaces := []*Surface{ocv, bowl, coarse, flat}
	for _, tk := range []float64{250, 263.15, 268, 273.15, 290, 298.15, 320} {
		for i := -20; i <= 1020; i++ {
			z := float64(i) / 1000
			if i%100 == 0 {
				z = float64(i/100) / 10 // exactly on the knots
			}
			for n, sf := range surfaces {
				v, d := sf.At(z, tk), sf.Deriv(z, tk)
				if gv, gd := sf.AtDeriv(z, tk); gv != v || gd != d {
					t.Fatalf("surface %d: AtDeriv(%g, %g) = %.17g, %.17g; At, Deriv give %.17g, %.17g", n, z, tk, gv, gd, v, d)
				}
				c := sf.Curve(0)
				if gv, gd := c.AtDeriv(z); gv != c.At(z) || gd != c.Deriv(z) {
					t.Fatalf("surface %d: Curve.AtDeriv(%g) = %.17g, %.17g; At, Deriv give %.17g, %.17g", n, z, gv, gd, c.At(z), c.Deriv(z))
				}
			}
		}
	}
}

// BenchmarkLookup compares two ways of getting values and slopes from three surfaces
// over two temperatures: separate At and Deriv calls, and the combined AtDeriv.
func BenchmarkLookup(b *testing.B) {
	var sfs []*Surface
	for k := range 3 {
		y := make([]float64, len(nmcOCV))
		for i, v := range nmcOCV {
			y[i] = v * float64(k+1)
		}
		sf, err := NewSurface(socKnots, []float64{273.15, 313.15}, [][]float64{y, y})
		if err != nil {
			b.Fatal(err)
		}
		sfs = append(sfs, sf)
	}
	var sink float64
	b.Run("At+Deriv", func(b *testing.B) {
		b.ReportAllocs()
		z := 0.0
		for b.Loop() {
			z = nextSOC(z)
			for _, sf := range sfs {
				sink += sf.At(z, 290) + sf.Deriv(z, 290)
			}
		}
	})
	b.Run("AtDeriv", func(b *testing.B) {
		b.ReportAllocs()
		z := 0.0
		for b.Loop() {
			z = nextSOC(z)
			for _, sf := range sfs {
				v, d := sf.AtDeriv(z, 290)
				sink += v + d
			}
		}
	})
	_ = sink
}

// nextSOC steps a benchmark's state of charge through [0, 1] so that lookups land in
// every segment.
func nextSOC(z float64) float64 {
	z += 0.0137
	if z > 1 {
		z--
	}
	return z
}

// TestGridSearch checks the bucket index against the definition of the segment
// (x[k] ≤ v < x[k+1]) on even, uneven and very uneven grids (where the index is
// capped and a lookup steps over several knots), at random points, on the knots and
// one ulp either side of them.
func TestGridSearch(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	grids := [][]float64{
		socKnots,
		{0, 0.5, 1},
		{0, 1},
		{0, 0.05, 0.1, 0.2, 0.4, 0.6, 0.8, 1},
		{0, 1e-9, 2e-9, 0.5, 0.999, 1},
		{-3, -2.5, 7, 7.001, 100},
	}
	for gi, x := range grids {
		g := newGrid(append([]float64(nil), x...))
		n := len(x)
		var vs []float64
		for range 2000 {
			vs = append(vs, x[0]+(x[n-1]-x[0])*rng.Float64())
		}
		for _, xi := range x {
			vs = append(vs, xi, math.Nextafter(xi, math.Inf(-1)), math.Nextafter(xi, math.Inf(1)))
		}
		for _, v := range vs {
			want := -1
			switch {
			case v >= x[n-1]:
				want = n - 1
			case v > x[0]:
				for k := range n - 1 {
					if x[k] <= v && v < x[k+1] {
						want = k
					}
				}
			}
			if got := g.segment(v); got != want {
				t.Fatalf("grid %d: segment(%.17g) = %d; want %d", gi, v, got, want)
			}
		}
	}
}
