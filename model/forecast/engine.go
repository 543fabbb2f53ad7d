package forecast

import (
	"math"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/sim"
)

// engine runs one forecast: adaptive steps, the crossing search, and the bookkeeping.
// It holds no slices of its own except the optional trace.
type engine struct {
	c       sim.Circuit
	typ     *cell.Type
	load    *sim.Load
	set     *Settings
	ns, np  float64 // cells in series, in parallel
	cut     float64 // cut-off, V per cell
	floor   float64 // floor state of charge
	qc      float64 // cell charge, C
	eta     float64 // coulombic efficiency on charge
	rf      float64 // resistance factor (ageing)
	horizon float64 // s
	detect  bool    // stop at the cut-off / floor (false while tracing)

	peakCellAmps float64
	evals        int
}

func newEngine(prob *Problem, set *Settings) engine {
	p := prob.Pack
	rf := p.ResistanceFactor
	if rf == 0 {
		rf = 1
	}
	return engine{
		c: prob.Circuit(), typ: p.Type, load: &prob.Load, set: set,
		ns: float64(p.Series), np: float64(p.Parallel),
		cut: prob.CutoffVolts(), floor: prob.SOCFloor,
		qc: 3600 * p.CellCapacityAh(), eta: p.Type.Efficiency(), rf: rf,
		horizon: set.Horizon, detect: true,
	}
}

// point is the pack at one instant under one segment's demand: source voltage e and
// resistance r, the current i the demand draws and the terminal voltage v. ok is false
// when a power demand cannot be met (i and v are then those of the maximum-power point).
type point struct {
	e, r, i, v float64
	ok         bool
}

func (g *engine) eval(s *cell.State, sg sim.Segment) point {
	e, r := g.c.Thevenin(s, sg.Charges())
	i, err := sim.Draw(sg.Kind, sg.Value, e, r)
	if err != nil {
		return point{e: e, r: r, i: e / (2 * r), v: e / 2}
	}
	return point{e: e, r: r, i: i, v: e - r*i, ok: true}
}

// margin is positive while the discharge may go on: the smaller of the cell voltage's
// height above the cut-off (V; only while discharging) and the state of charge's above
// the floor; −Inf when a power demand cannot be met.
func (g *engine) margin(s *cell.State, pt point) float64 {
	if !pt.ok {
		return math.Inf(-1)
	}
	m := s.SOC - g.floor
	if pt.i > 0 {
		m = math.Min(m, pt.v/g.ns-g.cut)
	}
	return m
}

// classify names the stop at a state whose margin is (about) zero or below.
func (g *engine) classify(s *cell.State, pt point) Status {
	switch {
	case !pt.ok:
		return StatusPowerLimit
	case pt.i > 0 && pt.v/g.ns-g.cut <= s.SOC-g.floor:
		return StatusCutoff
	case g.floor == 0:
		return StatusEmpty
	}
	return StatusSOCFloor
}

// stepSize returns the next step length (package documentation, "Method"). The RC
// branches' rate is their exact rate (Rₖ·i − vₖ)/(RₖCₖ) at the start of a segment, and
// afterwards their mean rate over the previous step, from v (the branch voltages at its
// start) and h (its length; 0 at the start of a segment). The mean rate over-estimates a
// settling branch's rate (shorter steps: safe) and saves four table lookups per step.
func (g *engine) stepSize(s *cell.State, pt point, v *[cell.MaxBranches]float64, h float64) float64 {
	dt := g.set.MaxStep
	ic := pt.i / g.np
	eta := 1.0
	if ic < 0 {
		eta = g.eta
	}
	dzdt := -eta * ic / g.qc
	if dzdt != 0 {
		dt = math.Min(dt, g.set.MaxSOCStep/math.Abs(dzdt))
	}
	z, tk := s.SOC, g.c.Kelvin
	rate := g.typ.OCV.Deriv(z, tk) * dzdt
	for k := range g.typ.Branches {
		if h > 0 {
			rate -= (s.V[k] - v[k]) / h
			continue
		}
		b := &g.typ.Branches[k]
		r := b.R.At(z, tk) * g.rf
		rate -= (r*ic - s.V[k]) / (r * b.C.At(z, tk))
	}
	if rate != 0 {
		dt = math.Min(dt, g.set.MaxVoltsStep/math.Abs(rate))
	}
	return math.Max(dt, minAdaptiveStepSec)
}

// account adds a step of length dt at held current i between instants p0 and p1.
func (g *engine) account(res *Result, i, dt float64, p0, p1 point) {
	res.AmpHours += i * dt / 3600
	res.WattHours += i * dt * ((p0.e - p0.r*i) + (p1.e - p1.r*i)) / 2 / 3600
	g.note(i)
}

func (g *engine) note(i float64) {
	if a := i / g.np; a > g.peakCellAmps {
		g.peakCellAmps = a
	}
}

// tracer collects a trace of n samples evenly spaced from 0 to end. It is kept apart
// from the engine so that the engine's fields do not escape with the trace's storage.
type tracer struct {
	samples []sim.Sample
	n       int
	end     float64
}

func (tr *tracer) record(t float64, s *cell.State, pt point) {
	tr.samples = append(tr.samples, sim.Sample{
		Time: t, SOC: s.SOC, Volts: pt.v, Amps: pt.i, Watts: pt.v * pt.i, RC: s.V,
	})
}

// at returns the time of sample k (+Inf past the last).
func (tr *tracer) at(k int) float64 {
	switch {
	case k >= tr.n:
		return math.Inf(1)
	case k == tr.n-1:
		return tr.end
	}
	return tr.end * float64(k) / float64(tr.n-1)
}

// run forecasts from s0 and returns the result without its range or warnings. With a
// tracer it records the trace and does not look for the stop (see Run).
func (g *engine) run(s0 cell.State, tr *tracer) Result {
	var res Result
	s := s0
	cur := g.load.Cursor()
	sg := cur.Segment()
	pt := g.eval(&s, sg)
	res.StartVolts, res.StartAmps = pt.v, pt.i
	g.note(pt.i)
	t := 0.0
	var lastV [cell.MaxBranches]float64 // branch voltages at the start of the last step
	lastH := 0.0                        // its length; 0 at the start of a segment
	nextOut := math.Inf(1)
	k := 0
	if tr != nil {
		tr.record(0, &s, pt)
		k = 1
		nextOut = tr.at(k)
	}
	if g.detect && g.margin(&s, pt) <= 0 {
		res.Status = StatusCannotStart
	}
	for res.Status == 0 {
		if t >= g.horizon {
			res.Status = StatusHorizon
			break
		}
		if res.Steps >= g.set.MaxSteps {
			res.Status = StatusStepLimit
			break
		}
		segEnd := cur.End()
		next := math.Min(math.Min(t+g.stepSize(&s, pt, &lastV, lastH), segEnd), math.Min(g.horizon, nextOut))
		h := next - t
		s1 := s
		i, err := g.c.Advance(&s1, sg.Kind, sg.Value, h)
		g.evals++
		var pt1 point
		m1 := math.Inf(-1)
		if err == nil {
			pt1 = g.eval(&s1, sg)
			m1 = g.margin(&s1, pt1)
		}
		if g.detect && m1 <= 0 {
			tau, sx, ix, ptx, st := g.locate(&s, g.margin(&s, pt), sg, h, s1, i, pt1, m1)
			g.account(&res, ix, tau, pt, ptx)
			t, s, pt = t+tau, sx, ptx
			res.Status = st
			break
		}
		if err != nil {
			break // tracing: the power gave out a little before the first run's stop
		}
		res.Steps++
		g.account(&res, i, h, pt, pt1)
		lastV, lastH = s.V, h
		t, s, pt = next, s1, pt1
		if t == segEnd {
			lastH = 0
			if !cur.Next() {
				res.Status = StatusLoadEnded
				break
			}
			sg = cur.Segment()
			pt = g.eval(&s, sg)
			g.note(pt.i)
			if g.detect && g.margin(&s, pt) <= 0 {
				res.Status = g.classify(&s, pt)
			}
		}
		if t == nextOut {
			tr.record(t, &s, pt)
			k++
			nextOut = tr.at(k)
		}
	}
	if tr != nil && tr.samples[len(tr.samples)-1].Time != t {
		tr.record(t, &s, pt)
	}
	res.Seconds = t
	res.Final = s
	res.FinalVolts, res.FinalAmps = pt.v, pt.i
	res.Evaluations = g.evals
	return res
}

// locate finds the stop inside a step of length h from s0 (margin m0 > 0), whose end
// state sh (held current ih, instant pth) has margin mh ≤ 0, by the Illinois variant of
// regula falsi on the step length (Dowell and Jarratt, BIT 11:168–174, 1971), bisecting
// while the far end is beyond the power limit. It returns the step length to the stop,
// the state, held current and instant there, and the status.
func (g *engine) locate(s0 *cell.State, m0 float64, sg sim.Segment, h float64, sh cell.State, ih float64, pth point, mh float64) (float64, cell.State, float64, point, Status) {
	lo, flo := 0.0, m0
	hi, fhi := h, mh
	ls, li, lpt := *s0, 0.0, g.eval(s0, sg)
	hs, hiI, hpt := sh, ih, pth
	side := 0
	for range 200 {
		if hi-lo <= g.set.TimeTolerance {
			break
		}
		x := 0.5 * (lo + hi)
		if !math.IsInf(fhi, -1) {
			if xs := hi - fhi*(hi-lo)/(fhi-flo); xs > lo && xs < hi {
				x = xs
			}
		}
		sx := *s0
		ix, err := g.c.Advance(&sx, sg.Kind, sg.Value, x)
		g.evals++
		fx := math.Inf(-1)
		var ptx point
		if err == nil {
			ptx = g.eval(&sx, sg)
			fx = g.margin(&sx, ptx)
		}
		if fx > 0 {
			lo, flo, ls, li, lpt = x, fx, sx, ix, ptx
			if side == 1 && !math.IsInf(fhi, -1) {
				fhi /= 2
			}
			side = 1
		} else {
			hi, fhi, hs, hiI, hpt = x, fx, sx, ix, ptx
			if side == -1 {
				flo /= 2
			}
			side = -1
		}
		if math.Abs(fx) <= g.set.VoltsTolerance {
			return x, sx, ix, ptx, g.classify(&sx, ptx)
		}
	}
	if !hpt.ok {
		// The power gave out: report the last instant it could still be delivered.
		return lo, ls, li, lpt, StatusPowerLimit
	}
	return hi, hs, hiI, hpt, g.classify(&hs, hpt)
}
