package ageing

import (
	"errors"
	"math"

	"gonum.org/v1/gonum/mat"
)

// robustFit is a trend law fitted by iteratively reweighted least squares.
type robustFit struct {
	params     []float64
	weights    []float64 // final weights, 0 for rejected points
	resid      []float64 // q − trend at every point
	sigma      float64   // residual standard deviation (weighted, dof-corrected)
	rss        float64   // weighted residual sum of squares
	nEff       float64   // sum of weights
	iterations int
}

// maxReweight bounds the reweighting iterations; the biweight usually settles in under 20.
const maxReweight = 50

// fitRobust fits l to (u, q) with the prior weights w0 (0 drops a point). Unless
// leastSquares is set, it then reweights with Tukey's biweight on the residuals scaled
// by their MAD (iteratively reweighted least squares; Holland and Welsch 1977), starting
// from the least-squares fit, until the parameters settle.
func fitRobust(l *law, u, q, w0 []float64, leastSquares bool) (robustFit, error) {
	n := len(u)
	f := robustFit{
		params:  make([]float64, l.nParams()),
		weights: append([]float64(nil), w0...),
		resid:   make([]float64, n),
	}
	if _, err := l.fit(f.params, u, q, f.weights); err != nil {
		return f, err
	}
	if !leastSquares {
		prev := make([]float64, len(f.params))
		abs := make([]float64, 0, n)
		w := make([]float64, n)
		for f.iterations = 1; f.iterations <= maxReweight; f.iterations++ {
			abs = abs[:0]
			for i := range u {
				f.resid[i] = q[i] - l.eval(f.params, u[i])
				if w0[i] > 0 {
					abs = append(abs, math.Abs(f.resid[i]))
				}
			}
			scale := madScale * median(nil, abs)
			if scale == 0 {
				break
			}
			for i := range u {
				w[i] = w0[i] * biweight(f.resid[i]/(biweightC*scale))
			}
			copy(prev, f.params)
			var err error
			if l.shaped {
				_, err = l.fitNear(f.params, u, q, w, prev[l.nLin])
			} else {
				_, err = l.fit(f.params, u, q, w)
			}
			if err != nil {
				// Too many points rejected for this law: keep the previous solution.
				copy(f.params, prev)
				break
			}
			copy(f.weights, w)
			settled := true
			for j := range prev {
				if math.Abs(f.params[j]-prev[j]) > 1e-7*(1+math.Abs(prev[j])) {
					settled = false
				}
			}
			if settled {
				break
			}
		}
	}
	f.rss, f.nEff = 0, 0
	for i := range u {
		f.resid[i] = q[i] - l.eval(f.params, u[i])
		f.rss += f.weights[i] * f.resid[i] * f.resid[i]
		f.nEff += f.weights[i]
	}
	dof := f.nEff - float64(len(f.params))
	if dof < 1 {
		return f, errors.New("too few points keep weight after reweighting")
	}
	f.sigma = math.Sqrt(f.rss / dof)
	return f, nil
}

// criterion returns AICc or BIC of the fit, with the sum of weights as the sample size
// and the residual variance counted as a parameter. Comparing robust fits this way is an
// approximation (the weights differ slightly between laws); it is used only to rank laws.
func (f *robustFit) criterion(c Criterion) float64 {
	n := f.nEff
	k := float64(len(f.params) + 1)
	ll := n * math.Log(math.Max(f.rss, 1e-300)/n)
	if c == BIC {
		return ll + k*math.Log(n)
	}
	if n-k-1 <= 0 {
		return math.Inf(1)
	}
	return ll + 2*k + 2*k*(k+1)/(n-k-1)
}

// covariance returns σ²·(JᵀWJ)⁻¹ for the fitted parameters, J the Jacobian of the law
// at the data. It factorises √W·J by QR and inverts through the Cholesky factor RᵀR.
func (f *robustFit) covariance(l *law, u []float64) (*mat.SymDense, error) {
	k := len(f.params)
	rows := 0
	for _, w := range f.weights {
		if w > 0 {
			rows++
		}
	}
	j := mat.NewDense(rows, k, nil)
	g := make([]float64, k)
	r := 0
	for i := range u {
		if f.weights[i] <= 0 {
			continue
		}
		l.grad(g, f.params, u[i])
		s := math.Sqrt(f.weights[i])
		for c := range k {
			j.Set(r, c, s*g[c])
		}
		r++
	}
	var qr mat.QR
	qr.Factorize(j)
	var rf mat.Dense
	qr.RTo(&rf)
	upper := mat.NewTriDense(k, mat.Upper, nil)
	for a := range k {
		sign := 1.0
		if rf.At(a, a) < 0 {
			sign = -1 // RᵀR is unchanged by flipping a row's sign; Cholesky wants a positive diagonal
		}
		for b := a; b < k; b++ {
			upper.SetTri(a, b, sign*rf.At(a, b))
		}
	}
	var ch mat.Cholesky
	ch.SetFromU(upper)
	if c := ch.Cond(); !(c < 1e14) {
		return nil, errors.New("trend parameters are not identifiable from these points (ill-conditioned fit)")
	}
	var cov mat.SymDense
	if err := ch.InverseTo(&cov); err != nil {
		return nil, err
	}
	cov.ScaleSym(f.sigma*f.sigma, &cov)
	return &cov, nil
}

// forwardScore fits l to the points at or before split and returns the weighted mean
// absolute error of its prediction at the later points, weighting each by w (the full
// fit's robust weights, so rejected outliers do not count).
func forwardScore(l *law, u, q, w0, w []float64, cycles []float64, split float64, leastSquares bool) (float64, error) {
	head := make([]float64, len(u))
	nHead := 0
	for i := range u {
		if cycles[i] <= split {
			head[i] = w0[i]
			if w0[i] > 0 {
				nHead++
			}
		}
	}
	if nHead < l.nParams()+3 {
		return math.Inf(1), ErrTooFew
	}
	f, err := fitRobust(l, u, q, head, leastSquares)
	if err != nil {
		return math.Inf(1), err
	}
	var s, sw float64
	for i := range u {
		if cycles[i] > split && w[i] > 0 {
			s += w[i] * math.Abs(q[i]-l.eval(f.params, u[i]))
			sw += w[i]
		}
	}
	if sw == 0 {
		return math.Inf(1), ErrTooFew
	}
	return s / sw, nil
}
