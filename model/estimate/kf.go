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
}

// reset makes a the n×n identity.
func (a *trans) reset(n int) {
	for i := range n {
		a.d[i] = 1
	}
	a.m = 0
}

// set records the off-diagonal entry A[r][c] = v (r ≠ c).
func (a *trans) set(r, c int, v float64) {
	if v == 0 {
		return
	}
	a.r[a.m], a.c[a.m], a.v[a.m] = r, c, v
	a.m++
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
// independent process noise q. The cost is O(n²) plus O(n) per off-diagonal entry.
func (f *kf) predict(a *trans, b *vec, sigma2 float64, q *vec) {
	n := f.n
	// M = A·P: row i is d[i]·P[i] plus v·P[c] for each entry (i, c, v).
	ap := &f.sc
	for i := range n {
		api, pi, di := ap[i][:n], f.p[i][:n], a.d[i]
		for j := range api {
			api[j] = di * pi[j]
		}
	}
	for e := range a.m {
		api, pc, v := ap[a.r[e]][:n], f.p[a.c[e]][:n], a.v[e]
		for j := range api {
			api[j] += v * pc[j]
		}
	}
	// P = M·Aᵀ: column j is d[j]·M[:, j] plus v·M[:, c] for each entry (j, c, v).
	for i := range n {
		pi, api := f.p[i][:n], ap[i][:n]
		for j := range pi {
			pi[j] = api[j] * a.d[j]
		}
	}
	for e := range a.m {
		r, c, v := a.r[e], a.c[e], a.v[e]
		for i := range n {
			f.p[i][r] += v * ap[i][c]
		}
	}
	bs := b[:n]
	for i := range n {
		pi, sbi := f.p[i][:n], sigma2*bs[i]
		for j := range pi {
			pi[j] += sbi * bs[j]
		}
		pi[i] += q[i]
	}
	f.symmetrise()
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
// for Stochastic Processes, 1968 [from memory]), evaluated as two rank-one updates:
// M = P − K·(P·Hᵀ)ᵀ = (I−K·H)·P, then P ← M − (M·Hᵀ)·Kᵀ + r·K·Kᵀ, which is the same
// product without an n³ multiplication. The result is symmetrised.
//
// s and ph must be innovationVar(h, r), which the caller has computed for its gate.
func (f *kf) update(x *vec, h *vec, r, e, s float64, ph *vec) (k vec) {
	n := f.n
	ks, phs, hs := k[:n], ph[:n], h[:n]
	for i := range ks {
		ks[i] = phs[i] / s
		x[i] += ks[i] * e
	}
	// M = P − K·phᵀ, where phᵀ = H·P (P symmetric); w = M·Hᵀ.
	var w vec
	for i := range n {
		pi := f.p[i][:n]
		ki := ks[i]
		var v float64
		for j := range pi {
			pi[j] -= ki * phs[j]
			v += pi[j] * hs[j]
		}
		w[i] = v
	}
	// P ← M − w·Kᵀ + r·K·Kᵀ, symmetrised.
	for i := range n {
		pi := f.p[i][:n]
		wi, rki := w[i], r*ks[i]
		for j := range pi {
			pi[j] += -wi*ks[j] + rki*ks[j]
		}
	}
	f.symmetrise()
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
// attempting a Cholesky factorisation of a copy.
func (f *kf) positiveDefinite() bool {
	n := f.n
	l := &f.sc
	for j := range n {
		d := f.p[j][j]
		for k := range j {
			d -= l[j][k] * l[j][k]
		}
		if !(d > 0) || math.IsInf(d, 0) {
			return false
		}
		l[j][j] = math.Sqrt(d)
		for i := j + 1; i < n; i++ {
			v := f.p[i][j]
			for k := range j {
				v -= l[i][k] * l[j][k]
			}
			l[i][j] = v / l[j][j]
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
