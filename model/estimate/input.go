package estimate

import (
	"errors"
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// Errors returned by Update for a sample that cannot be used. The state is unchanged.
var (
	// ErrTimeOrder reports a sample whose time does not increase strictly.
	ErrTimeOrder = errors.New("time does not increase")
	// ErrImplausible reports a current or temperature implausible for the type, most
	// likely a unit mistake (milliamperes as amperes, °C as kelvin).
	ErrImplausible = errors.New("implausible sample")
)

// Temperatures the model accepts, K (cell.CheckCelsius: −60 to 100 °C).
const (
	minKelvin = -60 + cell.CelsiusOffset
	maxKelvin = 100 + cell.CelsiusOffset
)

// clock is the input bookkeeping both estimators share: the time of the last sample,
// the held inputs and the rest timer.
type clock struct {
	started     bool
	time        float64 // s, last accepted sample
	heldCurrent float64 // A, last sample's current (SampleAndHold)
	heldTemp    float64 // K, last sample's temperature (SampleAndHold)
	restSeconds float64 // time the current has been below the rest threshold
}

// segment is one interval over which current and temperature are constant. gap marks
// the unlogged part of an interval longer than MaxHold, assumed to be a rest.
type segment struct {
	i, dt, tk float64
	gap       bool
}

// plan is how one sample advances the model.
type plan struct {
	seg   [2]segment
	n     int
	flags Flags
	clk   clock // the clock after the sample
}

// admit counts sample s and classifies it with check, counting a refused or invalid
// one; ok is false when the sample must not change the state.
func (c *config) admit(s Sample, clk *clock, n *Counters) (flags Flags, ok bool, err error) {
	n.Samples++
	flags, err = c.check(s, clk)
	switch {
	case err != nil:
		n.Errors++
	case flags&FlagInvalid != 0:
		n.Invalid++
	default:
		return flags, true, nil
	}
	return flags, false, err
}

// unusable marks an estimate of the unchanged state for a sample that was not used.
func unusable(e Estimate) Estimate {
	e.Voltage, e.Innovation = math.NaN(), math.NaN()
	return e
}

// check classifies a sample: an error for a sample that must be refused, FlagInvalid
// for one that must be ignored, 0 for a usable one.
func (c *config) check(s Sample, clk *clock) (Flags, error) {
	if !cell.Finite(s.Time) || !cell.Finite(s.Current) || !cell.Finite(s.Voltage) || !cell.Finite(s.Temperature) {
		return FlagInvalid, nil
	}
	if math.Abs(s.Current) >= c.iSat || s.Voltage <= c.vMin || s.Voltage >= c.vMax {
		return FlagInvalid, nil
	}
	if math.Abs(s.Current) > c.maxCurrent {
		return 0, fmt.Errorf("%w: current %g A exceeds %g A, %g times the type's largest C-rate (milliamperes passed as amperes?)",
			ErrImplausible, s.Current, c.maxCurrent, c.curFactor)
	}
	if s.Temperature < minKelvin || s.Temperature > maxKelvin {
		return 0, fmt.Errorf("%w: temperature %g K is outside %g to %g K (-60 to 100 °C; °C passed as kelvin?)",
			ErrImplausible, s.Temperature, minKelvin, maxKelvin)
	}
	if clk.started && !(s.Time > clk.time) {
		if s.Time == clk.time {
			return 0, fmt.Errorf("%w: duplicated timestamp %g s", ErrTimeOrder, s.Time)
		}
		return 0, fmt.Errorf("%w: time %g s is before the previous sample's %g s", ErrTimeOrder, s.Time, clk.time)
	}
	return 0, nil
}

// plan splits the interval since the previous sample into segments of constant current
// and updates the rest timer. A current is never held longer than maxHold; the rest of
// a longer interval is a rest at zero current.
func (c *config) plan(s Sample, clk clock) plan {
	var p plan
	if clk.started {
		dt := s.Time - clk.time
		hold := min(dt, c.maxHold)
		if dt > c.maxHold {
			p.flags |= FlagGap
		}
		if c.timing == SampleAndHold {
			p.seg[0] = segment{clk.heldCurrent, hold, clk.heldTemp, false}
			p.n = 1
			if dt > hold {
				p.seg[1] = segment{0, dt - hold, clk.heldTemp, true}
				p.n = 2
			}
		} else {
			if dt > hold {
				p.seg[p.n] = segment{0, dt - hold, s.Temperature, true}
				p.n++
			}
			p.seg[p.n] = segment{s.Current, hold, s.Temperature, false}
			p.n++
		}
		for _, sg := range p.seg[:p.n] {
			if math.Abs(sg.i) <= c.restCurrent {
				clk.restSeconds += sg.dt
			} else {
				clk.restSeconds = 0
			}
		}
	}
	if math.Abs(s.Current) > c.restCurrent {
		clk.restSeconds = 0
	} else if clk.restSeconds >= c.restDuration {
		p.flags |= FlagRest
	}
	clk.started = true
	clk.time = s.Time
	clk.heldCurrent = s.Current
	clk.heldTemp = s.Temperature
	p.clk = clk
	return p
}

// tempFlag reports whether temperature tk (K) is outside what type t is modelled for:
// its discharge window (charge window when charging), or more than 5 K beyond the
// temperatures of its OCV table when that has several.
func tempFlag(t *cell.Type, tmin, tmax, i, tk float64) Flags {
	c := tk - cell.CelsiusOffset
	lo, hi := t.Limits.DischargeMinCelsius, t.Limits.DischargeMaxCelsius
	if i < 0 && t.Rechargeable() {
		lo, hi = t.Limits.ChargeMinCelsius, t.Limits.ChargeMaxCelsius
	}
	if c < lo || c > hi || tk < tmin-5 || tk > tmax+5 {
		return FlagTemperatureRange
	}
	return 0
}

// ocvTempRange returns the temperature range of the type's OCV table, or ±Inf when it
// has a single temperature (which the model applies everywhere).
func ocvTempRange(t *cell.Type) (lo, hi float64) {
	ts := t.OCV.Temps()
	if len(ts) < 2 {
		return math.Inf(-1), math.Inf(1)
	}
	return ts[0], ts[len(ts)-1]
}
