package fit

import (
	"context"
	"fmt"
	"math"
	"sort"

	"github.com/voltcast/voltcast/model/table"
)

// PulseSettings control [Pulses]. The zero value (or nil) selects the defaults.
type PulseSettings struct {
	// Branches is the number of RC branches, 1 or 2. 0 means 2.
	Branches int
	// MinRest is the shortest rest, in seconds, after which the cell counts as relaxed
	// so that a pulse window may start there. 0 means 120 s.
	MinRest float64
	// OCVRest is the shortest rest, in seconds, whose last voltage is taken as an
	// open-circuit voltage point. 0 means 600 s.
	OCVRest float64
	// LevelTolerance groups windows whose starting states of charge differ by less
	// than this into one level with shared parameters. 0 means 0.03.
	LevelTolerance float64
	// MinLevels is the fewest state-of-charge levels a pulse test must yield.
	// 0 means 3.
	MinLevels int
	// MaxIterations bounds the Levenberg–Marquardt iterations per level. 0 means 100.
	MaxIterations int
	// Progress, when not nil, is called after each level is fitted.
	Progress func(Progress)
}

func (s *PulseSettings) defaults() PulseSettings {
	var o PulseSettings
	if s != nil {
		o = *s
	}
	if o.Branches == 0 {
		o.Branches = 2
	}
	if o.MinRest == 0 {
		o.MinRest = 120
	}
	if o.OCVRest == 0 {
		o.OCVRest = 600
	}
	if o.LevelTolerance == 0 {
		o.LevelTolerance = 0.03
	}
	if o.MinLevels == 0 {
		o.MinLevels = 3
	}
	if o.MaxIterations == 0 {
		o.MaxIterations = 100
	}
	return o
}

// Progress reports how far a fit has come.
type Progress struct {
	Stage       string // "ocv", "pulse", "refine"
	Name        string // record being worked on
	Done, Total int    // units of the stage (levels, iterations)
}

// Interval is an estimate with a 95 % confidence interval. Low and High are NaN when
// the method gives no interval.
type Interval struct {
	Value, Low, High float64
}

// Level is the equivalent-circuit parameters identified at one state-of-charge level
// of one pulse test.
type Level struct {
	SOC          float64 // charge-weighted mean state of charge over the level's pulses
	TemperatureK float64 // median cell temperature over the level, K
	// R0Step is the raw step estimate −ΣΔV·ΔI/ΣΔI² over the level's current edges, Ω:
	// it includes whatever the RC branches moved during the first sampling interval.
	R0Step float64
	R0     Interval   // series resistance, Ω
	R, Tau []Interval // branch resistances (Ω) and time constants (s), fastest first
	// I0 is the exchange current (A) of each branch when it was fitted as a
	// charge-transfer branch ([cell.Branch]); Value is +Inf for an ohmic branch.
	I0 []Interval
	// PulseAmps is the largest pulse current magnitude of the level, A, and Magnitudes
	// the ratio of the largest to the smallest (1 when all pulses share one magnitude).
	PulseAmps, Magnitudes float64
	// Samples is the number of residuals; RMSE and Max are the fit's voltage error, V.
	Samples   int
	RMSE, Max float64
	Windows   int // pulse windows in the level
	// TauMax is the upper bound the time constants were fitted within, s.
	TauMax float64
}

// RestPoint is a rested terminal voltage, taken as an open-circuit voltage sample.
type RestPoint struct {
	SOC, TemperatureK float64
	// Volts is the OCV estimate: the measured voltage plus what the fitted RC branches
	// still held at that moment (Unrelaxed), since a rest of minutes does not relax a
	// branch with a time constant of minutes.
	Volts, Measured, Unrelaxed float64
	RestSeconds                float64
	window                     int
}

// PulseResult is what [Pulses] identifies from one pulse test.
type PulseResult struct {
	Name   string
	Levels []Level
	Rests  []RestPoint
	// TemperatureK is the median cell temperature over all windows.
	TemperatureK float64
	// Windows lists the sample ranges fitted, for residual reports.
	Windows []Window
	// RestAmps is the current below which a sample counted as rest, A.
	RestAmps float64
	// Gaps counts logging gaps found with the lab counter.
	Gaps int
	// MinVolts is the lowest terminal voltage of the test, V.
	MinVolts float64
}

// Window is a stretch of a pulse test simulated as one piece: it starts at a rested
// sample (Start) and runs to End (exclusive).
type Window struct {
	Start, End int
	Level      int     // index into PulseResult.Levels
	SOC0       float64 // state of charge at Start
}

// pulseModel evaluates the window model for one level. Each window starts from rest:
//
//	v̂[k] = v[s] + OCV(z[k]) − OCV(z[s]) − R0·i[k] − Σⱼ vⱼ[k],
//	vⱼ[k] = aⱼ·vⱼ[k−1] + Rⱼ·(1−aⱼ)·i[k], aⱼ = exp(−(t[k]−t[k−1])/τⱼ), vⱼ[s] = 0,
//
// the exact zero-order-hold solution with the current i[k] held over (t[k−1], t[k]], the
// convention of the shared datasets' counters. Anchoring at the rested voltage v[s]
// makes the fit independent of any offset between the OCV table and this test.
type pulseModel struct {
	rec     *Record
	z       []float64 // SOC per sample
	ocv     *table.Curve
	windows []Window
	n       int       // residual count
	rest    float64   // rest current threshold, A
	ocvd    []float64 // OCV(z[k]) for the samples of the windows (others unset)
}

// drive returns the effective branch current for cell current i and i2 = 2·i₀ (see
// [cell.Branch]); i2 = +Inf (or 0) means an ohmic branch.
func drive(i, i2 float64) float64 {
	if i2 > 0 && !math.IsInf(i2, 1) {
		return i2 * math.Asinh(i/i2)
	}
	return i
}

// residuals writes v̂ − v for the parameters r0, rs, taus into dst; i2s holds 2·i₀ of
// each branch (+Inf for an ohmic branch).
func (m *pulseModel) residuals(dst []float64, r0 float64, rs, taus, i2s []float64) {
	rec := m.rec
	var vb, av [2]float64
	lastDt := math.NaN()
	p := 0
	for _, w := range m.windows {
		vb = [2]float64{}
		s := w.Start
		base := rec.Voltage[s] - m.ocv.At(m.z[s])
		for k := s + 1; k < w.End; k++ {
			dt := rec.Time[k] - rec.Time[k-1]
			if dt != lastDt { // uniform sampling repeats dt: reuse the decay factors
				for j := range rs {
					av[j] = math.Exp(-dt / taus[j])
				}
				lastDt = dt
			}
			i := rec.Current[k]
			v := base + m.ocvd[k] - r0*i
			for j := range rs {
				a := av[j]
				vb[j] = a*vb[j] + rs[j]*(1-a)*drive(i, i2s[j])
				v -= vb[j]
			}
			dst[p] = v - rec.Voltage[k]
			p++
		}
	}
}

// linearFit writes the regressors of the model that is linear in (R0, R1, R2) for
// fixed time constants and exchange currents: y = OCV difference − v, columns i and fⱼ
// (the branch filters of the effective branch current with unit resistance). It
// returns the SSR of the non-negative least-squares fit and the resistances.
func (m *pulseModel) linearFit(taus, i2s []float64, cols [][]float64, y []float64) (float64, []float64) {
	rec := m.rec
	nb := len(taus)
	p := 0
	var f, av [2]float64
	lastDt := math.NaN()
	for _, w := range m.windows {
		f = [2]float64{}
		s := w.Start
		base := rec.Voltage[s] - m.ocv.At(m.z[s])
		for k := s + 1; k < w.End; k++ {
			dt := rec.Time[k] - rec.Time[k-1]
			if dt != lastDt {
				for j := range nb {
					av[j] = math.Exp(-dt / taus[j])
				}
				lastDt = dt
			}
			i := rec.Current[k]
			y[p] = base + m.ocvd[k] - rec.Voltage[k]
			cols[0][p] = i
			for j := range nb {
				a := av[j]
				f[j] = a*f[j] + (1-a)*drive(i, i2s[j])
				cols[j+1][p] = f[j]
			}
			p++
		}
	}
	return nnls(cols, y)
}

// nnls solves min ‖Σ xⱼ·colsⱼ − y‖² with x ≥ 0 for up to three columns by trying every
// active set (exact for so few columns).
func nnls(cols [][]float64, y []float64) (float64, []float64) {
	q := len(cols)
	best := math.Inf(1)
	var bx []float64
	yy := dot(y, y)
	var gram [3][3]float64
	var cy [3]float64
	for r := range q {
		for c := r; c < q; c++ {
			gram[r][c] = dot(cols[r], cols[c])
			gram[c][r] = gram[r][c]
		}
		cy[r] = dot(cols[r], y)
	}
	for mask := 1; mask < 1<<q; mask++ {
		var idx []int
		for j := range q {
			if mask&(1<<j) != 0 {
				idx = append(idx, j)
			}
		}
		m := len(idx)
		var a [3][3]float64
		var b [3]float64
		for r, jr := range idx {
			for c, jc := range idx {
				a[r][c] = gram[jr][jc]
			}
			b[r] = cy[jr]
		}
		x, ok := solveSmall(a, b, m)
		if !ok {
			continue
		}
		neg := false
		for _, v := range x[:m] {
			if v < 0 {
				neg = true
			}
		}
		if neg {
			continue
		}
		full := make([]float64, q)
		for r, j := range idx {
			full[j] = x[r]
		}
		// ‖Cx − y‖² = yᵀy − 2xᵀCᵀy + xᵀCᵀCx, from the Gram matrix already formed.
		ssr := yy
		for r := range m {
			ssr -= 2 * x[r] * b[r]
			for c := range m {
				ssr += x[r] * a[r][c] * x[c]
			}
		}
		if ssr < best {
			best, bx = ssr, full
		}
	}
	return best, bx
}

// solveSmall solves an m×m symmetric positive system by Gaussian elimination with
// partial pivoting (m ≤ 3).
func solveSmall(a [3][3]float64, b [3]float64, m int) ([3]float64, bool) {
	for c := range m {
		piv := c
		for r := c + 1; r < m; r++ {
			if math.Abs(a[r][c]) > math.Abs(a[piv][c]) {
				piv = r
			}
		}
		if math.Abs(a[piv][c]) < 1e-300 {
			return b, false
		}
		a[c], a[piv] = a[piv], a[c]
		b[c], b[piv] = b[piv], b[c]
		for r := c + 1; r < m; r++ {
			f := a[r][c] / a[c][c]
			for k := c; k < m; k++ {
				a[r][k] -= f * a[c][k]
			}
			b[r] -= f * b[c]
		}
	}
	var x [3]float64
	for r := m - 1; r >= 0; r-- {
		s := b[r]
		for k := r + 1; k < m; k++ {
			s -= a[r][k] * x[k]
		}
		x[r] = s / a[r][r]
	}
	return x, true
}

func dot(a, b []float64) float64 {
	var s float64
	for i := range a {
		s += a[i] * b[i]
	}
	return s
}

// Pulses identifies R0 and the RC branches from an HPPC-style pulse test.
//
// # Method
//
// State of charge comes from the charge counter (the lab's own when present, since a
// tester may not log the moves between levels) and the capacity q (Ah) of the OCV test:
// z = 1 − (ah − min ah)/q, i.e. the test is taken to be full at its lowest counter value,
// as a test that starts from, or first charges to, full is. A sample is at rest when
// |i| < q/100 A. A logging gap is a step where the counter moves by more than the logged
// current explains; the cell is taken as relaxed after one.
//
// The record is cut into windows, each starting at the last sample of a rest of at least
// MinRest seconds (or after a gap) and running to the next such start, gap or the end.
// Windows whose starting states of charge lie within LevelTolerance form a level; each
// level gets one parameter set, fitted to every sample of its windows by the window
// model (see pulseModel: exact ZOH, rested start, voltage anchored at the rested value).
//
// R0 and the sampling interval: the first sample after a current edge comes δ seconds
// after it (0.1 s, 1 s or 10 s in the shared datasets), so the raw step ΔV/ΔI already
// holds the RC branches' response over δ. The raw step is reported as R0Step; the R0
// of the model is fitted jointly with the branches, so it is the step extrapolated back
// to the edge through the fitted relaxation. Dynamics faster than δ cannot be seen and
// end up in R0.
//
// The time constants are found first by a grid search over pairs τ₁ < τ₂ (0.3 s to
// 3000 s, logarithmic), each with the resistances from non-negative linear least squares
// (the model is linear in R0 and Rⱼ for fixed τ), then refined by Levenberg–Marquardt
// over log-parameters.
//
// Charge-transfer branch: where a level's pulses span at least a factor 2 in current
// magnitude (the pan18650pf HPPC runs 0.5C to 6C), the fastest branch is also fitted as
// a Butler–Volmer branch ([cell.Branch].ExchangeCurrent), with 2·i₀ tried on a grid
// from 2× to 1/8 of the largest pulse current (the fast time constant searched again,
// the slower one held at the ohmic optimum) and then refined with the rest. It is kept
// when it fits better than the ohmic branch and its nonlinearity is material over the
// tested currents (2·i₀ below 4× the largest pulse current); otherwise the branch stays
// ohmic. A single pulse magnitude cannot separate the nonlinearity from the
// resistance, so such tests always give ohmic branches.
//
// Confidence intervals are ±1.96 standard errors of the
// log-parameters from the Jacobian at the solution (s²·(JᵀJ)⁻¹); the residuals are
// correlated in time, so they are optimistic. Rested voltages before windows that
// followed a rest of at least OCVRest seconds are returned as OCV points.
//
// ocv is the OCV curve at (or near) the test's temperature; q must be positive. ctx is
// checked once per level.
func Pulses(ctx context.Context, rec Record, ocv *table.Curve, q float64, settings *PulseSettings) (*PulseResult, error) {
	s := settings.defaults()
	if s.Branches < 1 || s.Branches > 2 {
		return nil, fmt.Errorf("fit: pulse fit supports 1 or 2 RC branches, got %d", s.Branches)
	}
	if err := rec.check(10); err != nil {
		return nil, err
	}
	if !(q > 0) || math.IsInf(q, 0) {
		return nil, fmt.Errorf("fit: capacity must be positive, got %g Ah", q)
	}
	if err := rec.checkRate(q, 50); err != nil {
		return nil, err
	}
	ah := rec.counter()
	z := make([]float64, rec.Len())
	if rec.InitialSOC != nil {
		for k := range z {
			z[k] = *rec.InitialSOC - ah[k]/q
		}
	} else {
		lo := slicesMin(ah)
		for k := range z {
			z[k] = 1 - (ah[k]-lo)/q
		}
	}
	res := &PulseResult{Name: rec.Name, RestAmps: q / 100, MinVolts: slicesMin(rec.Voltage)}
	restA := res.RestAmps
	n := rec.Len()
	rest := func(k int) bool { return math.Abs(rec.Current[k]) < restA }
	gap := make([]bool, n) // gap[k]: charge moved unlogged between k−1 and k
	for k := 1; k < n; k++ {
		dt := rec.Time[k] - rec.Time[k-1]
		if rec.DischargedAh != nil {
			exp := rec.Current[k] * dt / 3600
			if math.Abs((ah[k]-ah[k-1])-exp) > 0.002*q+restA*dt/3600 {
				gap[k] = true
				res.Gaps++
			}
		} else if dt > 3600 && !(rest(k) && rest(k-1)) {
			gap[k] = true
			res.Gaps++
		}
	}

	// Window starts: an edge out of rest after a long enough rest or a gap.
	type start struct {
		k        int
		restSecs float64
		afterGap bool
	}
	var starts []start
	restBegin, restGap := 0, true
	for k := 1; k < n; k++ {
		if gap[k] {
			restBegin, restGap = k, true
		}
		if rest(k) && !rest(k-1) {
			restBegin, restGap = k, false
		}
		if rest(k-1) && !rest(k) && !gap[k] {
			secs := rec.Time[k-1] - rec.Time[restBegin]
			if secs >= s.MinRest || restGap {
				starts = append(starts, start{k - 1, secs, restGap})
			}
		}
	}
	// Windows run to the next start or gap.
	var wins []Window
	for i, st := range starts {
		end := n
		if i+1 < len(starts) {
			end = starts[i+1].k + 1
		}
		for k := st.k + 1; k < end; k++ {
			if gap[k] {
				end = k
				break
			}
		}
		if end-st.k < 4 {
			continue
		}
		wins = append(wins, Window{Start: st.k, End: end, SOC0: z[st.k]})
		if st.restSecs >= s.OCVRest && !st.afterGap {
			res.Rests = append(res.Rests, RestPoint{SOC: z[st.k], Volts: rec.Voltage[st.k], Measured: rec.Voltage[st.k],
				TemperatureK: rec.Temperature[st.k], RestSeconds: st.restSecs, window: len(wins) - 1})
		}
	}
	// Group into levels.
	var groups [][]int
	for i, w := range wins {
		if len(groups) > 0 {
			g := groups[len(groups)-1]
			if math.Abs(w.SOC0-wins[g[0]].SOC0) < s.LevelTolerance {
				groups[len(groups)-1] = append(g, i)
				continue
			}
		}
		groups = append(groups, []int{i})
	}
	if len(groups) < s.MinLevels {
		return nil, fmt.Errorf("%w: %s: found pulses at %d state-of-charge level(s), need at least %d (pulses must start from a rest of at least %g s; rest means |current| < %.3g A)",
			ErrData, rec.Name, len(groups), s.MinLevels, s.MinRest, restA)
	}
	var allT []float64
	for li, g := range groups {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		var ws []Window
		for _, i := range g {
			wins[i].Level = li
			ws = append(ws, wins[i])
		}
		lv, err := fitLevel(&rec, z, ocv, ws, s.Branches, s.MaxIterations, restA)
		if err != nil {
			return nil, fmt.Errorf("%s: level at SOC %.3f: %w", rec.Name, wins[g[0]].SOC0, err)
		}
		for _, w := range ws {
			allT = append(allT, rec.Temperature[w.Start:w.End]...)
		}
		res.Levels = append(res.Levels, lv)
		if s.Progress != nil {
			s.Progress(Progress{Stage: "pulse", Name: rec.Name, Done: li + 1, Total: len(groups)})
		}
	}
	res.Windows = wins
	res.TemperatureK = median(allT)
	// Correct each rest point for the branch voltages the previous window's fitted
	// model still holds at its end (the rested sample).
	for i := range res.Rests {
		rp := &res.Rests[i]
		wi := rp.window
		if wi == 0 || wins[wi-1].End-1 != wins[wi].Start {
			continue
		}
		prev := wins[wi-1]
		rp.Unrelaxed = branchVoltsAtEnd(&rec, prev, res.Levels[prev.Level])
		rp.Volts = rp.Measured + rp.Unrelaxed
	}
	return res, nil
}

// branchVoltsAtEnd simulates the RC branches of level lv through window w from rest and
// returns their summed voltage at the window's last sample.
func branchVoltsAtEnd(rec *Record, w Window, lv Level) float64 {
	var v [2]float64
	for k := w.Start + 1; k < w.End; k++ {
		dt := rec.Time[k] - rec.Time[k-1]
		for j := range lv.R {
			a := math.Exp(-dt / lv.Tau[j].Value)
			v[j] = a*v[j] + lv.R[j].Value*(1-a)*drive(rec.Current[k], 2*lv.I0[j].Value)
		}
	}
	return v[0] + v[1]
}

// tauGrid is the logarithmic grid of candidate time constants, s.
var tauGrid = func() []float64 {
	var g []float64
	for e := -0.5; e <= 3.51; e += 0.25 {
		g = append(g, math.Pow(10, e))
	}
	return g
}()

// longestActive returns the longest stretch, in seconds, of consecutive non-rest samples
// in the windows.
func longestActive(rec *Record, ws []Window, restA float64) float64 {
	longest := 0.0
	for _, w := range ws {
		run := 0.0
		for k := w.Start + 1; k < w.End; k++ {
			if math.Abs(rec.Current[k]) >= restA {
				run += rec.Time[k] - rec.Time[k-1]
				longest = math.Max(longest, run)
			} else {
				run = 0
			}
		}
	}
	return longest
}

// pulseMagnitudes returns the largest pulse current magnitude of the windows and the
// ratio of the largest to the smallest, where a pulse is a run of non-rest samples of
// one sign and its magnitude the median |i| over the run.
func pulseMagnitudes(rec *Record, ws []Window, restA float64) (imax, spread float64) {
	lo := math.Inf(1)
	for _, w := range ws {
		for k := w.Start + 1; k < w.End; {
			if math.Abs(rec.Current[k]) < restA {
				k++
				continue
			}
			j := k
			var mags []float64
			for j < w.End && math.Abs(rec.Current[j]) >= restA && (rec.Current[j] > 0) == (rec.Current[k] > 0) {
				mags = append(mags, math.Abs(rec.Current[j]))
				j++
			}
			m := median(mags)
			imax = math.Max(imax, m)
			lo = math.Min(lo, m)
			k = j
		}
	}
	if imax == 0 {
		return 0, 1
	}
	return imax, imax / lo
}

func fitLevel(rec *Record, z []float64, ocv *table.Curve, ws []Window, nb, maxIter int, restA float64) (Level, error) {
	m := &pulseModel{rec: rec, z: z, ocv: ocv, windows: ws, rest: restA, ocvd: make([]float64, rec.Len())}
	for _, w := range ws {
		for k := w.Start; k < w.End; k++ {
			m.ocvd[k] = ocv.At(z[k])
		}
	}
	var lv Level
	var num, den, wz, wsum float64
	var temps []float64
	for _, w := range ws {
		m.n += w.End - w.Start - 1
		for k := w.Start + 1; k < w.End; k++ {
			di := rec.Current[k] - rec.Current[k-1]
			if math.Abs(di) > 0.2*math.Max(math.Abs(rec.Current[k]), math.Abs(rec.Current[k-1])) && math.Abs(di) > 1e-9 {
				num -= (rec.Voltage[k] - rec.Voltage[k-1]) * di
				den += di * di
			}
			q := math.Abs(rec.Current[k]) * (rec.Time[k] - rec.Time[k-1])
			wz += q * z[k]
			wsum += q
			temps = append(temps, rec.Temperature[k])
		}
	}
	lv.Windows = len(ws)
	lv.Samples = m.n
	lv.TemperatureK = median(temps)
	if wsum > 0 {
		lv.SOC = wz / wsum
	} else {
		lv.SOC = ws[0].SOC0
	}
	if den > 0 {
		lv.R0Step = num / den
	}
	if m.n < 3*(1+2*nb) {
		return lv, fmt.Errorf("%w: %d samples are too few for %d parameters", ErrData, m.n, 1+2*nb)
	}

	// Time constants are bounded: below by 0.1 s, above by ten times the longest
	// stretch of current in the level (at most 3000 s). A branch much slower than the
	// pulses that excite it has its amplitude (charge/C) identified but not its
	// resistance, which would then extrapolate wildly under a sustained load.
	tauMin, tauMax := 0.1, math.Min(3000, 10*math.Max(longestActive(rec, ws, m.rest), 1))
	// Grid search over time constants with linear least squares for the resistances.
	cols := make([][]float64, nb+1)
	for j := range cols {
		cols[j] = make([]float64, m.n)
	}
	y := make([]float64, m.n)
	// gridBest is the best grid point of one model class (ohmic, or charge-transfer
	// fast branch).
	type gridBest struct {
		ssr      float64
		taus, rs []float64
		i2       float64 // 2·i₀ of the fast branch, +Inf for ohmic
	}
	bestOhmic, bestCT := gridBest{ssr: math.Inf(1)}, gridBest{ssr: math.Inf(1)}
	taus := make([]float64, nb)
	i2s := make([]float64, nb) // 2·i₀ per branch, +Inf = ohmic
	for j := range i2s {
		i2s[j] = math.Inf(1)
	}
	var grid []float64
	for _, g := range tauGrid {
		if g >= tauMin*1.01 && g <= tauMax/1.01 {
			grid = append(grid, g)
		}
	}
	var try func(j, from int)
	try = func(j, from int) {
		if j == nb {
			ssr, r := m.linearFit(taus, i2s, cols, y)
			b := &bestOhmic
			if !math.IsInf(i2s[0], 1) {
				b = &bestCT
			}
			if r != nil && ssr < b.ssr {
				*b = gridBest{ssr, append([]float64(nil), taus...), r, i2s[0]}
			}
			return
		}
		for g := from; g < len(grid); g++ {
			taus[j] = grid[g]
			try(j+1, g+2) // τ₂ at least ~3× τ₁
		}
	}
	// The fastest branch may be a charge-transfer branch (Butler–Volmer, see
	// cell.Branch) when the level's pulses span at least a factor 2 in current
	// magnitude: with a single magnitude the nonlinearity only rescales the resistance
	// and cannot be identified. The grid tries 2·i₀ from 2× down to 1/8 of the largest
	// pulse current.
	imax, spread := pulseMagnitudes(rec, ws, m.rest)
	lv.PulseAmps, lv.Magnitudes = imax, spread
	try(0, 0)
	if bestOhmic.taus == nil {
		return lv, fmt.Errorf("%w: no admissible starting point for the RC fit", ErrData)
	}
	// For the charge-transfer candidates only the fast time constant is searched again
	// (the slower ones stay at the ohmic grid optimum; Levenberg–Marquardt refines all).
	if spread >= 2 {
		for _, f := range []float64{2, 1, 0.5, 0.25, 0.125} {
			i2s[0] = f * imax
			copy(taus, bestOhmic.taus)
			for _, g := range grid {
				if nb > 1 && g >= bestOhmic.taus[1] {
					break
				}
				taus[0] = g
				try(nb, 0)
			}
		}
	}
	// Parameters: ln R0, then per branch ln Rⱼ and uⱼ with
	// ln τⱼ = ln τmin + (ln τmax − ln τmin)·σ(uⱼ), σ the logistic function, which keeps
	// τ inside its bounds, and for a charge-transfer first branch w with
	// ln 2i₀ = ln(imax/64) + ln(64²)·σ(w). A resistance the linear fit put at zero
	// starts small.
	la, lb := math.Log(tauMin), math.Log(tauMax)
	logistic := func(u float64) float64 { return 1 / (1 + math.Exp(-u)) }
	logit := func(f float64) float64 {
		f = math.Min(math.Max(f, 1e-6), 1-1e-6)
		return math.Log(f / (1 - f))
	}
	tauOf := func(u float64) float64 { return math.Exp(la + (lb-la)*logistic(u)) }
	uOf := func(tau float64) float64 { return logit((math.Log(tau) - la) / (lb - la)) }
	ia, ib := math.Log(imax/64), math.Log(imax*64)
	i2Of := func(w float64) float64 { return math.Exp(ia + (ib-ia)*logistic(w)) }
	rs := make([]float64, nb)
	ts := make([]float64, nb)
	type solved struct {
		sol       lmResult
		pr        lsq
		nonlinear bool
	}
	solve := func(g gridBest) (solved, error) {
		nonlinear := !math.IsInf(g.i2, 1)
		floor := 1e-4 * math.Max(g.rs[0], 1e-6)
		x0 := []float64{math.Log(math.Max(g.rs[0], floor))}
		for j := range nb {
			x0 = append(x0, math.Log(math.Max(g.rs[j+1], floor)), uOf(g.taus[j]))
		}
		if nonlinear {
			x0 = append(x0, logit((math.Log(g.i2)-ia)/(ib-ia)))
		}
		pr := lsq{n: m.n, p: len(x0), resid: func(dst, x []float64) {
			for j := range nb {
				rs[j] = math.Exp(x[1+2*j])
				ts[j] = tauOf(x[2+2*j])
			}
			i2s[0] = math.Inf(1)
			if nonlinear {
				i2s[0] = i2Of(x[1+2*nb])
			}
			m.residuals(dst, math.Exp(x[0]), rs, ts, i2s)
		}}
		sol, err := levenbergMarquardt(pr, x0, maxIter)
		return solved{sol, pr, nonlinear}, err
	}
	best, err := solve(bestOhmic)
	if err != nil {
		return lv, err
	}
	// The charge-transfer branch is kept when it fits better and its nonlinearity is
	// material over the tested currents: 2·i₀ below 4× the largest pulse current, where
	// u(i) departs from i by more than 1 % (asinh(¼)·4 ≈ 0.99). Above that the data
	// cannot tell it from an ohmic branch. It is refined only when its grid point already
	// fits clearly better (by 1 % in the sum of squares) than the ohmic one's.
	if bestCT.taus != nil && bestCT.ssr < 0.99*bestOhmic.ssr {
		ct, err := solve(bestCT)
		if err == nil && ct.sol.SSR < best.sol.SSR && i2Of(ct.sol.X[1+2*nb]) < 4*imax {
			best = ct
		}
	}
	sol, pr, nonlinear := best.sol, best.pr, best.nonlinear
	x := sol.X
	p := len(x)
	iv := func(idx int, f func(float64) float64) Interval {
		v := f(x[idx])
		if sol.Cov == nil || !(sol.Cov[idx*p+idx] >= 0) {
			return Interval{v, math.NaN(), math.NaN()}
		}
		sd := math.Sqrt(sol.Cov[idx*p+idx])
		return Interval{v, f(x[idx] - 1.96*sd), f(x[idx] + 1.96*sd)}
	}
	lv.R0 = iv(0, math.Exp)
	type br2 struct{ r, t, i0 Interval }
	var bs []br2
	ohmic := Interval{math.Inf(1), math.NaN(), math.NaN()}
	for j := range nb {
		b := br2{iv(1+2*j, math.Exp), iv(2+2*j, tauOf), ohmic}
		if j == 0 && nonlinear {
			b.i0 = iv(1+2*nb, func(w float64) float64 { return i2Of(w) / 2 })
		}
		bs = append(bs, b)
	}
	sort.Slice(bs, func(a, b int) bool { return bs[a].t.Value < bs[b].t.Value })
	for _, b := range bs {
		lv.R = append(lv.R, b.r)
		lv.Tau = append(lv.Tau, b.t)
		lv.I0 = append(lv.I0, b.i0)
	}
	lv.TauMax = tauMax
	resid := make([]float64, m.n)
	pr.resid(resid, x)
	for _, e := range resid {
		lv.Max = math.Max(lv.Max, math.Abs(e))
	}
	lv.RMSE = math.Sqrt(sumSq(resid) / float64(m.n))
	return lv, nil
}
