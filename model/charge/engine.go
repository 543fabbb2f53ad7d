package charge

import (
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// engine runs charge simulations for one resolved request.
type engine struct {
	req    *Request
	lim    *limits
	set    *Settings
	target float64
	record bool // keep phases (the final plan) rather than only times (deadline search)
	steps  int
	sims   int
	evals  int // constant-voltage solver evaluations
}

// outcome is what one simulation produced.
type outcome struct {
	phases      []Phase
	target      Totals
	full        Totals
	termination Termination
}

// event is why a phase ended.
type event int

const (
	evVoltage event = iota // terminal voltage reached the stop voltage
	evFull                 // state of charge reached 1
	evTaper                // constant-voltage current fell to the termination current
	evTimer                // the phase's time limit
	evLimited              // constant voltage needs more than the current limit: back to constant current
	evHorizon              // the simulation horizon
	evDone                 // the target was reached in a target-only run
)

// run is the state of one simulation.
type run struct {
	e          *engine
	p          cell.Pack
	tk         float64
	horizon    float64
	targetOnly bool

	s      cell.State
	t      float64 // s since the start
	ah, wh float64 // into the pack
	lastA  float64 // magnitude of the last step's current, A
	lastV  float64 // terminal voltage at the end of the last step, V
	done   bool    // target-only run finished
	vhold  float64 // set point of the constant-voltage phase under way, else 0

	// The last trial step of solveCV, reused when its current is the answer.
	trialA, trialV0, trialV1 float64
	trialS                   cell.State

	out     outcome
	cut     bool // phases closed at the target
	inPhase bool
	ph      Phase
	phAh    float64 // ah at the phase start
	phWh    float64
}

func clamp01(z float64) float64 { return math.Max(0, math.Min(1, z)) }

func (r *run) totals(t, z, ah, wh float64) Totals {
	return Totals{Reached: true, Seconds: t, SOC: clamp01(z), ChargeAh: ah, EnergyWh: wh, SupplyWh: wh / r.e.req.Efficiency}
}

func (r *run) volts(s *cell.State, a float64) float64 { return r.p.Voltage(s, -a, r.tk) }

func (r *run) beginPhase(kind PhaseKind, a float64) {
	if r.inPhase {
		r.endPhase()
	}
	r.inPhase = true
	v := r.volts(&r.s, a)
	if r.vhold > 0 {
		v = r.vhold
	}
	r.ph = Phase{Kind: kind, StartSeconds: r.t, StartCurrentAmps: -a, StartVolts: v, StartSOC: clamp01(r.s.SOC)}
	r.phAh, r.phWh = r.ah, r.wh
	r.lastA, r.lastV = a, v
}

// closePhase ends the open phase at the given point.
func (r *run) closePhase(t, a, v, z, ah, wh float64) {
	if !r.inPhase {
		return
	}
	r.inPhase = false
	if !r.e.record || r.cut || t <= r.ph.StartSeconds {
		return
	}
	ph := r.ph
	ph.EndSeconds, ph.EndCurrentAmps, ph.EndVolts, ph.EndSOC = t, -a, v, clamp01(z)
	ph.ChargeAh, ph.EnergyWh = ah-r.phAh, wh-r.phWh
	r.out.phases = append(r.out.phases, ph)
}

func (r *run) endPhase() { r.closePhase(r.t, r.lastA, r.lastV, r.s.SOC, r.ah, r.wh) }

// reachTarget records the target at the given point and cuts the phase list there.
func (r *run) reachTarget(t, a, v, z, ah, wh float64) {
	r.out.target = r.totals(t, z, ah, wh)
	if r.inPhase {
		r.closePhase(t, a, v, z, ah, wh)
		r.inPhase = true // the phase goes on, unrecorded
	}
	r.cut = true
	if r.targetOnly {
		r.done = true
	}
}

// step advances the simulation by dt with a charge current of magnitude a, handling a
// crossing of the target state of charge inside the step exactly (the state of charge
// is linear in time while the current is held).
func (r *run) step(a, dt float64) {
	s1 := r.s
	r.p.Step(&s1, -a, dt, r.tk)
	r.commit(a, dt, &s1, r.volts(&r.s, a), r.volts(&s1, a))
}

// commit completes a step of dt seconds at charge current a whose end state s1 and
// start and end voltages v0, v1 the caller has already computed.
func (r *run) commit(a, dt float64, s1 *cell.State, v0, v1 float64) {
	i := -a
	r.e.steps++
	if !r.out.target.Reached && r.e.target < 1 && s1.SOC >= r.e.target && s1.SOC > r.s.SOC {
		dtp := dt * (r.e.target - r.s.SOC) / (s1.SOC - r.s.SOC)
		sp := r.s
		r.p.Step(&sp, i, dtp, r.tk)
		vp := r.volts(&sp, a)
		if r.vhold > 0 {
			vp = r.vhold
		}
		r.reachTarget(r.t+dtp, a, vp, sp.SOC, r.ah+a*dtp/3600, r.wh+a*(v0+vp)/2*dtp/3600)
		if r.done {
			return
		}
	}
	r.s = *s1
	r.t += dt
	r.ah += a * dt / 3600
	r.wh += a * (v0 + v1) / 2 * dt / 3600
	r.lastA, r.lastV = a, v1
	if r.vhold > 0 {
		r.lastV = r.vhold
	}
}

// powerCurrent returns the charge current magnitude at which the pack takes power pmax
// at the present state: V(a) = E + Rt·a on charge, so a = (−E + √(E² + 4·Rt·P))/(2·Rt).
func (r *run) powerCurrent(pmax float64) float64 {
	e := r.volts(&r.s, 0)
	rt := r.volts(&r.s, 1) - e
	if rt <= 1e-12 {
		return pmax / e
	}
	return (-e + math.Sqrt(e*e+4*rt*pmax)) / (2 * rt)
}

// limitReached reports whether the phase time limit tstop, the simulation horizon or
// the SOC ceiling has been reached, and which.
func (r *run) limitReached(tstop float64) (event, bool) {
	switch {
	case r.t >= tstop-1e-9:
		return evTimer, true
	case r.t >= r.horizon-1e-9:
		return evHorizon, true
	case r.s.SOC >= r.e.set.SOCCeiling:
		return evFull, true
	}
	return 0, false
}

// cc charges at constant current amax (or less, where the charger's power limit binds)
// until the terminal voltage reaches vstop (0: no voltage stop), the state of charge
// reaches 1, or the time reaches tstop.
func (r *run) cc(kind, powerKind PhaseKind, amax, vstop, tstop float64) event {
	lim, set := r.e.lim, r.e.set
	capAh := r.p.CapacityAh()
	eta := r.p.Type.Efficiency()
	for !r.done {
		if ev, stop := r.limitReached(tstop); stop {
			return ev
		}
		a, k := amax, kind
		if lim.pmax > 0 {
			if ap := r.powerCurrent(lim.pmax); ap < a {
				a, k = ap, powerKind
			}
		}
		if !r.inPhase || r.ph.Kind != k {
			r.beginPhase(k, a)
		}
		v0 := r.volts(&r.s, a)
		if vstop > 0 && v0 >= vstop {
			return evVoltage
		}
		dt := set.MaxSOCStep * 3600 * capAh / (eta * a)
		dt = math.Min(dt, math.Min(set.MaxStepSeconds, math.Min(tstop-r.t, r.horizon-r.t)))
		s1 := r.s
		r.p.Step(&s1, -a, dt, r.tk)
		v1 := r.volts(&s1, a)
		if vstop > 0 && v1 >= vstop {
			// The terminal voltage rises monotonically under a constant charge current:
			// bisect on the step length for the crossing.
			lo, hi := 0.0, dt
			for hi-lo > 1e-6*dt+1e-9 {
				m := 0.5 * (lo + hi)
				sm := r.s
				r.p.Step(&sm, -a, m, r.tk)
				if r.volts(&sm, a) >= vstop {
					hi = m
				} else {
					lo = m
				}
			}
			r.step(a, hi)
			if r.done {
				return evDone
			}
			return evVoltage
		}
		ceil := set.SOCCeiling
		if s1.SOC < ceil {
			r.commit(a, dt, &s1, v0, v1)
			continue
		}
		r.step(a, dt*(ceil-r.s.SOC)/(s1.SOC-r.s.SOC))
		if r.done {
			return evDone
		}
		r.s.SOC = math.Max(r.s.SOC, ceil) // exactly there despite rounding
		return evFull
	}
	return evDone
}

// solveCV returns the charge current magnitude in [0, amax] that makes the terminal
// voltage, averaged over a step of dt seconds (trapezoid of its start and end), equal
// to vset. If even amax leaves it below vset, it returns amax and limited; if even zero
// current leaves it above, 0. The function is increasing in the current and nearly linear, so a
// secant iteration safeguarded by bisection converges in a few evaluations.
func (r *run) solveCV(vset, amax, guess, dt float64) (a float64, limited bool) {
	// The start-of-step voltage is linear in the charge current: v0 + a·k0.
	v0 := r.volts(&r.s, 0)
	k0 := r.volts(&r.s, 1) - v0
	f := func(a float64) float64 {
		r.e.evals++
		s1 := r.s
		r.p.Step(&s1, -a, dt, r.tk)
		v1 := r.volts(&s1, a)
		r.trialA, r.trialV0, r.trialV1, r.trialS = a, v0+a*k0, v1, s1
		return 0.5*(r.trialV0+v1) - vset
	}
	tol := 1e-9 * vset
	lo, hi := 0.0, amax
	loKnown, hiKnown := false, false
	x0 := math.Min(math.Max(guess, 0), amax)
	f0 := f(x0)
	x1 := x0 * 0.99
	if x0 == 0 {
		x1 = 1e-3 * amax
	}
	for range 60 {
		if math.Abs(f0) <= tol {
			return x0, false
		}
		if f0 > 0 {
			hi, hiKnown = x0, true
		} else {
			lo, loKnown = x0, true
		}
		if hiKnown && hi == 0 {
			return 0, false
		}
		if loKnown && lo == amax {
			return amax, true
		}
		if !(x1 > lo && x1 < hi) {
			x1 = 0.5 * (lo + hi)
		}
		f1 := f(x1)
		if math.Abs(f1) <= tol {
			return x1, false
		}
		// Secant step from (x0, f0), (x1, f1); fall back to bisection outside the bracket.
		var x2 float64
		if f1 != f0 {
			x2 = x1 - f1*(x1-x0)/(f1-f0)
		}
		if f1 > 0 {
			hi, hiKnown = x1, true
		} else {
			lo, loKnown = x1, true
		}
		if !(x2 > lo && x2 < hi) {
			switch {
			case !hiKnown:
				x2 = amax
			case !loKnown:
				x2 = 0
			default:
				x2 = 0.5 * (lo + hi)
			}
		}
		if hi-lo <= 1e-13*amax {
			return 0.5 * (lo + hi), false
		}
		x0, f0 = x1, f1
		x1 = x2
	}
	return 0.5 * (lo + hi), false
}

// cv holds the terminal voltage at vset with the current at most amax until the
// current falls to aterm (0: no taper stop), the state of charge reaches 1, or the time
// reaches tstop.
func (r *run) cv(kind PhaseKind, vset, amax, aterm, tstop float64) event {
	set, lim := r.e.set, r.e.lim
	r.vhold = vset
	defer func() { r.vhold = 0 }()
	dt := 1.0
	guess := amax
	var prevA, prevMid float64 // previous step's current and midpoint time
	havePrev := false
	var snap struct{ t, z, ah, wh float64 } // state at the start of the previous step
	for !r.done {
		if ev, stop := r.limitReached(tstop); stop {
			return ev
		}
		h := math.Min(dt, math.Min(set.MaxStepSeconds, math.Min(tstop-r.t, r.horizon-r.t)))
		alim := amax
		if lim.pmax > 0 {
			alim = math.Min(alim, r.powerCurrent(lim.pmax))
		}
		a, limited := r.solveCV(vset, alim, guess, h)
		if limited {
			return evLimited
		}
		if !r.inPhase || r.ph.Kind != kind {
			r.beginPhase(kind, a)
		}
		if havePrev && prevA > 0 {
			rel := math.Abs(prevA-a) / prevA
			if rel > 4*set.CurrentChange && h > 1e-3 {
				dt = h / 4 // too coarse: retry this step shorter
				continue
			}
			dt = h * math.Max(0.5, math.Min(2, set.CurrentChange/math.Max(rel, 1e-12)))
		} else {
			dt = 2 * h
		}
		if aterm > 0 && a <= aterm {
			// The step currents stand for the current at each step's midpoint and decay
			// nearly exponentially: interpolate log(current) linearly between midpoints.
			mid := r.t + h/2
			tm := r.t
			if havePrev && prevA > a {
				tm = prevMid + (mid-prevMid)*math.Log(prevA/aterm)/math.Log(prevA/math.Max(a, 1e-300))
			}
			switch {
			case tm <= r.t && havePrev:
				// The crossing lies in the second half of the previous step: interpolate
				// the totals (linear in time there) back to it.
				w := (tm - snap.t) / (r.t - snap.t)
				w = math.Max(0, math.Min(1, w))
				r.t = snap.t + w*(r.t-snap.t)
				r.ah = snap.ah + w*(r.ah-snap.ah)
				r.wh = snap.wh + w*(r.wh-snap.wh)
				r.lastA = aterm
				r.s.SOC = snap.z + w*(r.s.SOC-snap.z)
			case tm > r.t:
				h2 := tm - r.t
				a2, _ := r.solveCV(vset, alim, a, h2)
				r.step(a2, h2)
				r.lastA = aterm
			}
			if r.done {
				return evDone
			}
			return evTaper
		}
		snap.t, snap.z, snap.ah, snap.wh = r.t, r.s.SOC, r.ah, r.wh
		prevA, prevMid, havePrev = a, r.t+h/2, true
		guess = a * (1 - set.CurrentChange)
		z0 := r.s.SOC
		var s1 cell.State
		var v0, v1 float64
		if r.trialA == a {
			s1, v0, v1 = r.trialS, r.trialV0, r.trialV1
		} else {
			s1 = r.s
			r.p.Step(&s1, -a, h, r.tk)
			v0, v1 = r.volts(&r.s, a), r.volts(&s1, a)
		}
		if s1.SOC < set.SOCCeiling {
			r.commit(a, h, &s1, v0, v1)
			continue
		}
		if ceil := set.SOCCeiling; s1.SOC > z0 {
			r.step(a, h*(ceil-z0)/(s1.SOC-z0))
			if r.done {
				return evDone
			}
			r.s.SOC = math.Max(r.s.SOC, ceil)
			return evFull
		}
		r.step(a, h)
	}
	return evDone
}

// hold charges a full cell at constant current a for dt seconds without advancing the
// model (nickel overcharge: the charge goes into heat and gas, and the state stays at
// full).
func (r *run) hold(a, dt float64) {
	v := r.volts(&r.s, a)
	r.t += dt
	r.ah += a * dt / 3600
	r.wh += a * v * dt / 3600
	r.lastA, r.lastV = a, v
}

// simulate runs one charge at constant (bulk) current a. With targetOnly it stops when
// the target is reached.
func (e *engine) simulate(a float64, targetOnly bool) outcome {
	e.sims++
	req := e.req
	r := &run{e: e, p: req.Pack.Prepared(), tk: cell.Kelvin(req.TemperatureCelsius), horizon: e.set.MaxSeconds,
		targetOnly: targetOnly, s: req.State}
	if req.State.SOC >= e.target {
		r.reachTarget(0, 0, r.volts(&r.s, 0), r.s.SOC, 0, 0)
		if targetOnly {
			return r.out
		}
	}
	term, full := TerminationNone, false
	switch e.lim.method {
	case cell.ChargeCCCV:
		term, full = r.lithium(a)
	case cell.ChargeThreeStage:
		term, full = r.lead(a)
	case cell.ChargeNickel:
		term, full = r.nickel(a)
	}
	if r.done {
		return r.out
	}
	r.endPhase()
	r.out.termination = term
	r.out.full = r.totals(r.t, r.s.SOC, r.ah, r.wh)
	r.out.full.Reached = full
	if full && !r.out.target.Reached {
		// A completed charge satisfies any target (this is how a target of 1 is reached).
		r.out.target = r.out.full
		if e.record && !r.cut && len(r.out.phases) > 0 {
			r.cut = true
		}
	} else if !r.out.target.Reached {
		// Missed: the target's figures are those of the end of the charge, not zeros.
		r.out.target = r.out.full
		r.out.target.Reached = false
	}
	if full && e.lim.method == cell.ChargeThreeStage && e.record && e.target >= 1 {
		// Float holds the battery full, open-ended.
		r.out.phases = append(r.out.phases, Phase{Kind: PhaseFloat, StartSeconds: r.t, EndSeconds: r.t,
			StartVolts: e.lim.vfloat, EndVolts: e.lim.vfloat, StartSOC: clamp01(r.s.SOC), EndSOC: clamp01(r.s.SOC)})
	}
	return r.out
}

func (r *run) lithium(a float64) (Termination, bool) {
	lim := r.e.lim
	if lim.vpre > 0 && r.volts(&r.s, 0) < lim.vpre {
		switch r.cc(PhasePrecharge, PhasePrecharge, math.Min(lim.ipre, a), lim.vpre, math.Inf(1)) {
		case evFull:
			return TerminationFull, lim.full
		case evHorizon, evTimer, evDone:
			return TerminationNone, false
		}
	}
	for {
		switch r.cc(PhaseConstantCurrent, PhaseConstantPower, a, lim.vset, math.Inf(1)) {
		case evFull:
			return TerminationFull, lim.full
		case evHorizon, evTimer, evDone:
			return TerminationNone, false
		}
		switch r.cv(PhaseConstantVoltage, lim.vset, a, lim.iterm, math.Inf(1)) {
		case evTaper:
			return TerminationTaper, lim.full
		case evFull:
			return TerminationFull, lim.full
		case evLimited:
			continue
		}
		return TerminationNone, false
	}
}

func (r *run) lead(a float64) (Termination, bool) {
	lim, set := r.e.lim, r.e.set
	absorbEnd := math.Inf(1) // the absorption timer starts when the voltage is first reached
	for {
		switch r.cc(PhaseBulk, PhaseBulk, a, lim.vset, math.Inf(1)) {
		case evFull:
			return TerminationFull, lim.full
		case evHorizon, evTimer, evDone:
			return TerminationNone, false
		}
		if math.IsInf(absorbEnd, 1) {
			absorbEnd = r.t + set.AbsorptionMaxSeconds
		}
		switch r.cv(PhaseAbsorption, lim.vset, a, lim.iterm, absorbEnd) {
		case evTaper:
			return TerminationTaper, lim.full
		case evFull:
			return TerminationFull, lim.full
		case evLimited:
			continue
		case evHorizon, evDone:
			return TerminationNone, false
		}
		break
	}
	// The absorption timer ran out before the current tapered: float finishes the job.
	for {
		switch r.cv(PhaseFloat, lim.vfloat, a, lim.iterm, math.Inf(1)) {
		case evTaper, evFull:
			return TerminationAbsorption, lim.full
		case evLimited:
			// Below the float voltage at full current: charge on at constant current.
			if r.cc(PhaseFloat, PhaseFloat, a, lim.vfloat, math.Inf(1)) == evVoltage {
				continue
			}
		}
		return TerminationNone, false
	}
}

func (r *run) nickel(a float64) (Termination, bool) {
	lim, set := r.e.lim, r.e.set
	ratedAh := r.p.RatedCapacityAh()
	timed := a <= lim.timedRate*(1+1e-9)
	var timer float64
	if timed {
		// Standard charge: 0.1 C for 16 h puts in 160 % of capacity [source: IEC 61951-2
		// via REFERENCE.md §1a, E7]; at other standard-or-slower rates the same input.
		timer = 1.6 * ratedAh / a * 3600
	} else {
		f := r.p.Type.Limits.TimerFactor
		if f == 0 {
			f = 1.5 // backup timer at 120–150 % input [source: public charger design notes]
		}
		timer = f * ratedAh / a * 3600
	}
	switch r.cc(PhaseConstantCurrent, PhaseConstantPower, a, lim.vceil, timer) {
	case evVoltage:
		return TerminationCeiling, false
	case evTimer:
		return TerminationTimer, false
	case evHorizon, evDone:
		return TerminationNone, false
	}
	// Full: overcharge until −ΔV (modelled as NickelOvercharge × capacity) or the timer.
	stop, term := timer, TerminationTimer
	if !timed {
		if t := r.t + set.NickelOvercharge*ratedAh/a*3600; t < timer {
			stop, term = t, TerminationDeltaV
		}
	}
	if stop > r.horizon {
		stop, term = r.horizon, TerminationNone
	}
	if stop > r.t {
		r.beginPhase(PhaseOvercharge, a)
		r.hold(a, stop-r.t)
	}
	return term, term != TerminationNone
}

// lowestCurrent returns the lowest constant current in [lim.ilo, lim.imax] that
// reaches the target within deadline seconds, by bisection (time to target falls as the
// current rises). If even lim.imax is too slow it warns and returns lim.imax.
func (e *engine) lowestCurrent(deadline float64, res *Result) float64 {
	lim := e.lim
	timeTo := func(a float64) float64 {
		out := e.simulate(a, true)
		if !out.target.Reached {
			return math.Inf(1)
		}
		return out.target.Seconds
	}
	tmax := timeTo(lim.imax)
	if tmax > deadline {
		if math.IsInf(tmax, 1) {
			res.warn(WarnDeadline, "the target cannot be reached at any allowed current; the plan uses the largest, %.3g A", lim.imax)
		} else {
			res.warn(WarnDeadline, "even at the largest allowed current, %.3g A, the target takes %.2f h, past the %.2f h deadline",
				lim.imax, tmax/3600, deadline/3600)
		}
		return lim.imax
	}
	tlo := timeTo(lim.ilo)
	if tlo <= deadline {
		return lim.ilo
	}
	// Regula falsi (Illinois variant) in u = 1/current, in which the time to target is
	// nearly linear while the charge is constant-current; the bracket [lo, hi] keeps
	// lo too slow and hi fast enough, and hi is returned.
	lo, hi := lim.ilo, lim.imax
	glo, ghi := tlo-deadline, tmax-deadline
	side := 0
	for range 60 {
		if hi-lo <= 1e-3*hi {
			break
		}
		ulo, uhi := 1/lo, 1/hi
		u := uhi - ghi*(ulo-uhi)/(glo-ghi)
		m := 1 / u
		if !(m > lo && m < hi) || math.IsInf(glo, 1) {
			m = 0.5 * (lo + hi)
		}
		g := timeTo(m) - deadline
		if g <= 0 {
			hi, ghi = m, g
			if side == -1 {
				glo /= 2
			}
			side = -1
		} else {
			lo, glo = m, g
			if side == 1 {
				ghi /= 2
			}
			side = 1
		}
	}
	return hi
}
