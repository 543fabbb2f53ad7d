package ageing

import (
	"errors"
	"fmt"
	"math"
)

// Model names a capacity-fade trend law. Each law is written in the scaled cycle index
// u = n / [Result.Scale] (n the cycle index, Scale the largest fitted cycle index) so
// that its parameters are of order one and the least-squares problem is well
// conditioned. Params in a [Result] are listed in the order given here.
type Model string

// The trend laws [Project] can fit. The set is closed.
const (
	// Linear is q = a + b·u: a constant fade per cycle (common practice for the middle
	// of life).
	Linear Model = "linear"
	// SquareRoot is q = a + b·√u: fade that slows as a passivating layer thickens, the
	// charge-throughput term of Schmalstieg et al., J. Power Sources 257:325–334, 2014
	// (their β·√Q with throughput proportional to cycles; ../shared/REFERENCE.md §2.11).
	SquareRoot Model = "sqrt"
	// PowerLaw is q = a + b·u^z with 0.05 ≤ z ≤ 3; it contains Linear (z = 1) and
	// SquareRoot (z = 0.5) and, with z > 1, a fade that speeds up. Params are a, b, z.
	PowerLaw Model = "power"
	// Exponential is q = a·exp(c·u), with −20 ≤ c ≤ 20 (a constant fractional fade per
	// cycle). Params are a, c.
	Exponential Model = "exponential"
)

// AllModels lists every [Model], in the order [Project] tries them by default.
var AllModels = []Model{Linear, SquareRoot, PowerLaw, Exponential}

// law is one trend law written as q = Σⱼ pⱼ·gⱼ(u; c): linear in its coefficients once the
// shape parameter c (if any) is fixed, so it is fitted by weighted least squares for a
// given c, and c is found by a one-dimensional search of the residual sum of squares (a
// variable projection; Golub and Pereyra, SIAM J. Numer. Anal. 10(2):413–432, 1973).
type law struct {
	model   Model
	nLin    int     // number of linear coefficients (1 or 2)
	shaped  bool    // whether a shape parameter c exists (appended after the coefficients)
	lo, hi  float64 // search interval of c
	logGrid bool    // search c on a logarithmic grid
	// basis returns the basis functions at u for shape c (g1 is unused when nLin is 1).
	basis func(u, c float64) (g0, g1 float64)
	// g is scratch for the varying basis column at every point (owned by this law value,
	// so a law must not be shared between goroutines).
	g []float64
}

// nParams returns the number of fitted parameters.
func (l *law) nParams() int {
	if l.shaped {
		return l.nLin + 1
	}
	return l.nLin
}

func lawOf(m Model) (*law, error) {
	switch m {
	case Linear:
		return &law{model: m, nLin: 2, basis: func(u, _ float64) (float64, float64) { return 1, u }}, nil
	case SquareRoot:
		return &law{model: m, nLin: 2, basis: func(u, _ float64) (float64, float64) { return 1, math.Sqrt(u) }}, nil
	case PowerLaw:
		return &law{model: m, nLin: 2, shaped: true, lo: 0.05, hi: 3, logGrid: true,
			basis: func(u, c float64) (float64, float64) { return 1, math.Pow(u, c) }}, nil
	case Exponential:
		return &law{model: m, nLin: 1, shaped: true, lo: -20, hi: 20,
			basis: func(u, c float64) (float64, float64) { return math.Exp(c * u), 0 }}, nil
	}
	return nil, fmt.Errorf("unknown model %q", m)
}

// eval returns the law at u for parameters p.
func (l *law) eval(p []float64, u float64) float64 {
	c := 0.0
	if l.shaped {
		c = p[l.nLin]
	}
	g0, g1 := l.basis(u, c)
	if l.nLin == 1 {
		return p[0] * g0
	}
	return p[0]*g0 + p[1]*g1
}

// grad writes ∂q/∂p at u into dst (length nParams).
func (l *law) grad(dst, p []float64, u float64) {
	var c float64
	if l.shaped {
		c = p[l.nLin]
	}
	g0, g1 := l.basis(u, c)
	dst[0] = g0
	if l.nLin == 2 {
		dst[1] = g1
	}
	if !l.shaped {
		return
	}
	switch l.model {
	case PowerLaw:
		// ∂(b·u^z)/∂z = b·u^z·ln u, which tends to 0 as u → 0 for z > 0.
		if u > 0 {
			dst[2] = p[1] * math.Pow(u, c) * math.Log(u)
		} else {
			dst[2] = 0
		}
	case Exponential:
		dst[1] = p[0] * u * math.Exp(c*u)
	}
}

// errRank reports a design matrix without full column rank.
var errRank = errors.New("trend fit is rank deficient (too few distinct cycle indices)")

// linearFit solves the weighted least-squares problem for the coefficients of l at
// shape c over the points with positive weight, writing them into p[:nLin] (and c into
// the shape slot), and returns the weighted residual sum of squares. It allocates
// nothing: with one column g the solution is Σwgq/Σwg²; with the columns [1, g] it is
// the modified Gram–Schmidt QR of the design, which amounts to centring g and q on their
// weighted means (a numerically stable two-pass computation; Björck, "Numerical Methods
// for Least Squares Problems", SIAM 1996, §2.4).
func (l *law) linearFit(p, u, q, w []float64, c float64) (float64, error) {
	if cap(l.g) < len(u) {
		l.g = make([]float64, len(u))
	}
	g := l.g[:len(u)]
	var rss float64
	switch l.nLin {
	case 1:
		var sgg, sgq float64
		for i := range u {
			if w[i] <= 0 {
				continue
			}
			g[i], _ = l.basis(u[i], c)
			sgg += w[i] * g[i] * g[i]
			sgq += w[i] * g[i] * q[i]
		}
		if !(sgg > 0) || math.IsInf(sgg, 0) {
			return 0, errRank
		}
		p[0] = sgq / sgg
		for i := range u {
			if w[i] > 0 {
				d := q[i] - p[0]*g[i]
				rss += w[i] * d * d
			}
		}
	case 2:
		var sw, sg, sq float64
		for i := range u {
			if w[i] <= 0 {
				continue
			}
			_, g[i] = l.basis(u[i], c)
			sw += w[i]
			sg += w[i] * g[i]
			sq += w[i] * q[i]
		}
		if !(sw > 0) {
			return 0, errRank
		}
		mg, mq := sg/sw, sq/sw
		var sgg, sgq float64
		for i := range u {
			if w[i] > 0 {
				dg := g[i] - mg
				sgg += w[i] * dg * dg
				sgq += w[i] * dg * (q[i] - mq)
			}
		}
		// A column that is constant to rounding over the points cannot be separated from
		// the intercept.
		if !(sgg > 1e-13*sw*(mg*mg+1)) || math.IsInf(sgg, 0) {
			return 0, errRank
		}
		p[1] = sgq / sgg
		p[0] = mq - p[1]*mg
		for i := range u {
			if w[i] > 0 {
				d := q[i] - p[0] - p[1]*g[i]
				rss += w[i] * d * d
			}
		}
	}
	if l.shaped {
		p[l.nLin] = c
	}
	if math.IsNaN(rss) || math.IsInf(rss, 0) {
		return 0, errRank
	}
	return rss, nil
}

// gridPoints is the size of the grid on which the shape parameter is first located.
const gridPoints = 48

// gridAt returns the k-th grid value of the shape parameter.
func (l *law) gridAt(k int) float64 {
	t := float64(k) / (gridPoints - 1)
	if l.logGrid {
		return l.lo * math.Pow(l.hi/l.lo, t)
	}
	return l.lo + (l.hi-l.lo)*t
}

// fit solves the weighted least-squares problem for all parameters of l, writing them
// into p (length nParams), and returns the weighted residual sum of squares. The shape
// parameter is located on a grid of gridPoints values and refined by golden-section
// search within the neighbouring grid cells, so a local minimum elsewhere is avoided as
// long as the grid resolves it.
func (l *law) fit(p, u, q, w []float64) (float64, error) {
	if !l.shaped {
		return l.linearFit(p, u, q, w, 0)
	}
	best, bestK := math.Inf(1), -1
	for k := range gridPoints {
		rss, err := l.linearFit(p, u, q, w, l.gridAt(k))
		if err == nil && rss < best {
			best, bestK = rss, k
		}
	}
	if bestK < 0 {
		return 0, errRank
	}
	return l.refine(p, u, q, w, l.gridAt(max(bestK-1, 0)), l.gridAt(min(bestK+1, gridPoints-1)), l.gridAt(bestK))
}

// fitNear is fit for weights close to those of a previous solution with shape c0: it
// searches only the two grid cells around c0, and falls back to the full grid if the
// minimum lands on the edge of that bracket.
func (l *law) fitNear(p, u, q, w []float64, c0 float64) (float64, error) {
	if !l.shaped {
		return l.linearFit(p, u, q, w, 0)
	}
	var a, b float64
	if l.logGrid {
		r := math.Pow(l.hi/l.lo, 1.0/(gridPoints-1))
		a, b = math.Max(c0/r, l.lo), math.Min(c0*r, l.hi)
	} else {
		h := (l.hi - l.lo) / (gridPoints - 1)
		a, b = math.Max(c0-h, l.lo), math.Min(c0+h, l.hi)
	}
	rss, err := l.refine(p, u, q, w, a, b, c0)
	if err != nil {
		return l.fit(p, u, q, w)
	}
	c := p[l.nLin]
	edge := 1e-6 * (math.Abs(a) + math.Abs(b) + 1e-12)
	if (c-a < edge && a > l.lo) || (b-c < edge && b < l.hi) {
		return l.fit(p, u, q, w)
	}
	return rss, nil
}

// refine minimises the residual sum of squares over the shape parameter in [a, b] by
// golden-section search (Kiefer 1953) to a relative width of 1e-7, keeping the starting
// point c0 if nothing better is found, and leaves the solution in p.
func (l *law) refine(p, u, q, w []float64, a, b, c0 float64) (float64, error) {
	f := func(c float64) float64 {
		rss, err := l.linearFit(p, u, q, w, c)
		if err != nil {
			return math.Inf(1)
		}
		return rss
	}
	const invPhi = 0.6180339887498949
	x1, x2 := b-invPhi*(b-a), a+invPhi*(b-a)
	f1, f2 := f(x1), f(x2)
	for range 200 {
		if b-a <= 1e-7*(math.Abs(a)+math.Abs(b)+1e-12) {
			break
		}
		if f1 <= f2 {
			b, x2, f2 = x2, x1, f1
			x1 = b - invPhi*(b-a)
			f1 = f(x1)
		} else {
			a, x1, f1 = x1, x2, f2
			x2 = a + invPhi*(b-a)
			f2 = f(x2)
		}
	}
	c, fc := x1, f1
	if f2 < f1 {
		c, fc = x2, f2
	}
	if f(c0) < fc {
		c = c0
	}
	return l.linearFit(p, u, q, w, c)
}
