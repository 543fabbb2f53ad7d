package ageing

import (
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// Throughput is the charge that has passed through a battery, split by direction.
type Throughput struct {
	DischargedAh float64 // charge removed (current > 0), Ah, ≥ 0
	ChargedAh    float64 // charge put in (current < 0), Ah, ≥ 0 (a magnitude)
}

// EquivalentFullCycles returns DischargedAh / ratedAh: the number of full discharges of
// a battery of rated capacity ratedAh that would move the same charge (common practice;
// see the package doc). It returns NaN if ratedAh is not positive.
func (t Throughput) EquivalentFullCycles(ratedAh float64) float64 {
	if !(ratedAh > 0) {
		return math.NaN()
	}
	return t.DischargedAh / ratedAh
}

// Integrate returns the charge throughput of a current history: timeS holds sample
// times in seconds (strictly increasing) and currentA the current at each sample in A,
// positive on discharge. The current is taken to vary linearly between samples
// (trapezoid rule); an interval in which the current changes sign is split at its zero
// crossing so that no discharge is netted against charge.
//
// A history of fewer than two samples has zero throughput. Non-finite values, times that
// do not increase and slices of different lengths are reported as a [*cell.FieldError].
func Integrate(timeS, currentA []float64) (Throughput, error) {
	var t Throughput
	if len(timeS) != len(currentA) {
		return t, cell.Invalid("current_amps", "has %d samples but time has %d", len(currentA), len(timeS))
	}
	for k := range timeS {
		if !cell.Finite(timeS[k]) {
			return t, cell.Invalid("time_seconds", "sample %d is not finite: %g", k, timeS[k])
		}
		if !cell.Finite(currentA[k]) {
			return t, cell.Invalid("current_amps", "sample %d is not finite: %g", k, currentA[k])
		}
		if k > 0 && !(timeS[k] > timeS[k-1]) {
			return t, cell.Invalid("time_seconds", "must increase: sample %d (%g s) follows %g s", k, timeS[k], timeS[k-1])
		}
	}
	var dis, chg float64 // A·s
	for k := 1; k < len(timeS); k++ {
		dt := timeS[k] - timeS[k-1]
		i0, i1 := currentA[k-1], currentA[k]
		switch {
		case i0 >= 0 && i1 >= 0:
			dis += 0.5 * (i0 + i1) * dt
		case i0 <= 0 && i1 <= 0:
			chg -= 0.5 * (i0 + i1) * dt
		default:
			// The current crosses zero at fraction f of the interval; each part is a triangle.
			f := i0 / (i0 - i1)
			a, b := 0.5*i0*f*dt, 0.5*i1*(1-f)*dt
			if i0 > 0 {
				dis += a
				chg -= b
			} else {
				chg -= a
				dis += b
			}
		}
	}
	t.DischargedAh = dis / 3600
	t.ChargedAh = chg / 3600
	return t, nil
}

// EquivalentFullCyclesSOC returns the equivalent full cycles of a state of charge
// history (fractions 0–1, in time order): the sum of all decreases of SOC, which is the
// discharged charge divided by the capacity the SOC is referred to (common practice).
// Non-finite values are reported as a [*cell.FieldError]; values may stray slightly
// outside 0–1 as estimates do, but not beyond −0.5 or 1.5.
func EquivalentFullCyclesSOC(soc []float64) (float64, error) {
	var efc float64
	for k, z := range soc {
		if !cell.Finite(z) || z < -0.5 || z > 1.5 {
			return 0, cell.Invalid("state_of_charge", "sample %d must be a finite fraction near 0–1, got %g", k, z)
		}
		if k > 0 && z < soc[k-1] {
			efc += soc[k-1] - z
		}
	}
	return efc, nil
}
