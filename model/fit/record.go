package fit

import (
	"errors"
	"fmt"
	"math"
	"slices"
)

// ErrData is wrapped by every error about unusable input data (a record that is too
// short, not finite, out of order, implausible for the cell, or without the test
// content a step needs).
var ErrData = errors.New("fit: unusable data")

// Record is one lab test as parallel slices in SI units. Current is positive on
// discharge. The fitter never modifies a Record.
type Record struct {
	Name        string    // shown in errors and reports
	Time        []float64 // s, strictly increasing
	Current     []float64 // A, positive = discharge
	Voltage     []float64 // V, terminal
	Temperature []float64 // K, cell temperature
	// DischargedAh is the tester's own charge counter, Ah removed since the start
	// (optional; nil when absent). Pulse tests whose logger skipped the moves between
	// SOC levels need it: across a logging gap only the counter knows the charge moved.
	DischargedAh []float64
	// InitialSOC is the state of charge at the first sample; nil means fully charged,
	// which is how every test protocol of the shared datasets starts.
	InitialSOC *float64
}

// Len returns the number of samples.
func (r *Record) Len() int { return len(r.Time) }

// check validates lengths, finiteness and time order.
func (r *Record) check(minLen int) error {
	n := len(r.Time)
	if len(r.Current) != n || len(r.Voltage) != n || len(r.Temperature) != n || (r.DischargedAh != nil && len(r.DischargedAh) != n) {
		return fmt.Errorf("%w: %s: columns have different lengths (time %d, current %d, voltage %d, temperature %d, discharged_ah %d)",
			ErrData, r.Name, n, len(r.Current), len(r.Voltage), len(r.Temperature), len(r.DischargedAh))
	}
	if n < minLen {
		return fmt.Errorf("%w: %s: %d samples, need at least %d", ErrData, r.Name, n, minLen)
	}
	for k := range n {
		for _, c := range []struct {
			name string
			v    float64
		}{{"time", r.Time[k]}, {"current", r.Current[k]}, {"voltage", r.Voltage[k]}, {"temperature", r.Temperature[k]}} {
			if math.IsNaN(c.v) || math.IsInf(c.v, 0) {
				return fmt.Errorf("%w: %s: sample %d: %s is %v", ErrData, r.Name, k, c.name, c.v)
			}
		}
		if r.DischargedAh != nil && (math.IsNaN(r.DischargedAh[k]) || math.IsInf(r.DischargedAh[k], 0)) {
			return fmt.Errorf("%w: %s: sample %d: discharged_ah is %v", ErrData, r.Name, k, r.DischargedAh[k])
		}
		if r.Voltage[k] <= 0 {
			return fmt.Errorf("%w: %s: sample %d: voltage %g V is not positive", ErrData, r.Name, k, r.Voltage[k])
		}
		if r.Temperature[k] < 200 || r.Temperature[k] > 400 {
			return fmt.Errorf("%w: %s: sample %d: temperature %g K is outside 200–400 K (°C given as K?)", ErrData, r.Name, k, r.Temperature[k])
		}
		if k > 0 && !(r.Time[k] > r.Time[k-1]) {
			return fmt.Errorf("%w: %s: sample %d: time %g s does not follow %g s", ErrData, r.Name, k, r.Time[k], r.Time[k-1])
		}
	}
	if r.InitialSOC != nil && (math.IsNaN(*r.InitialSOC) || *r.InitialSOC < 0 || *r.InitialSOC > 1) {
		return fmt.Errorf("%w: %s: initial state of charge %g is not in [0, 1]", ErrData, r.Name, *r.InitialSOC)
	}
	return nil
}

// checkRate rejects currents implausible for a cell of capacity q Ah: more than
// maxC times the capacity per hour usually means milliamperes read as amperes.
func (r *Record) checkRate(q, maxC float64) error {
	for k, i := range r.Current {
		if math.Abs(i) > maxC*q {
			return fmt.Errorf("%w: %s: sample %d: current %g A is %.0fC for a %.3g Ah cell (more than %gC: is the current in mA?)",
				ErrData, r.Name, k, i, math.Abs(i)/q, q, maxC)
		}
	}
	return nil
}

// counter returns the charge removed since the first sample in Ah: the lab counter
// when present (re-zeroed), otherwise the backward zero-order-hold integral of the
// current, ah[k] = ah[k−1] + i[k]·(t[k]−t[k−1])/3600, which is how the shared datasets'
// counters relate to their samples (PROVENANCE.md of dmegc_inr18650 and pan18650pf).
func (r *Record) counter() []float64 {
	ah := make([]float64, r.Len())
	if r.DischargedAh != nil {
		for k, a := range r.DischargedAh {
			ah[k] = a - r.DischargedAh[0]
		}
		return ah
	}
	for k := 1; k < r.Len(); k++ {
		ah[k] = ah[k-1] + r.Current[k]*(r.Time[k]-r.Time[k-1])/3600
	}
	return ah
}

func (r *Record) initialSOC() float64 {
	if r.InitialSOC != nil {
		return *r.InitialSOC
	}
	return 1
}

func median(v []float64) float64 {
	if len(v) == 0 {
		return math.NaN()
	}
	s := append([]float64(nil), v...)
	slices.Sort(s)
	m := len(s) / 2
	if len(s)%2 == 1 {
		return s[m]
	}
	return 0.5 * (s[m-1] + s[m])
}
