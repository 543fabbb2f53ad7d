package estimate

import (
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// Counter is a plain coulomb counter (REFERENCE.md §2.2; Piller, Perrin and Jossen,
// J. Power Sources 96(1):113–120, 2001): z ← z − η·i·Δt/(3600·Q), the baseline for
// every accuracy comparison. It advances the same [cell.Pack.Step] as the [EKF] with
// the same handling of time, gaps and bad input, but never uses the voltage: its
// modelled voltage and innovation show how far the open-loop model drifts, and its SOC
// uncertainty only grows (current-sensor noise, SOC drift and charge-gain error, with
// the EKF's settings). Build it with [NewCounter]; it does not allocate per sample and
// is not safe for concurrent use.
type Counter struct {
	pack     cell.Pack
	cfg      config
	nb       int
	hyst     bool
	cs       cell.State
	socVar   float64
	clk      clock
	counters Counters
	tmin     float64
	tmax     float64
}

// NewCounter returns a coulomb counter for pack p starting at state of charge soc with
// standard deviation Settings.InitialSOCSigma. Settings.Health is ignored.
func NewCounter(p cell.Pack, soc float64, s *Settings) (*Counter, error) {
	if p.Type == nil || p.Type.OCV == nil {
		panic("estimate: pack without a validated type")
	}
	if err := p.Validate(); err != nil {
		return nil, fmt.Errorf("estimate: %w", err)
	}
	if err := s.Validate(); err != nil {
		return nil, err
	}
	c := &Counter{pack: p.Prepared(), cfg: resolve(p, s), nb: len(p.Type.Branches), hyst: p.Type.Hysteresis.Max > 0}
	c.cfg.health = false
	c.tmin, c.tmax = ocvTempRange(p.Type)
	if err := c.InitSOC(soc); err != nil {
		return nil, err
	}
	return c, nil
}

// InitSOC restarts the count at soc with standard deviation Settings.InitialSOCSigma,
// RC branches at rest and hysteresis zero. The clock and counters carry on.
func (c *Counter) InitSOC(soc float64) error {
	if err := cell.CheckSOC("soc", soc); err != nil {
		return err
	}
	c.cs = cell.State{SOC: soc}
	c.socVar = c.cfg.initSOCVar
	return nil
}

// InitFromVoltage restarts the count from a rested pack voltage v (V) at temperature
// tk (K), exactly as [EKF.InitFromVoltage] does.
func (c *Counter) InitFromVoltage(v, tk float64) error {
	soc, variance, err := socFromVoltage(c.pack, &c.cfg, v, tk)
	if err != nil {
		return err
	}
	c.cs = cell.State{SOC: soc}
	c.socVar = variance
	c.clk.restSeconds = max(c.clk.restSeconds, c.cfg.restDuration)
	return nil
}

// Update processes one sample, with the same errors and flags as [EKF.Update] (it
// never rejects a voltage, since it does not use it). It does not allocate.
func (c *Counter) Update(s Sample) (Estimate, error) {
	flags, ok, err := c.cfg.admit(s, &c.clk, &c.counters)
	if !ok {
		return unusable(c.estimate(s.Time, flags)), err
	}
	pl := c.cfg.plan(s, c.clk)
	flags |= pl.flags
	q := 3600 * c.pack.CapacityAh()
	for _, sg := range pl.seg[:pl.n] {
		z := c.cs.SOC
		c.pack.Step(&c.cs, sg.i, sg.dt, sg.tk)
		// Variance of the count: the current noise held over the step, the drift and
		// the gain error (as in the EKF's process noise).
		dz := c.cs.SOC - z
		g := sg.dt / q
		c.socVar += c.cfg.currentVar*g*g + c.cfg.socVarRate*sg.dt + c.cfg.gainVar*dz*dz
		if sg.gap {
			c.socVar += gapVar(c.cfg.gapVarRate*sg.dt, c.socVar)
		}
	}
	c.clk = pl.clk
	flags |= tempFlag(c.pack.Type, c.tmin, c.tmax, s.Current, s.Temperature)
	if z := c.cs.SOC; z < 0 || z > 1 {
		flags |= FlagSOCRange
		c.cs.SOC = min(socMax, max(socMin, z))
	}
	e := c.estimate(s.Time, flags)
	e.Voltage = c.pack.Voltage(&c.cs, s.Current, s.Temperature)
	e.Innovation = s.Voltage - e.Voltage
	return e, nil
}

func (c *Counter) estimate(t float64, flags Flags) Estimate {
	e := Estimate{Time: t, SOC: min(1, max(0, c.cs.SOC)), SOCSigma: math.Sqrt(c.socVar), Flags: flags}
	e.CapacityFactor, e.ResistanceFactor = packFactors(c.pack)
	return e
}

// Counters returns what the counter has done so far.
func (c *Counter) Counters() Counters { return c.counters }

// State returns the counter's complete state; its covariance holds only the SOC
// variance, at [0][0].
func (c *Counter) State() State {
	st := State{
		Dim: 1, Branches: c.nb, Hysteresis: c.hyst,
		SOC: c.cs.SOC, BranchVolts: c.cs.V, HysteresisVolts: c.cs.H,
		Started: c.clk.started, Time: c.clk.time, HeldCurrent: c.clk.heldCurrent,
		HeldTemperature: c.clk.heldTemp, RestSeconds: c.clk.restSeconds, Counters: c.counters,
	}
	st.CapacityFactor, st.ResistanceFactor = packFactors(c.pack)
	st.Covariance[0][0] = c.socVar
	return st
}

// Restore replaces the counter's state by st, which must come from State of a counter
// for a type of the same structure. It leaves the counter unchanged on error.
func (c *Counter) Restore(st State) error {
	l := layout{n: 1, nb: c.nb, ih: -1, ic: -1, ir: -1}
	if err := l.check(&st); err != nil {
		return err
	}
	if st.Hysteresis != c.hyst {
		return cell.Invalid("state.hysteresis", "does not match the type")
	}
	if !c.hyst && st.HysteresisVolts != 0 {
		return cell.Invalid("state.hysteresis_volts", "must be 0 for a type without hysteresis")
	}
	capf, resf := packFactors(c.pack)
	if st.CapacityFactor != capf || st.ResistanceFactor != resf {
		return cell.Invalid("state", "health factors %g, %g differ from the pack's %g, %g", st.CapacityFactor, st.ResistanceFactor, capf, resf)
	}
	c.cs = cell.State{SOC: st.SOC, V: st.BranchVolts, H: st.HysteresisVolts}
	c.socVar = st.Covariance[0][0]
	c.clk = clock{started: st.Started, time: st.Time, heldCurrent: st.HeldCurrent,
		heldTemp: st.HeldTemperature, restSeconds: st.RestSeconds}
	c.counters = st.Counters
	return nil
}
