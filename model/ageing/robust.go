package ageing

import (
	"math"
	"sort"
)

// madScale turns a median absolute deviation into a consistent estimate of the standard
// deviation of normal data: 1/Φ⁻¹(3/4) (Hampel 1974, J. Am. Stat. Assoc. 69:383–393).
const madScale = 1.482602218505602

// biweightC is the tuning constant of Tukey's biweight that gives 95 % efficiency on
// normal errors (Holland and Welsch 1977, Commun. Stat. Theory Methods 6(9):813–827).
const biweightC = 4.685

// median returns the median of v, reordering scratch (a copy of v is made into it).
// It returns NaN for an empty slice.
func median(scratch, v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	scratch = append(scratch[:0], v...)
	sort.Float64s(scratch)
	n := len(scratch)
	if n%2 == 1 {
		return scratch[n/2]
	}
	return 0.5 * (scratch[n/2-1] + scratch[n/2])
}

// hampel marks in keep the points of x that a Hampel identifier accepts: a point is an
// outlier when it lies more than t scaled MADs from the median of the window of
// half-width h around it (the window is cut at the ends of the series). A window whose
// MAD is zero flags nothing. This is the Hampel filter of Pearson (2002), "Outliers in
// process modeling and identification", IEEE Trans. Control Syst. Technol. 10(1):55–63.
func hampel(keep []bool, x []float64, h int, t float64) {
	win := make([]float64, 0, 2*h+1)
	dev := make([]float64, 0, 2*h+1)
	scratch := make([]float64, 0, 2*h+1)
	for i := range x {
		lo, hi := max(0, i-h), min(len(x), i+h+1)
		win = append(win[:0], x[lo:hi]...)
		m := median(scratch, win)
		dev = dev[:0]
		for _, v := range win {
			dev = append(dev, math.Abs(v-m))
		}
		s := madScale * median(scratch, dev)
		keep[i] = s == 0 || math.Abs(x[i]-m) <= t*s
	}
}

// biweight returns Tukey's biweight weight of a residual u already divided by c·scale.
func biweight(u float64) float64 {
	if math.Abs(u) >= 1 {
		return 0
	}
	a := 1 - u*u
	return a * a
}

// lag1 returns the lag-1 autocorrelation coefficient of the residuals r over the points
// with positive weight, taken in order (consecutive kept points are neighbours).
func lag1(r, w []float64) float64 {
	var num, den, prev float64
	have := false
	for i := range r {
		if w[i] <= 0 {
			continue
		}
		v := r[i] * math.Sqrt(w[i])
		den += v * v
		if have {
			num += v * prev
		}
		prev, have = v, true
	}
	if den == 0 {
		return 0
	}
	return num / den
}
