package ageing

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/voltcast/voltcast/model/cell"
)

// Problem is a capacity history to project: one capacity measurement per cycle index.
type Problem struct {
	// Cycles holds the cycle index of each measurement (a cycle count, an equivalent
	// full cycle count or a discharge number), finite, 0–10⁹ and strictly increasing.
	Cycles []float64
	// Capacity holds the measured capacity at each cycle index, in Ah (or any consistent
	// unit, e.g. state-of-health fractions with ReferenceAh = 1), finite, 0–10⁹.
	Capacity []float64
	// Days optionally holds the elapsed time of each measurement in days, finite and
	// non-decreasing; when set, the result also projects the day of end of life.
	Days []float64
	// ReferenceAh is the capacity that end of life is a fraction of, usually the rated
	// capacity, > 0. Zero means the initial capacity: the median of the first
	// [Settings.InitialPoints] measurements that the outlier filter keeps.
	ReferenceAh float64
}

// Criterion chooses among candidate trend laws.
type Criterion int

// Criteria for choosing the trend law. All are computed on the fitted data only.
const (
	// AICc is Akaike's information criterion with the small-sample correction of
	// Hurvich and Tsai (Biometrika 76(2):297–307, 1989). The default.
	AICc Criterion = iota
	// BIC is Schwarz's Bayesian information criterion (Ann. Stat. 6(2):461–464, 1978),
	// which penalises extra parameters more for long histories.
	BIC
	// Forward fits each law to the first two thirds of the history and scores it by the
	// weighted mean absolute error of its extrapolation over the last third (a one-split
	// rolling-origin evaluation; Tashman, Int. J. Forecasting 16(4):437–450, 2000).
	Forward
)

// String returns the criterion's name.
func (c Criterion) String() string {
	switch c {
	case AICc:
		return "aicc"
	case BIC:
		return "bic"
	case Forward:
		return "forward"
	}
	return fmt.Sprintf("Criterion(%d)", int(c))
}

// Settings tune [Project]. The zero value (or nil) selects every default.
type Settings struct {
	// EndOfLife is the fraction of the reference capacity that marks end of life, in
	// (0, 1). Zero means 0.8 (common practice; ../shared/REFERENCE.md §2.9).
	EndOfLife float64
	// Models lists the candidate laws; nil means [AllModels]. A law needs more points
	// than it has parameters plus two; laws with too few points are skipped.
	Models []Model
	// Criterion chooses the law; the zero value is [AICc].
	Criterion Criterion
	// Level is the confidence level of the interval, in (0, 1). Zero means 0.95.
	Level float64
	// InitialPoints is how many leading measurements set the initial capacity when
	// Problem.ReferenceAh is zero. Zero means 5.
	InitialPoints int
	// OutlierWindow is the half-width, in points, of the Hampel filter that removes
	// isolated spikes and dropouts before fitting. Zero means 5; negative disables it.
	OutlierWindow int
	// OutlierThreshold is the Hampel filter's threshold in robust standard deviations
	// (scaled MADs). Zero means 3.
	OutlierThreshold float64
	// LeastSquares turns off the biweight reweighting, so that every point the Hampel
	// filter keeps has full weight (ordinary least squares).
	LeastSquares bool
	// IndependentResiduals turns off the inflation of the parameter covariance for
	// serially correlated residuals (see [Result.Inflation]).
	IndependentResiduals bool
	// ParameterInterval narrows the interval to the chosen law's own confidence band.
	// By default the interval is the envelope of the bands of every law that could be
	// fitted, because the error of an extrapolation is dominated by the choice of law,
	// which the fitted data cannot settle (see the package doc).
	ParameterInterval bool
	// Horizon is the largest cycle index searched for the end-of-life crossing. Zero
	// means ten times the last fitted cycle index. Crossings beyond it are +Inf.
	Horizon float64
}

// Crossing is a projected end-of-life point with its interval, in cycle index units or
// in days. Low ≤ Value ≤ High. A value that lies beyond the search horizon is +Inf.
type Crossing struct {
	Value float64 // where the fitted trend reaches the threshold
	Low   float64 // where the lower confidence band reaches it (the earliest plausible)
	High  float64 // where the upper confidence band reaches it (the latest plausible)
}

// Candidate is the fit of one candidate law.
type Candidate struct {
	Model  Model
	Params []float64 // in the order the Model documents, for the scaled index u
	Score  float64   // value of the criterion; lower is better
	Sigma  float64   // robust residual standard deviation, in the unit of Capacity
	Cycles Crossing  // this law's projected end of life with its interval
	Err    error     // why the law could not be fitted, if it could not
}

// Result is the outcome of [Project].
type Result struct {
	Model      Model         // the chosen law
	Params     []float64     // its parameters, in the order the Model documents
	Covariance *mat.SymDense // covariance of Params (inflated, see Inflation)
	Scale      float64       // cycle index scale: the laws are written in u = n / Scale
	Sigma      float64       // robust residual standard deviation, in the unit of Capacity
	Inflation  float64       // variance factor (1+ρ)/(1−ρ) for lag-1 residual autocorrelation ρ > 0; 1 if none
	Weights    []float64     // final weight of each measurement, 0 for a rejected outlier
	Outliers   int           // number of measurements with zero weight
	Reference  float64       // reference capacity (Problem.ReferenceAh or the initial capacity)
	Threshold  float64       // end-of-life capacity, EndOfLife × Reference
	Cycles     Crossing      // projected cycle index of end of life: the chosen law's value with the interval (see Settings.ParameterInterval)
	Parameter  Crossing      // the chosen law's crossing with its own confidence band only
	Days       *Crossing     // projected elapsed day of end of life (see [Result.Day]); nil without Problem.Days
	Candidates []Candidate   // every law tried, in the order tried
	Criterion  Criterion     // the criterion used
	Level      float64       // the confidence level used
	Horizon    float64       // the largest cycle index searched
	Iterations int           // reweighting iterations of the chosen fit

	dayAt func(n float64) float64 // cycle index → day, nil without Problem.Days
}

// Day returns the elapsed day at which the battery reaches cycle index n if it goes on
// cycling at its average historical rate (the least-squares line of day against cycle
// index over the kept measurements), or NaN if the problem had no days or time did not
// advance.
func (r *Result) Day(n float64) float64 {
	if r.dayAt == nil {
		return math.NaN()
	}
	return r.dayAt(n)
}

// Capacity returns the fitted trend at cycle index n, in the unit of Problem.Capacity.
func (r *Result) Capacity(n float64) float64 {
	l, err := lawOf(r.Model)
	if err != nil {
		return math.NaN()
	}
	return l.eval(r.Params, n/r.Scale)
}

// Band returns the fitted trend at cycle index n with the half-width of its pointwise
// confidence interval at the result's Level.
func (r *Result) Band(n float64) (q, half float64) {
	l, err := lawOf(r.Model)
	if err != nil {
		return math.NaN(), math.NaN()
	}
	g := make([]float64, l.nParams())
	l.grad(g, r.Params, n/r.Scale)
	gv := mat.NewVecDense(len(g), g)
	t := r.tQuantile()
	return l.eval(r.Params, n/r.Scale), t * math.Sqrt(math.Max(mat.Inner(gv, r.Covariance, gv), 0))
}

func (r *Result) tQuantile() float64 {
	var nEff float64
	for _, w := range r.Weights {
		nEff += w
	}
	return tQuantile(nEff-float64(len(r.Params)), r.Level)
}

// ErrTooFew is matched (errors.Is) by the error for a history too short to fit.
var ErrTooFew = errors.New("too few capacity points")

const minPoints = 5

// maxMagnitude bounds capacities and cycle indices: no battery holds 10⁹ Ah or lives 10⁹
// cycles, and the bound keeps sums of squares far from overflow.
const maxMagnitude = 1e9

// Project fits a capacity-fade trend to the history p and projects where it reaches end
// of life; s may be nil for the defaults. The method is described in the package doc.
// Bad data is reported as a [*cell.FieldError]; a history with fewer than five usable
// points also matches [ErrTooFew]. The inputs are not modified.
func Project(p Problem, s *Settings) (Result, error) {
	var set Settings
	if s != nil {
		set = *s
	}
	if err := p.validate(); err != nil {
		return Result{}, err
	}
	if err := set.defaults(); err != nil {
		return Result{}, err
	}
	n := len(p.Cycles)
	keep := make([]bool, n)
	if set.OutlierWindow > 0 {
		hampel(keep, p.Capacity, set.OutlierWindow, set.OutlierThreshold)
	} else {
		for i := range keep {
			keep[i] = true
		}
	}
	kept := 0
	for _, k := range keep {
		if k {
			kept++
		}
	}
	if kept < minPoints {
		return Result{}, fmt.Errorf("%w: %w", &cell.FieldError{Field: "capacity_amp_hours",
			Reason: fmt.Sprintf("%d of %d points are usable after outlier removal; need at least %d", kept, n, minPoints)}, ErrTooFew)
	}

	res := Result{Criterion: set.Criterion, Level: set.Level}
	res.Reference = p.ReferenceAh
	if res.Reference == 0 {
		first := make([]float64, 0, set.InitialPoints)
		for i := 0; i < n && len(first) < set.InitialPoints; i++ {
			if keep[i] {
				first = append(first, p.Capacity[i])
			}
		}
		res.Reference = median(nil, first)
		if !(res.Reference > 0) {
			return Result{}, cell.Invalid("capacity_amp_hours", "initial capacity must be positive, got %g", res.Reference)
		}
	}
	res.Threshold = set.EndOfLife * res.Reference

	res.Scale = p.Cycles[n-1]
	if res.Scale <= 0 {
		return Result{}, cell.Invalid("cycles", "the last cycle index must be positive, got %g", res.Scale)
	}
	u := make([]float64, n)
	for i, c := range p.Cycles {
		u[i] = c / res.Scale
	}
	w0 := make([]float64, n)
	for i, k := range keep {
		if k {
			w0[i] = 1
		}
	}

	res.Horizon = set.Horizon
	if res.Horizon == 0 {
		res.Horizon = 10 * p.Cycles[n-1]
	}
	if res.Horizon <= p.Cycles[0] {
		return Result{}, cell.Invalid("horizon", "must lie beyond the first cycle index %g, got %g", p.Cycles[0], res.Horizon)
	}

	// Fit every candidate on all the data and project each; the criterion picks one.
	// Forward refits on the first two thirds to score extrapolation.
	var best *evaluated
	split := p.Cycles[0] + 2.0/3.0*(p.Cycles[n-1]-p.Cycles[0])
	for _, m := range set.Models {
		l, err := lawOf(m)
		if err != nil {
			return Result{}, cell.Invalid("models", "%v", err)
		}
		cand := Candidate{Model: m, Score: math.Inf(1)}
		if kept < l.nParams()+3 {
			cand.Err = fmt.Errorf("%w: %d points for %d parameters", ErrTooFew, kept, l.nParams())
			res.Candidates = append(res.Candidates, cand)
			continue
		}
		e, err := evaluate(l, u, p.Capacity, w0, p.Cycles[0], res.Threshold, res.Scale, res.Horizon, &set)
		if err != nil {
			cand.Err = err
			res.Candidates = append(res.Candidates, cand)
			continue
		}
		cand.Params, cand.Sigma, cand.Cycles = e.fit.params, e.fit.sigma, e.cycles
		switch set.Criterion {
		case AICc, BIC:
			cand.Score = e.fit.criterion(set.Criterion)
		case Forward:
			cand.Score, cand.Err = forwardScore(l, u, p.Capacity, w0, e.fit.weights, p.Cycles, split, set.LeastSquares)
		}
		res.Candidates = append(res.Candidates, cand)
		if cand.Err == nil && (best == nil || cand.Score < best.score) {
			e.score = cand.Score
			best = &e
		}
	}
	if best == nil {
		errs := make([]error, 0, len(res.Candidates))
		for _, c := range res.Candidates {
			errs = append(errs, fmt.Errorf("%s: %w", c.Model, c.Err))
		}
		return Result{}, fmt.Errorf("no trend law could be fitted: %w", errors.Join(errs...))
	}

	f := best.fit
	res.Model = best.law.model
	res.Params = f.params
	res.Sigma = f.sigma
	res.Weights = f.weights
	res.Iterations = f.iterations
	for _, w := range f.weights {
		if w == 0 {
			res.Outliers++
		}
	}
	res.Inflation = best.inflation
	res.Covariance = best.cov
	res.Parameter = best.cycles
	res.Cycles = best.cycles
	if !set.ParameterInterval {
		for _, c := range res.Candidates {
			if c.Err == nil {
				res.Cycles.Low = math.Min(res.Cycles.Low, c.Cycles.Low)
				res.Cycles.High = math.Max(res.Cycles.High, c.Cycles.High)
			}
		}
	}

	if p.Days != nil {
		res.dayAt = dayLine(p.Cycles, p.Days, f.weights)
		if res.dayAt != nil {
			res.Days = &Crossing{Value: res.dayAt(res.Cycles.Value), Low: res.dayAt(res.Cycles.Low), High: res.dayAt(res.Cycles.High)}
		}
	}
	return res, nil
}

// firstBelow returns the first x in [from, to] at which f(x) ≤ level, located on a grid
// of 500 intervals (the trend and its band are smooth over a grid cell) and refined by
// bisection; +Inf if there is none.
func firstBelow(f func(float64) float64, level, from, to float64) float64 {
	if f(from) <= level {
		return from
	}
	const steps = 500
	h := (to - from) / steps
	prev := from
	for k := 1; k <= steps; k++ {
		x := from + float64(k)*h
		if f(x) <= level {
			a, b := prev, x
			for range 60 {
				m := 0.5 * (a + b)
				if f(m) <= level {
					b = m
				} else {
					a = m
				}
			}
			return b
		}
		prev = x
	}
	return math.Inf(1)
}

// dayLine returns the least-squares line of day against cycle index over the kept
// measurements, which maps projected cycle indices to days assuming the battery goes on
// cycling at its average historical rate. It returns nil if time does not advance.
func dayLine(cycles, days, w []float64) func(float64) float64 {
	var sw, sx, sy float64
	for i := range cycles {
		if w[i] > 0 {
			sw++
			sx += cycles[i]
			sy += days[i]
		}
	}
	if sw < 2 {
		return nil
	}
	mx, my := sx/sw, sy/sw
	var sxx, sxy float64
	for i := range cycles {
		if w[i] > 0 {
			dx := cycles[i] - mx
			sxx += dx * dx
			sxy += dx * (days[i] - my)
		}
	}
	if !(sxx > 0) || !(sxy > 0) {
		return nil
	}
	slope := sxy / sxx
	return func(n float64) float64 { return my + slope*(n-mx) }
}

func (p *Problem) validate() error {
	n := len(p.Cycles)
	if len(p.Capacity) != n {
		return cell.Invalid("capacity_amp_hours", "has %d values but cycles has %d", len(p.Capacity), n)
	}
	if p.Days != nil && len(p.Days) != n {
		return cell.Invalid("days", "has %d values but cycles has %d", len(p.Days), n)
	}
	if n < minPoints {
		return fmt.Errorf("%w: %w", &cell.FieldError{Field: "capacity_amp_hours",
			Reason: fmt.Sprintf("has %d points; need at least %d", n, minPoints)}, ErrTooFew)
	}
	for i := range n {
		c, q := p.Cycles[i], p.Capacity[i]
		if !cell.Finite(c) || c < 0 || c > maxMagnitude {
			return cell.Invalid("cycles", "point %d must be a finite index in [0, %g], got %g", i, maxMagnitude, c)
		}
		if i > 0 && !(c > p.Cycles[i-1]) {
			return cell.Invalid("cycles", "must increase strictly: point %d (%g) follows %g", i, c, p.Cycles[i-1])
		}
		if !cell.Finite(q) || q < 0 || q > maxMagnitude {
			return cell.Invalid("capacity_amp_hours", "point %d must be finite, ≥ 0 and at most %g, got %g", i, maxMagnitude, q)
		}
		if p.Days != nil {
			d := p.Days[i]
			if !cell.Finite(d) {
				return cell.Invalid("days", "point %d is not finite: %g", i, d)
			}
			if i > 0 && d < p.Days[i-1] {
				return cell.Invalid("days", "must not decrease: point %d (%g) follows %g", i, d, p.Days[i-1])
			}
		}
	}
	if r := p.ReferenceAh; !cell.Finite(r) || r < 0 || r > maxMagnitude {
		return cell.Invalid("reference_capacity_amp_hours", "must be finite and > 0 (or 0 for the initial capacity), got %g", r)
	}
	return nil
}

func (s *Settings) defaults() error {
	if s.EndOfLife == 0 {
		s.EndOfLife = 0.8
	}
	if !(s.EndOfLife > 0 && s.EndOfLife < 1) {
		return cell.Invalid("end_of_life_fraction", "must be in (0, 1), got %g", s.EndOfLife)
	}
	if s.Models == nil {
		s.Models = AllModels
	}
	if len(s.Models) == 0 {
		return cell.Invalid("models", "must list at least one model")
	}
	if s.Criterion < AICc || s.Criterion > Forward {
		return cell.Invalid("criterion", "unknown criterion %d", int(s.Criterion))
	}
	if s.Level == 0 {
		s.Level = 0.95
	}
	if !(s.Level > 0 && s.Level < 1) {
		return cell.Invalid("level", "must be in (0, 1), got %g", s.Level)
	}
	if s.InitialPoints == 0 {
		s.InitialPoints = 5
	}
	if s.InitialPoints < 1 {
		return cell.Invalid("initial_points", "must be ≥ 1, got %d", s.InitialPoints)
	}
	if s.OutlierWindow == 0 {
		s.OutlierWindow = 5
	}
	if s.OutlierThreshold == 0 {
		s.OutlierThreshold = 3
	}
	if !cell.Finite(s.OutlierThreshold) || s.OutlierThreshold < 0 {
		return cell.Invalid("outlier_threshold", "must be finite and > 0, got %g", s.OutlierThreshold)
	}
	if !cell.Finite(s.Horizon) || s.Horizon < 0 {
		return cell.Invalid("horizon", "must be finite and ≥ 0, got %g", s.Horizon)
	}
	return nil
}

// evaluated is one candidate law fitted and projected.
type evaluated struct {
	law       *law
	fit       robustFit
	cov       *mat.SymDense
	inflation float64
	cycles    Crossing
	score     float64
}

// evaluate fits l robustly, computes its (inflated) parameter covariance and projects its
// end-of-life crossing with the interval.
func evaluate(l *law, u, q, w0 []float64, from, threshold, scale, horizon float64, set *Settings) (evaluated, error) {
	e := evaluated{law: l, inflation: 1}
	f, err := fitRobust(l, u, q, w0, set.LeastSquares)
	if err != nil {
		return e, err
	}
	e.fit = f
	if !set.IndependentResiduals {
		// An AR(1) error process with coefficient ρ inflates the variance of a least-squares
		// estimate by about (1+ρ)/(1−ρ) (effective sample size n·(1−ρ)/(1+ρ); common
		// practice in time-series regression). Capacity histories have long correlated
		// excursions (regeneration after rests), so independent errors would be overconfident.
		if rho := math.Min(lag1(f.resid, f.weights), 0.95); rho > 0 {
			e.inflation = (1 + rho) / (1 - rho)
		}
	}
	cov, err := f.covariance(l, u)
	if err != nil {
		return e, err
	}
	cov.ScaleSym(e.inflation, cov)
	e.cov = cov

	t := tQuantile(f.nEff-float64(len(f.params)), set.Level)
	g := make([]float64, l.nParams())
	gv := mat.NewVecDense(len(g), g)
	half := func(c float64) float64 {
		l.grad(g, f.params, c/scale)
		return t * math.Sqrt(math.Max(mat.Inner(gv, cov, gv), 0))
	}
	trend := func(c float64) float64 { return l.eval(f.params, c/scale) }
	e.cycles = Crossing{
		Value: firstBelow(trend, threshold, from, horizon),
		Low:   firstBelow(func(c float64) float64 { return trend(c) - half(c) }, threshold, from, horizon),
		High:  firstBelow(func(c float64) float64 { return trend(c) + half(c) }, threshold, from, horizon),
	}
	// The bands can cross each other where the trend is flat; keep the interval ordered.
	e.cycles.Low = math.Min(e.cycles.Low, e.cycles.Value)
	e.cycles.High = math.Max(e.cycles.High, e.cycles.Value)
	return e, nil
}

// tQuantile returns the two-sided Student t quantile for the level with dof degrees of
// freedom (at least 1).
func tQuantile(dof, level float64) float64 {
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: math.Max(dof, 1)}.Quantile(0.5 + level/2)
}
