package sim

import (
	"errors"
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// ErrPowerLimit reports a power demand above the most the pack can deliver in its
// present state, E²/(4R) (maximum power transfer; the pack's Thevenin source E behind R).
var ErrPowerLimit = errors.New("sim: power demand exceeds what the pack can deliver")

// Circuit is a pack held at one temperature, the object the load laws are solved on and
// stepped. Its Pack must have a validated type. A Circuit is a small value, safe for
// concurrent use; the states it advances belong to the caller.
type Circuit struct {
	Pack   cell.Pack
	Kelvin float64 // cell temperature, K
}

// Thevenin returns the pack's source voltage e (V) and series resistance r (Ω) at state
// s, so that the terminal voltage at pack current i is e − r·i. The source voltage is
// S·(OCV + h − Σvₖ) and the resistance R0·S/P, or ChargeR0·S/P when charging is true
// and the type has a separate series resistance on charge (as [cell.Pack.CellVoltage]).
func (c Circuit) Thevenin(s *cell.State, charging bool) (e, r float64) {
	p := c.Pack
	ec := p.OCV(s, c.Kelvin)
	for k := range p.Type.Branches {
		ec -= s.V[k]
	}
	r0 := p.R0(s.SOC, c.Kelvin)
	if charging && p.Type.ChargeR0 != nil {
		rf := p.ResistanceFactor
		if rf == 0 {
			rf = 1
		}
		r0 = p.Type.ChargeR0.At(s.SOC, c.Kelvin) * rf
	}
	ns := float64(p.Series)
	return ec * ns, r0 * ns / float64(p.Parallel)
}

// Charges reports whether the segment's demand charges the pack (a negative current or
// power); a resistance always discharges it.
func (sg Segment) Charges() bool { return sg.Kind != Resistance && sg.Value < 0 }

// Draw returns the pack current (A, positive = discharge) that a demand of the given
// kind and value draws from a Thevenin source e (V) behind r (Ω), exactly: see the
// package documentation. It returns [ErrPowerLimit] for a discharging power the source
// cannot deliver (above e²/(4r), or any discharging power when e ≤ 0). It panics on an
// unknown kind.
func Draw(kind Kind, value, e, r float64) (float64, error) {
	switch kind {
	case Current:
		return value, nil
	case Resistance:
		return e / (r + value), nil
	case Power:
		if value == 0 {
			return 0, nil
		}
		if value > 0 && e <= 0 {
			return 0, ErrPowerLimit
		}
		if r == 0 {
			return value / e, nil
		}
		disc := e*e - 4*r*value
		if disc < 0 {
			return 0, ErrPowerLimit
		}
		// (e − √disc)/(2r) rewritten to avoid cancellation when r·P ≪ e².
		return 2 * value / (e + math.Sqrt(disc)), nil
	}
	panic("sim: unknown load kind")
}

// Current returns the pack current (A) the demand draws at state s. See [Draw].
func (c Circuit) Current(s *cell.State, kind Kind, value float64) (float64, error) {
	e, r := c.Thevenin(s, Segment{Kind: kind, Value: value}.Charges())
	return Draw(kind, value, e, r)
}

// Advance steps s forward by dt seconds under the demand and returns the pack current
// held over the step: the value of a current demand, or for a power or resistance
// demand the current it draws at the state half-way through the step (see the package
// documentation). On [ErrPowerLimit], s is left unchanged. Advance does not allocate.
func (c Circuit) Advance(s *cell.State, kind Kind, value, dt float64) (float64, error) {
	if kind == Current {
		c.step(s, value, dt)
		return value, nil
	}
	i, err := c.Current(s, kind, value)
	if err != nil {
		return 0, err
	}
	mid := *s
	c.step(&mid, i, dt/2)
	if i, err = c.Current(&mid, kind, value); err != nil {
		return 0, err
	}
	c.step(s, i, dt)
	return i, nil
}

// step is [cell.Pack.Step] with the RC parameters read at the mid-step state of charge.
// Pack.Step reads its parameters at the state of charge it is given and then applies
// exact coulomb counting to it; so the state of charge is shifted to the mid-step value
// for the call, and the coulomb-counting result is restored from the true start value.
func (c Circuit) step(s *cell.State, i, dt float64) {
	p := c.Pack
	ic := i / float64(p.Parallel)
	eta := 1.0
	if ic < 0 {
		eta = p.Type.Efficiency()
	}
	dz := eta * ic * dt / (3600 * p.CellCapacityAh())
	z0 := s.SOC
	s.SOC = z0 - dz/2
	p.Step(s, i, dt, c.Kelvin)
	s.SOC = z0 - dz
}
