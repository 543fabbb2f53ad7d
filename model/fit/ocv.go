package fit

import (
	"fmt"
	"math"
	"sort"
)

// OCVSettings control [OCV]. The zero value (or nil) selects the defaults.
type OCVSettings struct {
	// Grid holds the state-of-charge knots of the table, strictly increasing within
	// [0, 1]. Nil selects [DefaultOCVGrid].
	Grid []float64
	// MaxRate is the largest C-rate accepted as a low-rate test. 0 means 0.1 (C/10).
	MaxRate float64
	// HalfWidth is the state-of-charge half-width of the local straight-line fit that
	// smooths each branch at a knot. 0 means 0.005.
	HalfWidth float64
	// Resistance, when not nil, is the DC resistance R(z) in Ω of the cell at the
	// test's temperature, used to correct a discharge-only curve for its IR drop,
	// OCV = v + I·R(z). When nil such a curve is returned uncorrected (and Method says
	// so). It is not used when both branches exist.
	Resistance func(z float64) float64
	// DischargeOnly ignores a charge branch, treating the test as discharge-only.
	DischargeOnly bool
}

// DefaultOCVGrid returns the default state-of-charge knots: 0 to 1 in steps of 0.01,
// plus 0.005 and 0.995 where the curve bends most.
func DefaultOCVGrid() []float64 {
	g := []float64{0, 0.005}
	for k := 1; k < 100; k++ {
		g = append(g, float64(k)/100)
	}
	return append(g, 0.995, 1)
}

// OCVResult is the open-circuit voltage curve and capacity identified from a low-rate
// test.
type OCVResult struct {
	SOC        []float64 // state-of-charge knots, fraction
	Volts      []float64 // OCV at the knots, V, non-decreasing
	CapacityAh float64   // charge removed by the low-rate discharge, Ah
	// TemperatureK is the median cell temperature over the branches used, K.
	TemperatureK float64
	// DischargeAmps and ChargeAmps are the median branch currents (A, charge
	// negative; ChargeAmps is 0 when the test has no charge branch).
	DischargeAmps, ChargeAmps float64
	// ChargeSOC is the state-of-charge span covered by the charge branch.
	ChargeSOC [2]float64
	// Method says how the curve was formed.
	Method string
	// Source is SourceLowRate ([OCV]) or SourceRests ([RestOCV]).
	Source string
	// Rests are the rested voltages the curve was taken from (SourceRests only):
	// Measured is the last rested sample, Unrelaxed the remainder extrapolated from the
	// rest's tail (0 when not extrapolated), Volts the table value before isotonic
	// smoothing (corrected for the hysteresis state when settings asked for it).
	Rests []RestPoint
	// BottomExtrapolated reports that the value at state of charge 0 was extrapolated
	// from the two lowest rests rather than measured (SourceRests only).
	BottomExtrapolated bool
	// Start and End bound the samples [Start, End) of the record that were used: from
	// the last sample before the discharge to the end of the charge branch (or of the
	// discharge).
	Start, End int
}

// branch is one constant-current part of a low-rate test.
type branch struct {
	start, end int // samples [start, end)
	amps       float64
}

// OCV identifies the open-circuit voltage curve and the capacity from a low-rate
// (C/20-style) test. The record must hold a constant-current discharge from full to the
// cut-off; the capacity is the charge it removes, and state of charge runs from 1 at its
// start to 0 at its end. A constant-current charge that follows the discharge (before
// any further discharge) is the charge branch.
//
// Where both branches exist the OCV is their mean, which cancels the IR drop and most
// of the polarisation and hysteresis, since both carry the same small current in
// opposite directions (common practice). Where only the discharge branch exists (above
// the state of charge a CC-only charge reaches), it is shifted by half the
// charge–discharge gap measured just below, so the curve stays continuous. A
// discharge-only test is corrected for its IR drop with settings.Resistance when given.
// The branches are smoothed by a local straight-line fit at each knot and the result
// is made non-decreasing by isotonic regression (pool adjacent violators).
//
// When the record has more than one discharge (several cycles), the first discharge
// that removes at least 95 % of the largest one is used.
func OCV(rec Record, settings *OCVSettings) (*OCVResult, error) {
	if err := rec.check(10); err != nil {
		return nil, err
	}
	var s OCVSettings
	if settings != nil {
		s = *settings
	}
	if s.Grid == nil {
		s.Grid = DefaultOCVGrid()
	}
	if s.MaxRate == 0 {
		s.MaxRate = 0.1
	}
	if s.HalfWidth == 0 {
		s.HalfWidth = 0.005
	}
	for k, z := range s.Grid {
		if math.IsNaN(z) || z < 0 || z > 1 || (k > 0 && !(z > s.Grid[k-1])) {
			return nil, fmt.Errorf("fit: OCV grid must increase strictly within [0, 1], got %v", s.Grid)
		}
	}
	ah := rec.counter()
	dis, chg := ccBranches(rec, ah)
	if len(dis) == 0 {
		return nil, notLowRate(fmt.Errorf("%w: %s: no constant-current discharge found (an OCV test needs a low-rate discharge from full to the cut-off)", ErrData, rec.Name))
	}
	maxAh := 0.0
	for _, b := range dis {
		maxAh = math.Max(maxAh, branchAh(ah, b))
	}
	var d branch
	for _, b := range dis {
		if branchAh(ah, b) >= 0.95*maxAh {
			d = b
			break
		}
	}
	q := branchAh(ah, d)
	if q <= 0 {
		return nil, fmt.Errorf("%w: %s: the discharge removes no charge", ErrData, rec.Name)
	}
	if err := rec.checkRate(q, 50); err != nil {
		return nil, err
	}
	if rate := d.amps / q; rate > s.MaxRate {
		return nil, notLowRate(fmt.Errorf("%w: %s: discharge at %.3gC is not a low-rate test (at most %gC)", ErrData, rec.Name, rate, s.MaxRate))
	}
	ah0 := ah[max(d.start-1, 0)]
	ahEnd := ah[d.end-1]
	res := &OCVResult{CapacityAh: q, Source: SourceLowRate, DischargeAmps: d.amps, SOC: append([]float64(nil), s.Grid...), Start: max(d.start-1, 0), End: d.end}

	var dz, dv, temps []float64
	for k := d.start; k < d.end; k++ {
		if inBranch(rec.Current[k], d.amps) {
			dz = append(dz, 1-(ah[k]-ah0)/q)
			dv = append(dv, rec.Voltage[k])
			temps = append(temps, rec.Temperature[k])
		}
	}
	vd := smoothBranch(dz, dv, s.Grid, s.HalfWidth)

	// The charge branch: the first charge after the discharge and before any later
	// discharge of more than 5 % of the capacity.
	var c *branch
	for i := range chg {
		if chg[i].start < d.end {
			continue
		}
		later := false
		for _, b := range dis {
			if b.start >= d.end && b.start < chg[i].start && branchAh(ah, b) > 0.05*q {
				later = true
			}
		}
		if !later {
			c = &chg[i]
		}
		break
	}
	var vc []float64
	if c != nil && !s.DischargeOnly {
		if rate := -c.amps / q; rate > s.MaxRate {
			return nil, fmt.Errorf("%w: %s: charge at %.3gC is not a low-rate test (at most %gC)", ErrData, rec.Name, rate, s.MaxRate)
		}
		var cz, cv []float64
		for k := c.start; k < c.end; k++ {
			if inBranch(rec.Current[k], c.amps) {
				cz = append(cz, (ahEnd-ah[k])/q)
				cv = append(cv, rec.Voltage[k])
				temps = append(temps, rec.Temperature[k])
			}
		}
		if len(cz) >= 10 {
			vc = smoothBranch(cz, cv, s.Grid, s.HalfWidth)
			res.ChargeAmps = c.amps
			res.ChargeSOC = [2]float64{slicesMin(cz), slicesMax(cz)}
			res.End = c.end
		}
	}
	res.TemperatureK = median(temps)
	v := make([]float64, len(s.Grid))
	switch {
	case vc != nil:
		// Half the gap where both exist, taken near each end of the charge branch's span,
		// continues the mean where only the discharge branch exists.
		gapAt := func(lo, hi float64) float64 {
			var g []float64
			for k, z := range s.Grid {
				if z >= lo && z <= hi && !math.IsNaN(vc[k]) && !math.IsNaN(vd[k]) {
					g = append(g, (vc[k]-vd[k])/2)
				}
			}
			return median(g)
		}
		zlo, zhi := res.ChargeSOC[0], res.ChargeSOC[1]
		gHi := gapAt(zhi-0.10, zhi-0.02)
		gLo := gapAt(zlo+0.02, zlo+0.10)
		for k, z := range s.Grid {
			switch {
			case !math.IsNaN(vc[k]) && !math.IsNaN(vd[k]) && z >= zlo+0.01 && z <= zhi-0.01:
				v[k] = (vc[k] + vd[k]) / 2
			case z > zhi-0.01 && !math.IsNaN(gHi):
				v[k] = vd[k] + gHi
			case z < zlo+0.01 && !math.IsNaN(gLo):
				v[k] = vd[k] + gLo
			default:
				v[k] = vd[k]
			}
		}
		res.Method = fmt.Sprintf("mean of C/%.0f discharge and charge branches over SOC %.2f–%.2f; discharge branch shifted by half the gap outside",
			q/d.amps, zlo, zhi)
	case s.Resistance != nil:
		for k, z := range s.Grid {
			v[k] = vd[k] + d.amps*s.Resistance(z)
		}
		res.Method = fmt.Sprintf("C/%.0f discharge branch corrected for the IR drop with the fitted DC resistance", q/d.amps)
	default:
		copy(v, vd)
		res.Method = fmt.Sprintf("C/%.0f discharge branch, not corrected for the IR drop", q/d.amps)
	}
	for k := range v {
		if math.IsNaN(v[k]) {
			return nil, fmt.Errorf("%w: %s: the discharge does not cover state of charge %g", ErrData, rec.Name, s.Grid[k])
		}
	}
	res.Volts = isotonic(v)
	return res, nil
}

// ccBranches finds the runs of constant discharge and charge current in a record.
// A run is a maximal stretch of samples of one sign whose magnitude exceeds 2 % of the
// record's largest; its current is the run's median.
func ccBranches(rec Record, ah []float64) (dis, chg []branch) {
	imax := 0.0
	for _, i := range rec.Current {
		imax = math.Max(imax, math.Abs(i))
	}
	thr := 0.02 * imax
	sgn := func(i float64) int {
		switch {
		case i > thr:
			return 1
		case i < -thr:
			return -1
		}
		return 0
	}
	n := rec.Len()
	for k := 0; k < n; {
		sg := sgn(rec.Current[k])
		j := k + 1
		for j < n && sgn(rec.Current[j]) == sg {
			j++
		}
		if sg != 0 && j-k >= 3 {
			b := branch{start: k, end: j, amps: median(rec.Current[k:j])}
			if sg > 0 {
				dis = append(dis, b)
			} else {
				chg = append(chg, b)
			}
		}
		k = j
	}
	return dis, chg
}

func branchAh(ah []float64, b branch) float64 {
	return math.Abs(ah[b.end-1] - ah[max(b.start-1, 0)])
}

// inBranch reports whether current i belongs to the constant-current part of a branch
// of current amps (within 25 %; this drops a CV tail).
func inBranch(i, amps float64) bool { return math.Abs(i-amps) <= 0.25*math.Abs(amps) }

// smoothBranch evaluates a branch v(z) at the grid knots by a local straight-line fit
// over |z − knot| ≤ w (widened up to 8·w when fewer than 3 samples fall inside). Knots
// outside the branch's span are NaN.
func smoothBranch(z, v, grid []float64, w float64) []float64 {
	zs, vs := sortedPairs(z, v)
	lo, hi := zs[0], zs[len(zs)-1]
	out := make([]float64, len(grid))
	for k, g := range grid {
		out[k] = math.NaN()
		if g < lo-w || g > hi+w {
			continue
		}
		for ww := w; ww <= 8*w; ww *= 2 {
			a := sort.SearchFloat64s(zs, g-ww)
			b := sort.SearchFloat64s(zs, g+ww+1e-15)
			if b-a < 3 {
				continue
			}
			out[k] = lineAt(zs[a:b], vs[a:b], g)
			break
		}
	}
	return out
}

// lineAt fits v = α + β·z by least squares and returns its value at g.
func lineAt(z, v []float64, g float64) float64 {
	var mz, mv float64
	for i := range z {
		mz += z[i]
		mv += v[i]
	}
	n := float64(len(z))
	mz /= n
	mv /= n
	var szz, szv float64
	for i := range z {
		szz += (z[i] - mz) * (z[i] - mz)
		szv += (z[i] - mz) * (v[i] - mv)
	}
	if szz == 0 {
		return mv
	}
	return mv + szv/szz*(g-mz)
}

// isotonic returns the non-decreasing least-squares fit to y (pool adjacent violators;
// M. Ayer et al., Ann. Math. Stat. 26(4):641–647, 1955).
func isotonic(y []float64) []float64 {
	type block struct {
		sum float64
		n   int
	}
	var bs []block
	for _, v := range y {
		bs = append(bs, block{v, 1})
		for len(bs) > 1 {
			a, b := bs[len(bs)-2], bs[len(bs)-1]
			if a.sum/float64(a.n) <= b.sum/float64(b.n) {
				break
			}
			bs = bs[:len(bs)-2]
			bs = append(bs, block{a.sum + b.sum, a.n + b.n})
		}
	}
	out := make([]float64, 0, len(y))
	for _, b := range bs {
		for range b.n {
			out = append(out, b.sum/float64(b.n))
		}
	}
	return out
}

func slicesMin(v []float64) float64 {
	m := math.Inf(1)
	for _, x := range v {
		m = math.Min(m, x)
	}
	return m
}

func slicesMax(v []float64) float64 {
	m := math.Inf(-1)
	for _, x := range v {
		m = math.Max(m, x)
	}
	return m
}
