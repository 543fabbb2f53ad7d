package estimate

import (
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// MaxStates is the largest number of filter states: SOC, three RC branch voltages,
// hysteresis, capacity factor and resistance factor.
const MaxStates = maxDim

// Counters count what an estimator did with the samples given to it.
type Counters struct {
	Samples  int64 `json:"samples"`  // samples given to Update
	Updates  int64 `json:"updates"`  // measurement updates applied (EKF)
	Rejected int64 `json:"rejected"` // voltages rejected by the innovation gate
	Forced   int64 `json:"forced"`   // measurements accepted after repeated rejections
	Invalid  int64 `json:"invalid"`  // samples ignored as NaN, infinite or saturated
	Errors   int64 `json:"errors"`   // samples refused with an error
	Repairs  int64 `json:"repairs"`  // covariance repairs
}

// State is the complete state of an estimator, a plain value to persist and to give
// back to Restore, which then continues exactly as the original would have. Voltages
// are per cell.
//
// The covariance is stored in the filter's own layout: index 0 is the SOC, then one
// index per RC branch, then the hysteresis voltage if the type has one, then the
// capacity and resistance factors if Health is set; Dim is the number of states in use
// and entries beyond it are zero. A [Counter] keeps only the SOC variance, at [0][0].
type State struct {
	// Layout, checked by Restore against the estimator.
	Dim        int  `json:"dim"`
	Branches   int  `json:"branches"`
	Hysteresis bool `json:"hysteresis"`
	Health     bool `json:"health"`

	SOC              float64                       `json:"soc"`               // internal, may stray to [−0.05, 1.05]
	BranchVolts      [cell.MaxBranches]float64     `json:"branch_volts"`      // V per cell
	HysteresisVolts  float64                       `json:"hysteresis_volts"`  // V per cell
	CapacityFactor   float64                       `json:"capacity_factor"`   // relative to rated
	ResistanceFactor float64                       `json:"resistance_factor"` // relative to rated
	Covariance       [MaxStates][MaxStates]float64 `json:"covariance"`        // see the layout above

	Started         bool    `json:"started"`          // a sample has been processed
	Time            float64 `json:"time"`             // s, time of the last sample
	HeldCurrent     float64 `json:"held_current"`     // A, current of the last sample
	HeldTemperature float64 `json:"held_temperature"` // K, temperature of the last sample
	RestSeconds     float64 `json:"rest_seconds"`     // time spent below the rest current
	RejectRun       int     `json:"reject_run"`       // consecutive implausible innovations so far
	InnovationMean  float64 `json:"innovation_mean"`  // running mean of the normalised innovation

	Counters Counters `json:"counters"`
}

// layout describes which states a filter carries.
type layout struct {
	n, nb      int
	ih, ic, ir int // index of hysteresis, capacity, resistance; −1 if absent
}

func newLayout(t *cell.Type, health bool) layout {
	l := layout{nb: len(t.Branches), ih: -1, ic: -1, ir: -1}
	l.n = 1 + l.nb
	if t.Hysteresis.Max > 0 {
		l.ih = l.n
		l.n++
	}
	if health {
		l.ic, l.ir = l.n, l.n+1
		l.n += 2
	}
	return l
}

// check reports whether st matches the layout and holds usable numbers.
func (l layout) check(st *State) error {
	if st.Dim != l.n || st.Branches != l.nb || st.Hysteresis != (l.ih >= 0) || st.Health != (l.ic >= 0) {
		return cell.Invalid("state", "layout (dim %d, %d branches, hysteresis %v, health %v) does not match the estimator (dim %d, %d branches, hysteresis %v, health %v)",
			st.Dim, st.Branches, st.Hysteresis, st.Health, l.n, l.nb, l.ih >= 0, l.ic >= 0)
	}
	if !cell.Finite(st.SOC) || st.SOC < socMin || st.SOC > socMax {
		return cell.Invalid("state.soc", "must be in [%g, %g], got %g", socMin, socMax, st.SOC)
	}
	for k, v := range st.BranchVolts {
		if !cell.Finite(v) || math.Abs(v) > 10 || (k >= l.nb && v != 0) {
			return cell.Invalid("state.branch_volts", "branch %d voltage %g V is not usable", k, v)
		}
	}
	if !cell.Finite(st.HysteresisVolts) || math.Abs(st.HysteresisVolts) > 1 {
		return cell.Invalid("state.hysteresis_volts", "must be finite and within ±1 V, got %g", st.HysteresisVolts)
	}
	if f := st.CapacityFactor; !cell.Finite(f) || f < capMin || f > capMax {
		return cell.Invalid("state.capacity_factor", "must be in [%g, %g], got %g", capMin, capMax, f)
	}
	if f := st.ResistanceFactor; !cell.Finite(f) || f < resMin || f > resMax {
		return cell.Invalid("state.resistance_factor", "must be in [%g, %g], got %g", resMin, resMax, f)
	}
	for _, v := range []float64{st.Time, st.HeldCurrent, st.HeldTemperature, st.RestSeconds, st.InnovationMean} {
		if !cell.Finite(v) {
			return cell.Invalid("state", "time, held inputs and rest time must be finite")
		}
	}
	if st.RestSeconds < 0 || st.RejectRun < 0 {
		return cell.Invalid("state", "rest time and rejection run must be non-negative")
	}
	f := kf{n: l.n, p: st.Covariance}
	for i := range MaxStates {
		for j := range MaxStates {
			v := st.Covariance[i][j]
			if !cell.Finite(v) || ((i >= l.n || j >= l.n) && v != 0) || v != st.Covariance[j][i] {
				return cell.Invalid("state.covariance", "must be finite, symmetric and zero outside the first %d rows and columns", l.n)
			}
		}
	}
	if !f.positiveDefinite() {
		return cell.Invalid("state.covariance", "is not positive definite")
	}
	return nil
}

// Bounds on the internal states.
const (
	socMin, socMax = -0.05, 1.05
	capMin, capMax = 0.2, 2.0
	resMin, resMax = 0.2, 20.0
)
