// Package table interpolates the tabulated functions the battery model is built from:
// open-circuit voltage against state of charge, and resistances and capacitances over
// state of charge and temperature.
//
// # Methods
//
// A [Curve] is a function of one variable sampled at strictly increasing abscissae and
// interpolated by a piecewise cubic Hermite polynomial whose knot slopes are chosen by
// the Fritsch–Carlson conditions (F. N. Fritsch and R. E. Carlson, "Monotone piecewise
// cubic interpolation", SIAM J. Numer. Anal. 17(2):238–246, 1980), with the
// weighted-harmonic-mean interior slopes of Fritsch and Butland (SIAM J. Sci. Stat.
// Comput. 5(2):300–304, 1984). The interpolant is monotone wherever the data are, and
// never overshoots a local extremum of the data. Outside the sampled range a Curve
// extends linearly with its end slope, so that a filter whose state strays slightly past
// 0 or 1 still sees a finite, informative derivative.
//
// A [Surface] is a family of Curves over a second variable (temperature), interpolated
// linearly between neighbouring curves and held constant beyond the first and last.
//
// # Invariants
//
// Curves and Surfaces are immutable after construction and safe for concurrent use.
// Evaluation does not allocate.
package table

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sort"
)

// ErrTable is wrapped by every error about malformed table data.
var ErrTable = errors.New("invalid table")

// Curve is a monotone-preserving cubic interpolant through (X[i], Y[i]).
// Build it with [NewCurve]; the zero value is not usable.
type Curve struct {
	x, y, d []float64 // knots, values and Hermite slopes
}

// NewCurve returns the interpolant through the points (x[i], y[i]). The abscissae must
// be finite and strictly increasing, the values finite, and there must be at least two
// points. The inputs are copied.
func NewCurve(x, y []float64) (*Curve, error) {
	if len(x) != len(y) {
		return nil, fmt.Errorf("%w: %d abscissae but %d values", ErrTable, len(x), len(y))
	}
	if len(x) < 2 {
		return nil, fmt.Errorf("%w: need at least 2 points, have %d", ErrTable, len(x))
	}
	for i := range x {
		if !finite(x[i]) || !finite(y[i]) {
			return nil, fmt.Errorf("%w: point %d is not finite (%g, %g)", ErrTable, i, x[i], y[i])
		}
		if i > 0 && !(x[i] > x[i-1]) {
			return nil, fmt.Errorf("%w: abscissae must increase strictly, but x[%d]=%g follows x[%d]=%g", ErrTable, i, x[i], i-1, x[i-1])
		}
	}
	c := &Curve{
		x: append([]float64(nil), x...),
		y: append([]float64(nil), y...),
		d: make([]float64, len(x)),
	}
	c.slopes()
	return c, nil
}

// slopes sets the Hermite slopes (PCHIP: Fritsch–Carlson monotonicity with
// Fritsch–Butland interior weights; end slopes by the shape-preserving three-point rule).
func (c *Curve) slopes() {
	n := len(c.x)
	h := make([]float64, n-1)
	del := make([]float64, n-1)
	for k := range n - 1 {
		h[k] = c.x[k+1] - c.x[k]
		del[k] = (c.y[k+1] - c.y[k]) / h[k]
	}
	if n == 2 {
		c.d[0], c.d[1] = del[0], del[0]
		return
	}
	for k := 1; k < n-1; k++ {
		if del[k-1]*del[k] <= 0 {
			c.d[k] = 0
			continue
		}
		w1 := 2*h[k] + h[k-1]
		w2 := h[k] + 2*h[k-1]
		c.d[k] = (w1 + w2) / (w1/del[k-1] + w2/del[k])
	}
	c.d[0] = endSlope(h[0], h[1], del[0], del[1])
	c.d[n-1] = endSlope(h[n-2], h[n-3], del[n-2], del[n-3])
}

// endSlope is the non-centred three-point end slope with the shape-preserving
// adjustments used by PCHIP (C. Moler, Numerical Computing with MATLAB, §3.4).
func endSlope(h0, h1, del0, del1 float64) float64 {
	d := ((2*h0+h1)*del0 - h0*del1) / (h0 + h1)
	switch {
	case math.Signbit(d) != math.Signbit(del0) || d == 0:
		return 0
	case math.Signbit(del0) != math.Signbit(del1) && math.Abs(d) > math.Abs(3*del0):
		return 3 * del0
	}
	return d
}

// Len returns the number of knots.
func (c *Curve) Len() int { return len(c.x) }

// Knot returns the i-th knot.
func (c *Curve) Knot(i int) (x, y float64) { return c.x[i], c.y[i] }

// Domain returns the first and last abscissa.
func (c *Curve) Domain() (lo, hi float64) { return c.x[0], c.x[len(c.x)-1] }

// segment returns k such that x[k] <= v < x[k+1], clamped to [0, n-2].
func (c *Curve) segment(v float64) int {
	n := len(c.x)
	if v <= c.x[1] {
		return 0
	}
	if v >= c.x[n-2] {
		return n - 2
	}
	// Binary search over a handful of knots is cheaper than anything cleverer.
	lo, hi := 1, n-2
	for hi-lo > 1 {
		m := (lo + hi) / 2
		if c.x[m] <= v {
			lo = m
		} else {
			hi = m
		}
	}
	return lo
}

// At returns the interpolated value at v. Beyond the knots it extends linearly with the
// end slope.
func (c *Curve) At(v float64) float64 {
	n := len(c.x)
	if v <= c.x[0] {
		return c.y[0] + c.d[0]*(v-c.x[0])
	}
	if v >= c.x[n-1] {
		return c.y[n-1] + c.d[n-1]*(v-c.x[n-1])
	}
	k := c.segment(v)
	h := c.x[k+1] - c.x[k]
	t := (v - c.x[k]) / h
	t2 := t * t
	t3 := t2 * t
	h00 := 2*t3 - 3*t2 + 1
	h10 := t3 - 2*t2 + t
	h01 := -2*t3 + 3*t2
	h11 := t3 - t2
	return h00*c.y[k] + h10*h*c.d[k] + h01*c.y[k+1] + h11*h*c.d[k+1]
}

// Deriv returns the derivative of the interpolant at v (the end slope beyond the knots).
func (c *Curve) Deriv(v float64) float64 {
	n := len(c.x)
	if v <= c.x[0] {
		return c.d[0]
	}
	if v >= c.x[n-1] {
		return c.d[n-1]
	}
	k := c.segment(v)
	h := c.x[k+1] - c.x[k]
	t := (v - c.x[k]) / h
	t2 := t * t
	dh00 := 6*t2 - 6*t
	dh10 := 3*t2 - 4*t + 1
	dh01 := -6*t2 + 6*t
	dh11 := 3*t2 - 2*t
	return (dh00*c.y[k]+dh01*c.y[k+1])/h + dh10*c.d[k] + dh11*c.d[k+1]
}

// Surface is a function f(s, T) tabulated on a grid: one [Curve] in s for each
// temperature, linear in temperature between curves and constant beyond the ends.
// Temperatures are in kelvin. Build it with [NewSurface].
type Surface struct {
	temps  []float64 // K, strictly increasing
	curves []*Curve
}

// NewSurface builds a surface from values[j][i] = f(s[i], temps[j]). temps is in kelvin
// and must increase strictly; s must increase strictly; every row must have len(s)
// finite values. A single temperature gives a surface that ignores temperature.
func NewSurface(s, temps []float64, values [][]float64) (*Surface, error) {
	if len(temps) == 0 {
		return nil, fmt.Errorf("%w: no temperatures", ErrTable)
	}
	if len(values) != len(temps) {
		return nil, fmt.Errorf("%w: %d temperatures but %d rows of values", ErrTable, len(temps), len(values))
	}
	sf := &Surface{temps: append([]float64(nil), temps...), curves: make([]*Curve, len(temps))}
	for j, tk := range temps {
		if !finite(tk) || tk <= 0 {
			return nil, fmt.Errorf("%w: temperature %d is %g K", ErrTable, j, tk)
		}
		if j > 0 && !(tk > temps[j-1]) {
			return nil, fmt.Errorf("%w: temperatures must increase strictly (%g K after %g K)", ErrTable, tk, temps[j-1])
		}
		c, err := NewCurve(s, values[j])
		if err != nil {
			return nil, fmt.Errorf("row %d (%.2f K): %w", j, tk, err)
		}
		sf.curves[j] = c
	}
	return sf, nil
}

// Temps returns a copy of the surface's temperatures in kelvin.
func (sf *Surface) Temps() []float64 { return append([]float64(nil), sf.temps...) }

// NumTemps returns the number of temperatures (curves) of the surface.
func (sf *Surface) NumTemps() int { return len(sf.temps) }

// Curve returns the curve at the j-th temperature.
func (sf *Surface) Curve(j int) *Curve { return sf.curves[j] }

// bracket returns the pair of curve indices around tk and the weight of the upper one.
func (sf *Surface) bracket(tk float64) (j int, w float64) {
	n := len(sf.temps)
	if n == 1 || tk <= sf.temps[0] {
		return 0, 0
	}
	if tk >= sf.temps[n-1] {
		return n - 1, 0 // one curve to evaluate, not two
	}
	j = sort.SearchFloat64s(sf.temps, tk) - 1
	if j < 0 {
		j = 0
	}
	return j, (tk - sf.temps[j]) / (sf.temps[j+1] - sf.temps[j])
}

// At returns f(s, tk) with tk in kelvin.
func (sf *Surface) At(s, tk float64) float64 {
	j, w := sf.bracket(tk)
	v := sf.curves[j].At(s)
	if w == 0 {
		return v
	}
	return v + w*(sf.curves[j+1].At(s)-v)
}

// Deriv returns ∂f/∂s at (s, tk) with tk in kelvin.
func (sf *Surface) Deriv(s, tk float64) float64 {
	j, w := sf.bracket(tk)
	v := sf.curves[j].Deriv(s)
	if w == 0 {
		return v
	}
	return v + w*(sf.curves[j+1].Deriv(s)-v)
}

// Inverse returns s such that f(s, tk) = y for a surface that is non-decreasing in s
// over its knots, found by bisection to 1e-12 in s. Values beyond the range of the
// curve are mapped through the linear extension, or clamped to the domain when the end
// slope is zero.
func (sf *Surface) Inverse(y, tk float64) float64 {
	lo, hi := sf.curves[0].Domain()
	flo, fhi := sf.At(lo, tk), sf.At(hi, tk)
	if y <= flo {
		if d := sf.Deriv(lo, tk); d > 0 {
			return lo + (y-flo)/d
		}
		return lo
	}
	if y >= fhi {
		if d := sf.Deriv(hi, tk); d > 0 {
			return hi + (y-fhi)/d
		}
		return hi
	}
	for range 100 {
		m := 0.5 * (lo + hi)
		if sf.At(m, tk) < y {
			lo = m
		} else {
			hi = m
		}
		if hi-lo < 1e-12 {
			break
		}
	}
	return 0.5 * (lo + hi)
}

// NonDecreasing reports an error if any curve's knot values decrease, or if a curve is
// flat end to end, which would make the inverse meaningless.
func (sf *Surface) NonDecreasing() error {
	for j, c := range sf.curves {
		for i := 1; i < len(c.y); i++ {
			if c.y[i] < c.y[i-1] {
				return fmt.Errorf("%w: values must not decrease, but at %.2f K value %d (%g) is below value %d (%g)", ErrTable, sf.temps[j], i, c.y[i], i-1, c.y[i-1])
			}
		}
		if !(c.y[len(c.y)-1] > c.y[0]) {
			return fmt.Errorf("%w: curve at %.2f K is flat", ErrTable, sf.temps[j])
		}
	}
	return nil
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// surfaceJSON is the serialised form of a Surface. Every surface in this project is a
// function of state of charge (a fraction, 0–1) and temperature (°C at the edges).
type surfaceJSON struct {
	SOC          []float64   `json:"soc"`
	TempsCelsius []float64   `json:"temperatures_celsius"`
	Values       [][]float64 `json:"values"`
}

// MarshalJSON encodes the surface as its knots: soc, temperatures_celsius and
// values[temperature][soc].
func (sf *Surface) MarshalJSON() ([]byte, error) {
	out := surfaceJSON{TempsCelsius: make([]float64, len(sf.temps)), Values: make([][]float64, len(sf.temps))}
	out.SOC = append([]float64(nil), sf.curves[0].x...)
	for j, tk := range sf.temps {
		out.TempsCelsius[j] = tk - CelsiusOffset
		out.Values[j] = append([]float64(nil), sf.curves[j].y...)
	}
	return json.Marshal(out)
}

// UnmarshalJSON decodes and validates the form written by MarshalJSON.
func (sf *Surface) UnmarshalJSON(b []byte) error {
	var in surfaceJSON
	if err := json.Unmarshal(b, &in); err != nil {
		return err
	}
	tk := make([]float64, len(in.TempsCelsius))
	for j, c := range in.TempsCelsius {
		tk[j] = c + CelsiusOffset
	}
	s, err := NewSurface(in.SOC, tk, in.Values)
	if err != nil {
		return err
	}
	*sf = *s
	return nil
}

// CelsiusOffset converts °C to K: T[K] = T[°C] + CelsiusOffset (SI definition).
const CelsiusOffset = 273.15
