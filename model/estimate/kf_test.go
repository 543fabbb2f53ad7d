package estimate

import (
	"math"
	"testing"
)

// updateFull is update with its innovation variance computed here.
func (f *kf) updateFull(x, h *vec, r, e float64) vec {
	s, ph := f.innovationVar(h, r)
	return f.update(x, h, r, e, s, &ph)
}

// riccati returns the steady-state a-priori variance and gain of the scalar random
// walk x_k = x_{k−1} + w, z_k = x_k + v: P⁻ = (Q + √(Q² + 4QR))/2, K∞ = P⁻/(P⁻ + R)
// (REFERENCE.md E6).
func riccati(q, r float64) (pPrior, k float64) {
	pPrior = (q + math.Sqrt(q*q+4*q*r)) / 2
	return pPrior, pPrior / (pPrior + r)
}

// TestKFScalarGains checks the filter core against REFERENCE.md E6: the scalar random
// walk with Q = R = 1, P0 = 1 has gains 2/3, 5/8, 13/21, 34/55, 89/144 (ratios of
// Fibonacci numbers) and converges to K∞ = (√5 − 1)/2 = 0.6180340 with
// P⁻ = 1.6180340; with Q = 1e−6, R = 1e−4 it converges to K∞ = 0.0951249 and with
// Q = 1e−7, R = 4e−4 to 0.0156869.
func TestKFScalarGains(t *testing.T) {
	f := kf{n: 1}
	f.p[0][0] = 1
	var a trans
	a.reset(1)
	q := vec{1}
	var b vec
	h := vec{1}
	var x vec
	want := []float64{2.0 / 3, 5.0 / 8, 13.0 / 21, 34.0 / 55, 89.0 / 144} // E6
	for i, w := range want {
		f.predict(&a, &b, 0, &q)
		k := f.updateFull(&x, &h, 1, 0.5)
		if math.Abs(k[0]-w) > 1e-15 {
			t.Errorf("gain %d = %.16g; want %.16g (E6)", i+1, k[0], w)
		}
	}
	for range 100 {
		f.predict(&a, &b, 0, &q)
		f.updateFull(&x, &h, 1, 0)
	}
	f.predict(&a, &b, 0, &q)
	if got := f.p[0][0]; math.Abs(got-1.6180340) > 5e-8 {
		t.Errorf("steady P⁻ = %.8f; want 1.6180340 (E6)", got)
	}
	k := f.updateFull(&x, &h, 1, 0)
	if math.Abs(k[0]-0.6180340) > 5e-8 {
		t.Errorf("K∞ = %.8f; want 0.6180340 (E6)", k[0])
	}
	if math.Abs(f.p[0][0]-0.6180340) > 5e-8 {
		t.Errorf("steady P = %.8f; want K∞·R = 0.6180340 (E6)", f.p[0][0])
	}

	for _, c := range []struct{ q, r, k, pPrior float64 }{
		{1e-6, 1e-4, 0.0951249, 1.05125e-5}, // E6
		{1e-7, 4e-4, 0.0156869, math.NaN()}, // E6
	} {
		f := kf{n: 1}
		f.p[0][0] = 1
		qm := vec{c.q}
		var k vec
		for range 5000 {
			f.predict(&a, &b, 0, &qm)
			k = f.updateFull(&x, &h, c.r, 0)
		}
		if math.Abs(k[0]-c.k) > 5e-8 {
			t.Errorf("Q=%g R=%g: K∞ = %.8f; want %.7f (E6)", c.q, c.r, k[0], c.k)
		}
		if pp, kk := riccati(c.q, c.r); math.Abs(kk-k[0]) > 1e-12 {
			t.Errorf("Q=%g R=%g: K∞ = %.10f; Riccati closed form %.10f", c.q, c.r, k[0], kk)
		} else if !math.IsNaN(c.pPrior) && math.Abs(pp-c.pPrior)/c.pPrior > 1e-5 {
			t.Errorf("Q=%g R=%g: P⁻ closed form %.6g; want %.6g (E6)", c.q, c.r, pp, c.pPrior)
		}
	}
}

// TestKFJosephMatchesStandard checks the Joseph-form update against the textbook
// P = (I − K·H)·P⁻ on a 3-state example (they are algebraically equal for the optimal
// gain), and that the result stays symmetric positive definite.
func TestKFJosephMatchesStandard(t *testing.T) {
	f := kf{n: 3}
	f.p = mat{{0.04, 0.001, -0.0005}, {0.001, 1e-4, 2e-5}, {-0.0005, 2e-5, 9e-5}}
	h := vec{0.8, -1, -1}
	r := 1e-4
	p0 := f.p
	s, ph := f.innovationVar(&h, r)
	var x vec
	k := f.updateFull(&x, &h, r, 0.01)
	for i := range 3 {
		if math.Abs(k[i]-ph[i]/s) > 1e-15 {
			t.Errorf("K[%d] = %g; want %g", i, k[i], ph[i]/s)
		}
		for j := range 3 {
			std := p0[i][j] - k[i]*ph[j]
			if math.Abs(f.p[i][j]-std) > 1e-15 {
				t.Errorf("P[%d][%d] = %.17g; standard form %.17g", i, j, f.p[i][j], std)
			}
			if f.p[i][j] != f.p[j][i] {
				t.Errorf("P not symmetric at %d,%d", i, j)
			}
		}
	}
	if !f.positiveDefinite() {
		t.Error("P not positive definite after update")
	}
}

func TestKFRepair(t *testing.T) {
	f := kf{n: 3}
	f.p = mat{{1, 2, 0}, {2, 1, 0}, {0, 0, math.NaN()}}
	if f.positiveDefinite() {
		t.Fatal("indefinite matrix reported positive definite")
	}
	floor := vec{1e-6, 1e-6, 1e-6}
	f.repair(&floor)
	if !f.positiveDefinite() {
		t.Fatalf("repair left P = %v", f.p)
	}
}

// TestKFPredictSparse checks the sparse covariance propagation against the dense
// product A·P·Aᵀ + σ²·b·bᵀ + diag(q), for a transition with entries in several columns
// (the general product), in one column (the rank-two form the model without health
// states takes, in the SOC column and elsewhere) and in none.
func TestKFPredictSparse(t *testing.T) {
	type entry struct {
		r, c int
		v    float64
	}
	for _, tc := range []struct {
		name    string
		entries []entry
	}{
		{"mixed", []entry{{1, 0, 0.3}, {2, 0, -0.2}, {1, 5, 0.7}, {4, 3, 1.1}}},
		{"soc-column", []entry{{1, 0, 0.3}, {2, 0, -0.2}, {3, 0, 2.5}}},
		{"other-column", []entry{{0, 4, 0.3}, {5, 4, -1.2}}},
		{"diagonal", nil},
	} {
		t.Run(tc.name, func(t *testing.T) {
			var a trans
			a.reset(6)
			for i := range 6 {
				a.d[i] = 0.5 + 0.1*float64(i)
			}
			for _, e := range tc.entries {
				a.set(e.r, e.c, e.v)
			}
			checkPredict(t, &a)
		})
	}
}

// checkPredict compares kf.predict through a against the dense product.
func checkPredict(t *testing.T, a *trans) {
	t.Helper()
	const n = 6
	f := kf{n: n}
	for i := range n {
		for j := range n {
			f.p[i][j] = 0.1 / float64(1+i+j)
		}
		f.p[i][i] += 1
	}
	b := vec{0.1, -0.2, 0.3, 0, 0.05, 0}
	q := vec{1e-3, 2e-3, 0, 4e-3, 0, 1e-4}
	sigma2 := 0.25
	var dense mat
	for i := range n {
		for j := range n {
			var s float64
			for k := range n {
				for m := range n {
					s += a.at(i, k) * f.p[k][m] * a.at(j, m)
				}
			}
			s += sigma2 * b[i] * b[j]
			if i == j {
				s += q[i]
			}
			dense[i][j] = s
		}
	}
	f.predict(a, &b, sigma2, &q)
	for i := range n {
		for j := range n {
			if math.Abs(f.p[i][j]-dense[i][j]) > 1e-14 {
				t.Errorf("P[%d][%d] = %.17g; dense product %.17g", i, j, f.p[i][j], dense[i][j])
			}
			if f.p[i][j] != f.p[j][i] {
				t.Errorf("P not symmetric at %d,%d", i, j)
			}
		}
	}
}
