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
//
// # Evaluation cost
//
// Each cubic piece is stored in powers of the distance from its left knot, so that a
// value takes three multiplications and the derivative four more, with no division.
// A grid of knots carries an index of equal-width buckets, so that the segment holding
// a value is found in constant time rather than by bisection. The curves of a Surface
// share one grid, so a lookup finds the segment once and the temperature bracket once
// however many curves it blends; [Curve.AtDeriv] and [Surface.AtDeriv] return the value
// and the slope from one lookup, bit for bit equal to At and Deriv.
package table

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
)

// ErrTable is wrapped by every error about malformed table data.
var ErrTable = errors.New("invalid table")

// Curve is a monotone-preserving cubic interpolant through (X[i], Y[i]).
// Build it with [NewCurve]; the zero value is not usable.
type Curve struct {
	grid           // knots
	y, d []float64 // values and Hermite slopes
	p    []poly    // p[k] is the piece on [x[k], x[k+1]], see poly
}

// poly holds the Hermite cubic of one segment [x₀, x₁] in powers of s = v − x₀:
// f = p[0] + s·(p[1] + s·(p[2] + s·p[3])), with p[0] and p[1] the value and slope at x₀
// and p[2], p[3] fixed by the value and slope at x₁ (the same polynomial as the
// Hermite basis form, rearranged; it agrees with it to rounding).
type poly [4]float64

// at returns the cubic at offset s from the segment's left knot.
func (q *poly) at(s float64) float64 { return q[0] + s*(q[1]+s*(q[2]+s*q[3])) }

// atDeriv returns the cubic and its derivative at offset s, by Horner's scheme with
// synthetic division; the value is computed exactly as by at.
func (q *poly) atDeriv(s float64) (v, d float64) {
	b2 := q[2] + s*q[3]
	b1 := q[1] + s*b2
	return q[0] + s*b1, b1 + s*(b2+s*q[3])
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
		grid: newGrid(append([]float64(nil), x...)),
		y:    append([]float64(nil), y...),
		d:    make([]float64, len(x)),
		p:    make([]poly, len(x)-1),
	}
	c.slopes()
	c.pieces()
	return c, nil
}

// pieces sets the power-form coefficients of every segment from the knots and slopes:
// with h the segment length and δ its divided difference, f = y₀ + d₀s +
// ((3δ − 2d₀ − d₁)/h)s² + ((d₀ + d₁ − 2δ)/h²)s³.
func (c *Curve) pieces() {
	for k := range c.p {
		h := c.x[k+1] - c.x[k]
		del := (c.y[k+1] - c.y[k]) / h
		d0, d1 := c.d[k], c.d[k+1]
		c.p[k] = poly{c.y[k], d0, (3*del - 2*d0 - d1) / h, (d0 + d1 - 2*del) / (h * h)}
	}
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

// grid is a strictly increasing sequence of knots with an index that finds the
// segment holding a value in constant time: the domain is cut into buckets no wider
// than the narrowest segment (up to a limit), and idx holds the segment at the left
// edge of each bucket, from which a lookup steps at most a knot or two.
type grid struct {
	x   []float64 // knots, at least two
	inv float64   // buckets per unit of x
	idx []int32   // idx[b] is the segment holding x[0] + b/inv
}

// maxBucketsPerSegment bounds the index of a very unevenly spaced grid; a lookup
// then steps over more knots.
const maxBucketsPerSegment = 8

// newGrid indexes the knots x (strictly increasing, at least two), which it keeps.
func newGrid(x []float64) grid {
	n := len(x)
	span := x[n-1] - x[0]
	minh := span
	for k := range n - 1 {
		minh = min(minh, x[k+1]-x[k])
	}
	m := int(math.Min(math.Ceil(span/minh), float64(maxBucketsPerSegment*(n-1))))
	m = max(m, 1)
	g := grid{x: x, inv: float64(m) / span, idx: make([]int32, m)}
	k := 0
	for b := range g.idx {
		v := x[0] + float64(b)/g.inv
		for k < n-2 && x[k+1] <= v {
			k++
		}
		g.idx[b] = int32(k)
	}
	return g
}

// segment returns the segment that holds v: −1 if v ≤ x[0] (the linear extension
// below), n−1 if v ≥ x[n−1] (above), and otherwise the k with x[k] ≤ v < x[k+1].
func (g *grid) segment(v float64) int {
	x := g.x
	n := len(x)
	if v <= x[0] {
		return -1
	}
	if v >= x[n-1] {
		return n - 1
	}
	if v != v {
		return 0 // NaN: any piece gives NaN
	}
	return g.search(v)
}

// search returns the k with x[k] ≤ v < x[k+1] for x[0] < v < x[n−1], which the
// caller has checked. The bucket gives a segment at most a rounding error away from
// v's; the loops step from there, so the result is exact whatever the rounding.
func (g *grid) search(v float64) int {
	x := g.x
	b := min(max(int((v-x[0])*g.inv), 0), len(g.idx)-1)
	k := int(g.idx[b])
	for v < x[k] {
		k--
	}
	for v >= x[k+1] {
		k++
	}
	return k
}

// value returns the interpolant at v, which lies in segment k (as returned by segment).
func (c *Curve) value(k int, v float64) float64 {
	if k < 0 {
		return c.y[0] + c.d[0]*(v-c.x[0])
	}
	if k >= len(c.p) {
		return c.y[k] + c.d[k]*(v-c.x[k])
	}
	return c.p[k].at(v - c.x[k])
}

// slope returns the derivative at v in segment k.
func (c *Curve) slope(k int, v float64) float64 {
	if k < 0 {
		return c.d[0]
	}
	if k >= len(c.p) {
		return c.d[k]
	}
	_, d := c.p[k].atDeriv(v - c.x[k])
	return d
}

// valueSlope returns the value and the derivative at v in segment k; the value is the
// same as value's, bit for bit.
func (c *Curve) valueSlope(k int, v float64) (y, d float64) {
	if k < 0 {
		return c.y[0] + c.d[0]*(v-c.x[0]), c.d[0]
	}
	if k >= len(c.p) {
		return c.y[k] + c.d[k]*(v-c.x[k]), c.d[k]
	}
	return c.p[k].atDeriv(v - c.x[k])
}

// At returns the interpolated value at v. Beyond the knots it extends linearly with the
// end slope.
func (c *Curve) At(v float64) float64 { return c.value(c.segment(v), v) }

// Deriv returns the derivative of the interpolant at v (the end slope beyond the knots).
func (c *Curve) Deriv(v float64) float64 { return c.slope(c.segment(v), v) }

// AtDeriv returns At(v) and Deriv(v), bit for bit, from one segment search.
func (c *Curve) AtDeriv(v float64) (y, dy float64) { return c.valueSlope(c.segment(v), v) }

// Surface is a function f(s, T) tabulated on a grid: one [Curve] in s for each
// temperature, linear in temperature between curves and constant beyond the ends.
// Temperatures are in kelvin. Build it with [NewSurface].
type Surface struct {
	grid             // state-of-charge knots, shared by every curve
	temps  []float64 // K, strictly increasing
	curves []*Curve
	// p[k·len(temps)+j] is piece k of curve j: the pieces that one lookup blends
	// lie side by side.
	p []poly
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
		if j == 0 {
			sf.grid = c.grid
		}
		c.grid = sf.grid // the same knots: one copy, found once per lookup
		sf.curves[j] = c
	}
	nt := len(temps)
	sf.p = make([]poly, (len(sf.x)-1)*nt)
	for j, c := range sf.curves {
		for k, q := range c.p {
			sf.p[k*nt+j] = q
		}
	}
	return sf, nil
}

// Temps returns a copy of the surface's temperatures in kelvin.
func (sf *Surface) Temps() []float64 { return append([]float64(nil), sf.temps...) }

// NumTemps returns the number of temperatures (curves) of the surface.
func (sf *Surface) NumTemps() int { return len(sf.temps) }

// Curve returns the curve at the j-th temperature.
func (sf *Surface) Curve(j int) *Curve { return sf.curves[j] }

// bracket returns the pair of indices of the temperatures t around tk and the weight of the upper one:
// j with temps[j] < tk ≤ temps[j+1] and w in (0, 1], or w = 0 and the single curve j
// to use at or beyond the ends.
func bracket(t []float64, tk float64) (j int, w float64) {
	n := len(t)
	if n == 1 || tk <= t[0] {
		return 0, 0
	}
	if tk >= t[n-1] {
		return n - 1, 0 // one curve to evaluate, not two
	}
	for j+2 < n && t[j+1] < tk {
		j++
	}
	return j, (tk - t[j]) / (t[j+1] - t[j])
}

// outer returns f and ∂f/∂s at s outside the open interval of the knots (on the linear
// extensions, with the end slopes) or at a NaN s, with the bracket (j, w).
func (sf *Surface) outer(s float64, j int, w float64) (v, d float64) {
	k := len(sf.x) - 1
	if s <= sf.x[0] {
		k = -1
	}
	v, d = sf.curves[j].valueSlope(k, s)
	if w == 0 {
		return v, d
	}
	v1, d1 := sf.curves[j+1].valueSlope(k, s)
	return v + w*(v1-v), d + w*(d1-d)
}

// At returns f(s, tk) with tk in kelvin.
func (sf *Surface) At(s, tk float64) float64 {
	j, w := bracket(sf.temps, tk)
	x := sf.x
	if !(s > x[0] && s < x[len(x)-1]) {
		v, _ := sf.outer(s, j, w)
		return v
	}
	k := sf.search(s)
	ds := s - x[k]
	i := k*len(sf.temps) + j
	v := sf.p[i].at(ds)
	if w != 0 {
		v += w * (sf.p[i+1].at(ds) - v)
	}
	return v
}

// Deriv returns ∂f/∂s at (s, tk) with tk in kelvin.
func (sf *Surface) Deriv(s, tk float64) float64 {
	_, d := sf.AtDeriv(s, tk)
	return d
}

// AtDeriv returns At(s, tk) and Deriv(s, tk), bit for bit, finding the grid segment and
// the temperature bracket once.
func (sf *Surface) AtDeriv(s, tk float64) (v, d float64) {
	j, w := bracket(sf.temps, tk)
	x := sf.x
	if !(s > x[0] && s < x[len(x)-1]) {
		return sf.outer(s, j, w)
	}
	k := sf.search(s)
	ds := s - x[k]
	i := k*len(sf.temps) + j
	v, d = sf.p[i].atDeriv(ds)
	if w != 0 {
		v1, d1 := sf.p[i+1].atDeriv(ds)
		v, d = v+w*(v1-v), d+w*(d1-d)
	}
	return v, d
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
	out.SOC = append([]float64(nil), sf.x...)
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

// MaxGroup is the largest number of surfaces a [Group] holds.
const MaxGroup = 8

// Group is a set of surfaces on one grid (the same state-of-charge knots and the same
// temperatures) evaluated together: one segment search and one temperature bracket
// serve every member, and the pieces that one lookup blends lie side by side. Its
// values are those of the members' [Surface.At], bit for bit. Build it with
// [NewGroup]; it is immutable and safe for concurrent use.
type Group struct {
	grid
	temps   []float64
	members []*Surface
	// p[(k·len(temps)+j)·len(members)+m] holds piece k of member m's curves j and
	// j+1 (j again for the last temperature): everything one lookup blends lies in
	// len(members) consecutive pairs.
	p []piecePair
}

// piecePair is the piece of one segment at two neighbouring temperatures.
type piecePair [2]poly

// NewGroup returns the group of the given surfaces, and false if there are none, more
// than [MaxGroup], a nil one, or two that do not share their knots and temperatures
// exactly. The surfaces are kept, not copied; they are immutable.
func NewGroup(members ...*Surface) (*Group, bool) {
	if len(members) == 0 || len(members) > MaxGroup {
		return nil, false
	}
	for _, sf := range members {
		if sf == nil || !equal(sf.x, members[0].x) || !equal(sf.temps, members[0].temps) {
			return nil, false
		}
	}
	first := members[0]
	nt, nm := len(first.temps), len(members)
	g := &Group{grid: first.grid, temps: first.temps, members: append([]*Surface(nil), members...)}
	g.p = make([]piecePair, (len(g.x)-1)*nt*nm)
	for m, sf := range members {
		for k := range len(g.x) - 1 {
			for j := range nt {
				g.p[(k*nt+j)*nm+m] = piecePair{sf.p[k*nt+j], sf.p[k*nt+min(j+1, nt-1)]}
			}
		}
	}
	return g, true
}

func equal(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// Len returns the number of surfaces in the group.
func (g *Group) Len() int { return len(g.members) }

// Member returns the m-th surface of the group.
func (g *Group) Member(m int) *Surface { return g.members[m] }

// At writes f_m(s, tk) of every member m into dst[m] (tk in kelvin), the same values
// as the members' [Surface.At]. It panics if dst is shorter than [Group.Len]. It does
// not allocate.
func (g *Group) At(dst []float64, s, tk float64) {
	nm := len(g.members)
	if len(dst) < nm {
		panic("table: Group.At destination too short")
	}
	dst = dst[:nm]
	x := g.x
	if !(s > x[0] && s < x[len(x)-1]) {
		for m, sf := range g.members {
			dst[m] = sf.At(s, tk)
		}
		return
	}
	j, w := bracket(g.temps, tk)
	k := g.search(s)
	ds := s - x[k]
	p := g.p[(k*len(g.temps)+j)*nm:][:len(dst)]
	if w == 0 {
		for m := range p {
			dst[m] = p[m][0].at(ds)
		}
		return
	}
	for m := range p {
		v := p[m][0].at(ds)
		dst[m] = v + w*(p[m][1].at(ds)-v)
	}
}
