package fit

import (
	"errors"
	"math"

	"gonum.org/v1/gonum/mat"
)

// lsq is a nonlinear least-squares problem: minimise ½‖r(x)‖² over x ∈ ℝᵖ, where
// resid writes the n residuals for x into dst.
type lsq struct {
	n, p  int
	resid func(dst, x []float64)
}

// lmResult is the outcome of [levenbergMarquardt].
type lmResult struct {
	X          []float64 // solution
	SSR        float64   // sum of squared residuals at X
	Cov        []float64 // p×p row-major covariance of X (s²·(JᵀJ)⁻¹), nil if singular
	Iterations int
	Evals      int
}

var errNotFinite = errors.New("fit: residuals are not finite at the starting point")

// levenbergMarquardt minimises the problem from x0 by the Levenberg–Marquardt method
// (K. Levenberg, Q. Appl. Math. 2:164–168, 1944; D. W. Marquardt, J. SIAM 11(2):431–441,
// 1963) with Marquardt's diagonal scaling. Each step solves the damped linear
// least-squares problem [J; √λ·D]·δ = [−r; 0] by QR factorisation (never the normal
// equations), and the Jacobian is formed by forward differences with step
// h = 1e-6·max(1, |xⱼ|). The covariance at the solution is s²·(JᵀJ)⁻¹ with
// s² = SSR/(n−p), computed by a Cholesky factorisation of JᵀJ. It is deterministic.
func levenbergMarquardt(pr lsq, x0 []float64, maxIter int) (lmResult, error) {
	n, p := pr.n, pr.p
	x := append([]float64(nil), x0...)
	r := make([]float64, n)
	rt := make([]float64, n)
	xt := make([]float64, p)
	jac := mat.NewDense(n, p, nil)
	aug := mat.NewDense(n+p, p, nil)
	rhs := mat.NewDense(n+p, 1, nil)
	var qr mat.QR
	var step mat.Dense
	res := lmResult{}

	pr.resid(r, x)
	res.Evals++
	ssr := sumSq(r)
	if math.IsNaN(ssr) || math.IsInf(ssr, 0) {
		return res, errNotFinite
	}
	jacobian := func() {
		for j := range p {
			h := 1e-6 * math.Max(1, math.Abs(x[j]))
			copy(xt, x)
			xt[j] += h
			pr.resid(rt, xt)
			res.Evals++
			for i := range n {
				jac.Set(i, j, (rt[i]-r[i])/h)
			}
		}
	}
	lambda := 1e-3
	diag := make([]float64, p)
	for it := 0; it < maxIter; it++ {
		res.Iterations = it + 1
		jacobian()
		for j := range p {
			var s float64
			for i := range n {
				v := jac.At(i, j)
				s += v * v
			}
			diag[j] = math.Max(diag[j], math.Sqrt(s)) // Moré's non-decreasing scaling
		}
		improved := false
		for range 30 {
			aug.Zero()
			for i := range n {
				for j := range p {
					aug.Set(i, j, jac.At(i, j))
				}
				rhs.Set(i, 0, -r[i])
			}
			sl := math.Sqrt(lambda)
			for j := range p {
				d := diag[j]
				if d == 0 {
					d = 1
				}
				aug.Set(n+j, j, sl*d)
				rhs.Set(n+j, 0, 0)
			}
			qr.Factorize(aug)
			if err := qr.SolveTo(&step, false, rhs); err != nil {
				lambda *= 10
				continue
			}
			for j := range p {
				xt[j] = x[j] + step.At(j, 0)
			}
			pr.resid(rt, xt)
			res.Evals++
			st := sumSq(rt)
			if st < ssr && !math.IsNaN(st) {
				dx := 0.0
				for j := range p {
					dx = math.Max(dx, math.Abs(step.At(j, 0))/math.Max(1, math.Abs(x[j])))
				}
				rel := (ssr - st) / math.Max(ssr, 1e-300)
				copy(x, xt)
				r, rt = rt, r
				ssr = st
				lambda = math.Max(lambda/10, 1e-12)
				improved = true
				if rel < 1e-10 || dx < 1e-9 {
					res.X, res.SSR = x, ssr
					jacobian()
					res.Cov = covariance(jac, ssr, n, p)
					return res, nil
				}
				break
			}
			lambda *= 10
			if lambda > 1e12 {
				break
			}
		}
		if !improved {
			break // no downhill step at any damping: a (local) minimum to working precision
		}
	}
	res.X, res.SSR = x, ssr
	jacobian()
	res.Cov = covariance(jac, ssr, n, p)
	return res, nil
}

// covariance returns s²·(JᵀJ)⁻¹ row-major, or nil when JᵀJ is singular or n ≤ p.
func covariance(jac *mat.Dense, ssr float64, n, p int) []float64 {
	if n <= p {
		return nil
	}
	var jtj mat.SymDense
	jtj.SymOuterK(1, jac.T())
	var ch mat.Cholesky
	if !ch.Factorize(&jtj) {
		return nil
	}
	if ch.Cond() > 1e14 {
		return nil
	}
	var inv mat.SymDense
	if err := ch.InverseTo(&inv); err != nil {
		return nil
	}
	s2 := ssr / float64(n-p)
	out := make([]float64, p*p)
	for i := range p {
		for j := range p {
			out[i*p+j] = s2 * inv.At(i, j)
		}
	}
	return out
}

func sumSq(r []float64) float64 {
	var s float64
	for _, v := range r {
		s += v * v
	}
	return s
}
