package fit

import (
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// SimSettings control [Simulate]. The zero value (or nil) selects the defaults.
type SimSettings struct {
	// BlockAverage compares with voltages that are averages over each sample interval
	// (as the pan18650pf drive cycles are: PROVENANCE.md), by returning the exact
	// average of the modelled voltage over the interval instead of its end value. The
	// OCV term is taken at the interval's mid state of charge.
	BlockAverage bool
}

// Simulate writes into dst the terminal voltage of one cell of type t driven by the
// record's current and temperature, from a rested start at state of charge z0, and
// returns dst (allocated when nil or short). The current i[k] is held over
// (t[k−1], t[k]] (backward zero-order hold, the convention of the shared datasets'
// counters) and the state advances by [cell.Pack.Step]; state of charge follows the
// current (the lab counter is not used). t must have passed [cell.Type.Validate].
func Simulate(dst []float64, t *cell.Type, rec Record, z0 float64, settings *SimSettings) []float64 {
	n := rec.Len()
	if cap(dst) < n {
		dst = make([]float64, n)
	}
	dst = dst[:n]
	if n == 0 {
		return dst
	}
	block := settings != nil && settings.BlockAverage
	p := cell.Pack{Type: t, Series: 1, Parallel: 1}
	st := cell.State{SOC: z0}
	dst[0] = p.Voltage(&st, rec.Current[0], rec.Temperature[0])
	for k := 1; k < n; k++ {
		dt := rec.Time[k] - rec.Time[k-1]
		i, tk := rec.Current[k], rec.Temperature[k]
		if !block {
			p.Step(&st, i, dt, tk)
			dst[k] = p.Voltage(&st, i, tk)
			continue
		}
		prev := st
		p.Step(&st, i, dt, tk)
		zm := 0.5 * (prev.SOC + st.SOC)
		v := t.OCV.At(zm, tk) + st.H - p.R0(prev.SOC, tk)*i
		for j := range t.Branches {
			b := &t.Branches[j]
			r := b.R.At(prev.SOC, tk)
			tau := r * b.C.At(prev.SOC, tk)
			u, _ := b.Drive(i, prev.SOC, tk)
			vss := r * u
			// Mean over the interval of vss + (v0 − vss)·exp(−s/τ).
			v -= vss + (prev.V[j]-vss)*tau/dt*(-math.Expm1(-dt/tau))
		}
		dst[k] = v
	}
	return dst
}

// VoltageError returns the root-mean-square and largest absolute difference between
// model and measured over the samples whose time is at least from (s), in volts, and
// the number of samples compared.
func VoltageError(model []float64, rec Record, from float64) (rmse, maxAbs float64, n int) {
	var ss float64
	for k := range model {
		if rec.Time[k] < from {
			continue
		}
		e := model[k] - rec.Voltage[k]
		ss += e * e
		maxAbs = math.Max(maxAbs, math.Abs(e))
		n++
	}
	if n == 0 {
		return math.NaN(), math.NaN(), 0
	}
	return math.Sqrt(ss / float64(n)), maxAbs, n
}
