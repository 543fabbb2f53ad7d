package cell

import "math"

// State is the dynamic state of a pack, stated per cell (every cell of a pack is
// assumed identical). The zero value is an empty pack at rest.
type State struct {
	SOC float64              // state of charge, fraction 0–1 (may stray slightly outside while estimating)
	V   [MaxBranches]float64 // RC branch voltages per cell, V; entries beyond the type's branch count stay 0
	H   float64              // hysteresis voltage per cell, V
}

// Pack is Series cells in series by Parallel in parallel, all of one [Type], optionally
// aged: CapacityFactor and ResistanceFactor scale the rated capacity and every
// resistance (state of health; 0 means 1, a new pack). A Pack is a small value; copy it
// freely. Its Type must have passed [Type.Validate].
type Pack struct {
	Type             *Type
	Series           int
	Parallel         int
	CapacityFactor   float64
	ResistanceFactor float64

	// lookup reads every branch's R and C in one table lookup; set by NewPack, nil
	// in a struct literal (see lookup).
	lookup *lookup
}

// NewPack returns a new (unaged) pack of series×parallel cells of t, validating the
// counts (1–1000 each).
//
// A pack from NewPack steps faster than one written as a struct literal when every RC
// branch parameter of t is a table on one state-of-charge grid and one set of
// temperatures: [Pack.Step] then finds the table segment once for all of them. Both
// give the same results, bit for bit. The fast path stays in use in copies of the pack
// and while the pack's Type and the type's branch tables are the ones NewPack saw;
// otherwise Step falls back to reading each parameter on its own.
func NewPack(t *Type, series, parallel int) (Pack, error) {
	p := Pack{Type: t, Series: series, Parallel: parallel}
	if err := p.Validate(); err != nil {
		return p, err
	}
	p.lookup = newLookup(t)
	return p, nil
}

// Prepared returns p with the grouped parameter lookup that [NewPack] builds, for code
// that steps a pack many times (simulations, forecasts, charge plans) and received it
// as a struct literal. It allocates at most once; the result steps bit for bit as p.
func (p Pack) Prepared() Pack {
	if p.lookup == nil || p.lookup.typ != p.Type {
		p.lookup = newLookup(p.Type)
	}
	return p
}

// Validate checks the pack's counts and health factors (not the type).
func (p Pack) Validate() error {
	if p.Type == nil {
		return Invalid("type", "is required")
	}
	if p.Series < 1 || p.Series > 1000 {
		return Invalid("series", "cells in series must be 1 to 1000, got %d", p.Series)
	}
	if p.Parallel < 1 || p.Parallel > 1000 {
		return Invalid("parallel", "cells in parallel must be 1 to 1000, got %d", p.Parallel)
	}
	if f := p.CapacityFactor; !Finite(f) || f < 0 || f > 2 {
		return Invalid("capacity_factor", "must be in (0, 2], got %g", f)
	}
	if f := p.ResistanceFactor; !Finite(f) || f < 0 || f > 20 {
		return Invalid("resistance_factor", "must be in (0, 20], got %g", f)
	}
	return nil
}

func (p Pack) capFactor() float64 {
	if p.CapacityFactor == 0 {
		return 1
	}
	return p.CapacityFactor
}

func (p Pack) resFactor() float64 {
	if p.ResistanceFactor == 0 {
		return 1
	}
	return p.ResistanceFactor
}

// CellCapacityAh returns the present capacity of one cell in Ah (rated × CapacityFactor).
func (p Pack) CellCapacityAh() float64 { return p.Type.CapacityAh * p.capFactor() }

// CapacityAh returns the present pack capacity in Ah.
func (p Pack) CapacityAh() float64 { return p.CellCapacityAh() * float64(p.Parallel) }

// RatedCapacityAh returns the rated (new) pack capacity in Ah.
func (p Pack) RatedCapacityAh() float64 { return p.Type.CapacityAh * float64(p.Parallel) }

// NominalVolts returns the nominal pack voltage.
func (p Pack) NominalVolts() float64 { return p.Type.NominalVolts * float64(p.Series) }

// NominalEnergyWh returns rated capacity × nominal voltage for the pack (REFERENCE.md E3).
func (p Pack) NominalEnergyWh() float64 { return p.RatedCapacityAh() * p.NominalVolts() }

// CellCurrent returns the current of one cell for a pack current i.
func (p Pack) CellCurrent(i float64) float64 { return i / float64(p.Parallel) }

// CellVolts returns the voltage of one cell for a pack voltage v.
func (p Pack) CellVolts(v float64) float64 { return v / float64(p.Series) }

// OCV returns the open-circuit voltage of one cell at state s and temperature tk (K),
// including hysteresis.
func (p Pack) OCV(s *State, tk float64) float64 { return p.Type.OCV.At(s.SOC, tk) + s.H }

// R0 returns the series resistance of one cell in Ω at state of charge z, temperature tk.
func (p Pack) R0(z, tk float64) float64 { return p.Type.R0.At(z, tk) * p.resFactor() }

// PackResistance returns the pack's series (ohmic) resistance in Ω: R0 × S/P.
func (p Pack) PackResistance(z, tk float64) float64 {
	return p.R0(z, tk) * float64(p.Series) / float64(p.Parallel)
}

// CellVoltage returns the terminal voltage of one cell carrying cell current ic (A) at
// state s and temperature tk (K). On charge (ic < 0) the series resistance is the
// type's [Type.ChargeR0] when it has one.
func (p Pack) CellVoltage(s *State, ic, tk float64) float64 {
	r0 := p.R0(s.SOC, tk)
	if ic < 0 && p.Type.ChargeR0 != nil {
		r0 = p.Type.ChargeR0.At(s.SOC, tk) * p.resFactor()
	}
	v := p.OCV(s, tk) - r0*ic
	for k := range p.Type.Branches {
		v -= s.V[k]
	}
	return v
}

// Voltage returns the pack terminal voltage for pack current i (A) at state s and
// temperature tk (K).
func (p Pack) Voltage(s *State, i, tk float64) float64 {
	return p.CellVoltage(s, p.CellCurrent(i), tk) * float64(p.Series)
}

// Step advances s by dt seconds with pack current i (A, positive = discharge) held
// constant, at temperature tk (K). The RC branches use their exact zero-order-hold
// solution, vₖ ← a·vₖ + Rₖ·(1−a)·u with u the branch's effective current
// ([Branch.Drive]: the cell current itself unless the branch is a charge-transfer
// branch); parameters are evaluated at the state of charge at the start of the step.
// Step does not clamp the state of charge. It does not allocate.
func (p Pack) Step(s *State, i, dt, tk float64) {
	t := p.Type
	ic := i / float64(p.Parallel)
	z := s.SOC
	rf := p.resFactor()
	if l := p.lookup; l != nil && l.typ == t && len(t.Branches) == l.nb {
		if !l.advanceOhmic2(s, t.Branches, ic, z, dt, tk, rf) {
			l.advance(s, t, ic, z, dt, tk, rf)
		}
	} else {
		for k := range t.Branches {
			b := &t.Branches[k]
			// Tables and constants are read directly rather than through Param.At,
			// which is too large to inline: one call fewer per parameter.
			var r, c float64
			switch {
			case b.R.Table != nil:
				r = b.R.Table.At(z, tk)
			case b.R.ActivationEnergy == 0:
				r = b.R.Value
			default:
				r = b.R.At(z, tk)
			}
			switch {
			case b.C.Table != nil:
				c = b.C.Table.At(z, tk)
			case b.C.ActivationEnergy == 0:
				c = b.C.Value
			default:
				c = b.C.At(z, tk)
			}
			r *= rf
			a := math.Exp(-dt / (r * c))
			u := ic
			if b.ExchangeCurrent != nil {
				u, _ = b.Drive(ic, z, tk)
			}
			s.V[k] = a*s.V[k] + r*(1-a)*u
		}
	}
	eta := 1.0
	if ic < 0 {
		eta = t.Efficiency()
	}
	q := 3600 * p.CellCapacityAh()
	if h := t.Hysteresis; h.Max > 0 && ic != 0 {
		// Plett 2004 Part 2 eq. 9, exact over the step for constant current.
		a := math.Exp(-math.Abs(eta * ic * h.Gamma * dt / q))
		target := -h.Max
		if ic < 0 {
			target = h.Max
		}
		s.H = a*s.H + (1-a)*target
	}
	s.SOC = z - eta*ic*dt/q
}

// Rest returns the state after the RC branches have relaxed completely (a long rest):
// the branch voltages are zero and the state of charge and hysteresis are unchanged.
func Rest(s State) State {
	s.V = [MaxBranches]float64{}
	return s
}

// Kelvin converts °C to K.
func Kelvin(celsius float64) float64 { return celsius + CelsiusOffset }
