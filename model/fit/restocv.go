package fit

import (
	"errors"
	"fmt"
	"math"
	"strings"

	"github.com/voltcast/voltcast/model/cell"
)

// ErrNotLowRate is wrapped (with [ErrData]) by [OCV]'s error when a record has no
// low-rate constant-current discharge: [Fit] then tries [RestOCV] on it.
var ErrNotLowRate = errors.New("fit: not a low-rate test")

// lowRateError marks an [OCV] error as "not a low-rate test" without changing its text.
type lowRateError struct{ err error }

func notLowRate(err error) error { return lowRateError{err} }

// Error returns the wrapped error's text.
func (e lowRateError) Error() string { return e.err.Error() }

// Unwrap returns the wrapped error and [ErrNotLowRate].
func (e lowRateError) Unwrap() []error { return []error{e.err, ErrNotLowRate} }

// OCV sources reported in OCVResult.Source.
const (
	SourceLowRate = "low-rate" // a low-rate (C/20-style) test, see [OCV]
	SourceRests   = "rests"    // the rested voltages of a pulse test, see [RestOCV]
)

// RestOCVSettings control [RestOCV]. The zero value (or nil) selects the defaults.
type RestOCVSettings struct {
	// MinRest is the shortest rest, in seconds, whose end voltage is taken as an OCV
	// point. 0 means 1800 s. (HPPC protocols rest 1 h after each 10 % step for this
	// purpose: REFERENCE.md §2.7.)
	MinRest float64
	// MinPoints is the fewest such rests the record must hold. 0 means 3.
	MinPoints int
	// Hysteresis, when Max > 0, is the hysteresis of the type the curve is for: each
	// rested voltage v is taken as OCV(z) + h, with h the hysteresis state the model
	// itself holds there (replayed through the record's current from h = 0 at its
	// first sample, as [Simulate] starts), so the table stores v − h.
	Hysteresis cell.Hysteresis
}

func (s *RestOCVSettings) defaults() RestOCVSettings {
	var o RestOCVSettings
	if s != nil {
		o = *s
	}
	if o.MinRest == 0 {
		o.MinRest = 1800
	}
	if o.MinPoints == 0 {
		o.MinPoints = 3
	}
	return o
}

// RestOCV builds the open-circuit voltage table and a capacity from the long rests of
// an HPPC-style pulse test, for cells without a low-rate test.
//
// # Method
//
// State of charge comes from the charge counter (the lab's own when present) relative
// to the full charge at the test's start: z = 1 − (ah − min ah)/q, where the capacity q
// is the charge removed from that full charge to the deepest point of the test. q is the
// capacity at the test's own rates and rests, a lower bound of the low-rate capacity
// when the test ends at the cut-off (and smaller still when it stops before).
//
// A rest is a run of samples with |i| < q/100 A over which the counter does not move
// (a logging gap ends it). Each rest of at least MinRest seconds gives one OCV point at
// its state of charge. Its voltage is the end of the rest extrapolated through a single
// exponential fitted to the second half of the rest, v(t) = v∞ + b·exp(−t/τ), with τ
// searched from 1/20 of that half's span to the span. When the best τ lies at the span
// (the relaxation is too slow to extrapolate) or the fit points the wrong way, the last
// rested value is kept; RestPoint.Unrelaxed holds the extrapolated remainder (0 when not
// extrapolated). LFP relaxes for hours, so some relaxation is left in either case.
//
// The top of the table (z = 1) is the rested voltage before the first current, when the
// record starts at rest at full charge (how the rest is not known before the record);
// otherwise it is extrapolated linearly from the two highest points. The bottom (z = 0)
// is the rest at the deepest point when there is one; otherwise it is extrapolated
// linearly from the two lowest points, and Method says so. The table is made
// non-decreasing (isotonic regression). Knots are the points' states of charge;
// [table.Curve] interpolates linearly between them.
func RestOCV(rec Record, settings *RestOCVSettings) (*OCVResult, error) {
	s := settings.defaults()
	if err := rec.check(10); err != nil {
		return nil, err
	}
	if !(s.MinRest > 0) || s.MinPoints < 2 {
		return nil, fmt.Errorf("fit: rest OCV needs MinRest > 0 and MinPoints ≥ 2, got %g s and %d", s.MinRest, s.MinPoints)
	}
	if h := s.Hysteresis; !(h.Max >= 0 && h.Max <= 0.5) || !(h.Gamma >= 0) || math.IsInf(h.Gamma, 0) {
		return nil, fmt.Errorf("fit: hysteresis max %g V and rate %g must be finite and non-negative", h.Max, h.Gamma)
	}
	n := rec.Len()
	ah := rec.counter()
	lo, hi := slicesMin(ah), slicesMax(ah)
	iHi := 0
	for k := range ah {
		if ah[k] == hi {
			iHi = k
		}
	}
	q := hi - lo
	if !(q > 0) {
		return nil, fmt.Errorf("%w: %s: the test removes no charge, so it gives no state-of-charge scale", ErrData, rec.Name)
	}
	if err := rec.checkRate(q, 50); err != nil {
		return nil, err
	}
	z := make([]float64, n)
	for k := range z {
		z[k] = 1 - (ah[k]-lo)/q
	}
	restA := q / 100
	h := replayHysteresis(rec, s.Hysteresis, q)

	// Rest runs: |i| < restA and the counter still (no logging gap).
	type run struct{ a, b int } // samples [a, b)
	var runs []run
	still := func(k int) bool {
		if math.Abs(rec.Current[k]) >= restA {
			return false
		}
		if k > 0 {
			dt := rec.Time[k] - rec.Time[k-1]
			if math.Abs(ah[k]-ah[k-1]) > 0.002*q+restA*dt/3600 {
				return false
			}
		}
		return true
	}
	for k := 0; k < n; {
		if !still(k) {
			k++
			continue
		}
		j := k + 1
		for j < n && still(j) {
			j++
		}
		runs = append(runs, run{k, j})
		k = j
	}

	res := &OCVResult{CapacityAh: q, Source: SourceRests, Start: 0, End: n}
	var zs, vs, temps []float64
	extrap, kept := 0, 0
	for _, r := range runs {
		secs := rec.Time[r.b-1] - rec.Time[r.a]
		if secs < s.MinRest || r.a == 0 {
			continue
		}
		last := r.b - 1
		vInf, ok := restTail(rec.Time[r.a:r.b], rec.Voltage[r.a:r.b], rec.Current[r.a-1])
		rp := RestPoint{SOC: z[last], TemperatureK: rec.Temperature[last], Measured: rec.Voltage[last], RestSeconds: secs, window: -1}
		if ok {
			rp.Unrelaxed = vInf - rp.Measured
			extrap++
		} else {
			kept++
		}
		rp.Volts = rp.Measured + rp.Unrelaxed - h[last]
		res.Rests = append(res.Rests, rp)
		zs = append(zs, rp.SOC)
		vs = append(vs, rp.Volts)
		temps = append(temps, rp.TemperatureK)
	}
	if len(zs) < s.MinPoints {
		return nil, fmt.Errorf("%w: %s: %d rest(s) of at least %g s (rest means |current| < %.3g A), need %d to take an OCV curve from rested voltages",
			ErrData, rec.Name, len(zs), s.MinRest, restA, s.MinPoints)
	}
	xs, ys := sortedPairs(zs, vs)
	// Merge points closer than 0.005 in state of charge (mean).
	var mz, mv []float64
	for i := 0; i < len(xs); {
		j := i
		var sz, sv float64
		for j < len(xs) && xs[j]-xs[i] < 0.005 {
			sz += xs[j]
			sv += ys[j]
			j++
		}
		mz = append(mz, sz/float64(j-i))
		mv = append(mv, sv/float64(j-i))
		i = j
	}
	if len(mz) < 2 {
		return nil, fmt.Errorf("%w: %s: the long rests all sit at one state of charge (%.3f)", ErrData, rec.Name, mz[0])
	}
	var notes []string
	// Top: the rest before the first current, at full charge.
	topNote := ""
	if still(0) && z[0] > 0.999 {
		j := 0
		for j+1 < n && still(j+1) {
			j++
		}
		v := rec.Voltage[j] - h[j]
		if mz[len(mz)-1] > 0.995 {
			mz, mv = mz[:len(mz)-1], mv[:len(mv)-1]
		}
		mz, mv = append(mz, 1), append(mv, v)
		temps = append(temps, rec.Temperature[j])
		topNote = fmt.Sprintf("SOC 1 from the rested voltage before the first current (%.4f V after %.0f s logged at rest; the rest before the record is not known)",
			rec.Voltage[j], rec.Time[j]-rec.Time[0])
	} else if mz[len(mz)-1] < 0.995 {
		k := len(mz) - 1
		v := mv[k] + (mv[k]-mv[k-1])/(mz[k]-mz[k-1])*(1-mz[k])
		mz, mv = append(mz, 1), append(mv, v)
		topNote = "SOC 1 extrapolated linearly from the two highest rests (the record does not start at rest)"
	}
	// Bottom: the rest at the deepest point, else extrapolated.
	if mz[0] > 0.005 {
		v := mv[0] - (mv[1]-mv[0])/(mz[1]-mz[0])*mz[0]
		mz, mv = append([]float64{0}, mz...), append([]float64{v}, mv...)
		res.BottomExtrapolated = true
		notes = append(notes, fmt.Sprintf("SOC 0 extrapolated linearly from the two lowest rests (lowest at SOC %.3f): not measured", mz[1]))
	} else {
		mz[0] = 0
		notes = append(notes, fmt.Sprintf("SOC 0 is the rest at the deepest point of the test (sample %d)", iHi))
	}
	if topNote != "" {
		notes = append([]string{topNote}, notes...)
	}
	res.SOC = mz
	res.Volts = isotonic(mv)
	res.TemperatureK = median(temps)
	ex := "no rest tail could be extrapolated (relaxation too slow): last rested values, some relaxation left"
	if extrap > 0 {
		ex = fmt.Sprintf("%d extrapolated by an exponential fit of the rest tail (median remainder %.1f mV), %d kept at the last rested value",
			extrap, 1e3*median(unrelaxed(res.Rests)), kept)
	}
	hy := ""
	if s.Hysteresis.Max > 0 {
		hy = fmt.Sprintf("; corrected by the model's hysteresis state at each rest (max %.0f mV)", s.Hysteresis.Max*1e3)
	}
	res.Method = fmt.Sprintf("rested voltages of the pulse test: %d rests of at least %.0f min (%s)%s; %s; capacity %.4g Ah = charge removed from full to the deepest point at the test's own rates, a lower bound of the low-rate capacity",
		len(res.Rests), s.MinRest/60, ex, hy, strings.Join(notes, "; "), q)
	return res, nil
}

func unrelaxed(rs []RestPoint) []float64 {
	var out []float64
	for _, r := range rs {
		if r.Unrelaxed != 0 {
			out = append(out, r.Unrelaxed)
		}
	}
	return out
}

// restTail fits v = c + b·exp(−(t − t₀)/τ) to the second half of a rest by linear
// least squares in (c, b) for τ on a log grid from span/20 to span, and returns c when
// the best τ is inside the grid and the relaxation runs the way the preceding current
// says (up after a discharge, down after a charge).
func restTail(t, v []float64, before float64) (float64, bool) {
	tEnd := t[len(t)-1]
	t0 := t[0] + (tEnd-t[0])/2
	a := 0
	for a < len(t) && t[a] < t0 {
		a++
	}
	tt, vv := t[a:], v[a:]
	if len(tt) < 6 {
		return 0, false
	}
	span := tEnd - tt[0]
	const m = 40
	best, bestK := math.Inf(1), -1
	var bestC, bestB float64
	x := make([]float64, len(tt))
	for k := range m {
		tau := span / 20 * math.Pow(20, float64(k)/(m-1))
		for i := range tt {
			x[i] = math.Exp(-(tt[i] - tt[0]) / tau)
		}
		var mx, mv float64
		for i := range x {
			mx += x[i]
			mv += vv[i]
		}
		nn := float64(len(x))
		mx /= nn
		mv /= nn
		var sxx, sxv float64
		for i := range x {
			sxx += (x[i] - mx) * (x[i] - mx)
			sxv += (x[i] - mx) * (vv[i] - mv)
		}
		if sxx == 0 {
			continue
		}
		b := sxv / sxx
		c := mv - b*mx
		var sse float64
		for i := range x {
			e := c + b*x[i] - vv[i]
			sse += e * e
		}
		if sse < best {
			best, bestK, bestC, bestB = sse, k, c, b
		}
	}
	if bestK < 0 || bestK == m-1 {
		return 0, false
	}
	// After a discharge the voltage recovers upwards: b < 0 (c above the tail).
	if (before > 0 && bestB >= 0) || (before < 0 && bestB <= 0) {
		return 0, false
	}
	return bestC, true
}

// replayHysteresis returns the hysteresis state of the model at every sample of rec,
// from 0 at the first (cell.Pack.Step's update, capacity q Ah, coulombic efficiency 1).
func replayHysteresis(rec Record, hy cell.Hysteresis, q float64) []float64 {
	h := make([]float64, rec.Len())
	if hy.Max <= 0 {
		return h
	}
	for k := 1; k < rec.Len(); k++ {
		i := rec.Current[k]
		h[k] = h[k-1]
		if i == 0 {
			continue
		}
		a := math.Exp(-math.Abs(i * hy.Gamma * (rec.Time[k] - rec.Time[k-1]) / (3600 * q)))
		target := -hy.Max
		if i < 0 {
			target = hy.Max
		}
		h[k] = a*h[k-1] + (1-a)*target
	}
	return h
}
