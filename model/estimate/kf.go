package estimate

import "math"

// maxDim is the largest state dimension: SOC, three RC branches, hysteresis, and the
// two health states.
const maxDim = 7

type (
	vec [maxDim]float64
	mat [maxDim][maxDim]float64
)

// kf is a minimal Kalman filter core on a fixed-size state of dimension n ≤ maxDim with
// a scalar measurement. It holds the covariance only; the state mean is advanced by the
// caller (the EKF uses the nonlinear model for it). It is the textbook filter (Kalman,
// Trans. ASME J. Basic Eng. 82:35–45, 1960) written without allocation.
type kf struct {
	n  int
	p  mat
	sc mat // scratch, overwritten before it is read
}

// maxOff is the largest number of off-diagonal entries of a transition matrix: one
// SOC column entry per RC branch, and for the health states one per RC branch plus two.
const maxOff = 2*3 + 2

// trans is a state-transition matrix stored as its diagonal plus a short list of
// off-diagonal entries, which is how sparse the battery model's Jacobian is.
type trans struct {
	d    vec // diagonal
	m    int // number of off-diagonal entries
	r, c [maxOff]int
	v    [maxOff]float64
	col  int // the column holding every off-diagonal entry; noCol if none, mixedCols if several
}

// Values of trans.col.
const (
	noCol     = -1
	mixedCols = -2
)

// reset makes a the n×n identity.
func (a *trans) reset(n int) {
	for i := range n {
		a.d[i] = 1
	}
	a.m = 0
	a.col = noCol
}

// set records the off-diagonal entry A[r][c] = v (r ≠ c).
func (a *trans) set(r, c int, v float64) {
	if v == 0 {
		return
	}
	a.r[a.m], a.c[a.m], a.v[a.m] = r, c, v
	a.m++
	switch a.col {
	case noCol:
		a.col = c
	case c, mixedCols:
	default:
		a.col = mixedCols
	}
}

// at returns A[i][j] (for tests).
func (a *trans) at(i, j int) float64 {
	if i == j {
		return a.d[i]
	}
	var s float64
	for e := range a.m {
		if a.r[e] == i && a.c[e] == j {
			s += a.v[e]
		}
	}
	return s
}

// predict sets P ← A·P·Aᵀ + σ²·b·bᵀ + diag(q): the covariance through the transition
// A, plus the noise of an input entering through the column b with variance σ², plus
// independent process noise q. The upper triangle is computed and mirrored, so P stays
// exactly symmetric.
//
// The battery model's A is its diagonal D plus entries in the SOC column only, unless
// the health states are estimated: A = D + u·e_cᵀ with u zero at c. Then
// A·P·Aᵀ = D·P·D + y·uᵀ + u·yᵀ + P_cc·u·uᵀ with y = D·P·e_c, that is
// D·P·D + z·uᵀ + u·zᵀ with z = y + (P_cc/2)·u, and P is updated in one pass over its
// upper triangle. Any other A takes the general sparse product (predictSparse).
func (f *kf) predict(a *trans, b *vec, sigma2 float64, q *vec) {
	if a.col == mixedCols {
		f.predictSparse(a, b, sigma2, q)
		return
	}
	n := min(f.n, maxDim)
	p := &f.p
	var u, z vec
	if c := a.col; c >= 0 {
		for e := range a.m {
			u[a.r[e]] += a.v[e]
		}
		half := p[c][c] / 2
		for i := range n {
			z[i] = a.d[i]*p[i][c] + half*u[i]
		}
	}
	for i := range n {
		pi, di, zi, ui, sbi := &p[i], a.d[i], z[i], u[i], sigma2*b[i]
		for j := i; j < n; j++ {
			v := di*a.d[j]*pi[j] + (zi*u[j] + ui*z[j]) + sbi*b[j]
			pi[j], p[j][i] = v, v
		}
		pi[i] += q[i]
	}
}

// predictSparse is predict for any sparse A: M = A·P, then P = M·Aᵀ. The cost is
// O(n²) plus O(n) per off-diagonal entry.
func (f *kf) predictSparse(a *trans, b *vec, sigma2 float64, q *vec) {
	n := min(f.n, maxDim)
	p, m := &f.p, &f.sc
	// M = A·P: row i is d[i]·P[i] plus v·P[c] for each entry (i, c, v).
	for i := range n {
		mi, pi, di := &m[i], &p[i], a.d[i]
		for j := range n {
			mi[j] = di * pi[j]
		}
	}
	for e := range a.m {
		mr, pc, v := &m[a.r[e]], &p[a.c[e]], a.v[e]
		for j := range n {
			mr[j] += v * pc[j]
		}
	}
	// P = M·Aᵀ: column j is d[j]·M[:, j] plus v·M[:, c] for each entry (j, c, v).
	for i := range n {
		pi, mi := &p[i], &m[i]
		for j := i; j < n; j++ {
			pi[j] = mi[j] * a.d[j]
		}
	}
	for e := range a.m {
		r, c, v := a.r[e], a.c[e], a.v[e]
		for i := range min(r+1, n) {
			p[i][r] += v * m[i][c]
		}
	}
	for i := range n {
		pi, sbi := &p[i], sigma2*b[i]
		for j := i; j < n; j++ {
			pi[j] += sbi * b[j]
		}
		pi[i] += q[i]
		for j := i + 1; j < n; j++ {
			p[j][i] = pi[j]
		}
	}
}

// innovationVar returns H·P·Hᵀ + r and P·Hᵀ.
func (f *kf) innovationVar(h *vec, r float64) (s float64, ph vec) {
	n := f.n
	hs := h[:n]
	for i := range n {
		var v float64
		for k, pik := range f.p[i][:n] {
			v += pik * hs[k]
		}
		ph[i] = v
		s += hs[i] * v
	}
	return s + r, ph
}

// update applies a scalar measurement with row h, noise variance r and innovation e to
// the state mean x (dimension n) and the covariance. It returns the gain. The covariance
// follows the Joseph form P ← (I−K·H)·P·(I−K·H)ᵀ + K·r·Kᵀ (Bucy and Joseph, Filtering
// for Stochastic Processes, 1968 [from memory]), evaluated as two rank-one updates
// without an n³ product: with ph = P·Hᵀ, M = (I−K·H)·P = P − K·phᵀ and
// w = M·Hᵀ = (I−K·H)·ph = ph − K·(H·ph), P ← M·(I−K·H)ᵀ + r·K·Kᵀ = M − w·Kᵀ + r·K·Kᵀ.
// Only the upper triangle is computed, and mirrored, so P stays exactly symmetric.
//
// s and ph must be innovationVar(h, r), which the caller has computed for its gate.
func (f *kf) update(x *vec, h *vec, r, e, s float64, ph *vec) (k vec) {
	n := min(f.n, maxDim)
	p := &f.p
	var hph float64
	for i := range n {
		k[i] = ph[i] / s
		x[i] += k[i] * e
		hph += h[i] * ph[i]
	}
	for i := range n {
		pi, ki, phi := &p[i], k[i], ph[i]
		wi, rki := phi-ki*hph, r*ki
		for j := i; j < n; j++ {
			v := (pi[j] - ki*ph[j]) + (-wi*k[j] + rki*k[j])
			pi[j], p[j][i] = v, v
		}
	}
	return k
}

// symmetrise replaces P by (P + Pᵀ)/2.
func (f *kf) symmetrise() {
	for i := range f.n {
		for j := i + 1; j < f.n; j++ {
			m := 0.5 * (f.p[i][j] + f.p[j][i])
			f.p[i][j], f.p[j][i] = m, m
		}
	}
}

// positiveDefinite reports whether P is finite and symmetric positive definite, by
// attempting a Cholesky factorisation P = L·Lᵀ into scratch space. Only the lower
// triangle of P is read; the filter keeps P exactly symmetric.
func (f *kf) positiveDefinite() bool {
	n := min(f.n, maxDim)
	l := &f.sc
	for j := range n {
		lj, pj := &l[j], &f.p[j]
		d := pj[j]
		for k := range j {
			d -= lj[k] * lj[k]
		}
		if !(d > 0 && d <= math.MaxFloat64) {
			return false
		}
		ljj := math.Sqrt(d)
		lj[j] = ljj
		for i := j + 1; i < n; i++ {
			li := &l[i]
			v := f.p[i][j]
			for k := range j {
				v -= li[k] * lj[k]
			}
			li[j] = v / ljj
		}
	}
	return true
}

// repair makes P usable again after a numerical failure: symmetric, with every
// variance at least floor[i] and every correlation coefficient shrunk inside ±0.999.
// If that still fails, P becomes its (floored) diagonal.
func (f *kf) repair(floor *vec) {
	n := f.n
	f.symmetrise()
	for i := range n {
		d := f.p[i][i]
		if !(d >= floor[i]) || math.IsInf(d, 0) {
			d = floor[i]
			if math.IsInf(f.p[i][i], 0) {
				d = 1
			}
			f.p[i][i] = d
		}
	}
	for i := range n {
		for j := i + 1; j < n; j++ {
			c := f.p[i][j]
			lim := 0.999 * math.Sqrt(f.p[i][i]*f.p[j][j])
			if !(math.Abs(c) <= lim) {
				c = math.Copysign(lim, c)
				if math.IsNaN(f.p[i][j]) {
					c = 0
				}
			}
			f.p[i][j], f.p[j][i] = c, c
		}
	}
	if f.positiveDefinite() {
		return
	}
	for i := range n {
		for j := range n {
			if i != j {
				f.p[i][j] = 0
			}
		}
	}
}
