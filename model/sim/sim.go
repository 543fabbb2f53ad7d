package sim

import (
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// Problem is a pack, where it starts, the temperature it works at, and the load it
// drives. [Run] simulates it; the forecast package builds on it.
type Problem struct {
	// Pack is the pack; its type must be complete (Problem.Validate checks it).
	Pack cell.Pack
	// Initial is the state at time 0, per cell. SOC must be in [0, 1].
	Initial cell.State
	// Celsius is the cell temperature in °C, −60 to 100, held constant.
	Celsius float64
	// Load is the demand on the pack from time 0.
	Load Load
	// CellCutoffVolts is the end-of-discharge voltage per cell in V; 0 means the
	// type's Limits.CutoffVolts.
	CellCutoffVolts float64
	// PackCutoffVolts is the end-of-discharge voltage of the whole pack in V, divided by
	// the number of cells in series; 0 means not given. At most one of CellCutoffVolts
	// and PackCutoffVolts may be set.
	PackCutoffVolts float64
}

// Validate checks the pack and its type, the initial state, the temperature, the
// cut-off and the load, and returns the first problem as a [*cell.FieldError].
func (p *Problem) Validate() error {
	if err := p.Pack.Validate(); err != nil {
		return err
	}
	if err := p.Pack.Type.Validate(); err != nil {
		return fmt.Errorf("type %q: %w", p.Pack.Type.Name, err)
	}
	if err := cell.CheckSOC("initial.state_of_charge", p.Initial.SOC); err != nil {
		return err
	}
	for k, v := range p.Initial.V {
		if !cell.Finite(v) || math.Abs(v) > 10 {
			return cell.Invalid(fmt.Sprintf("initial.rc_voltages[%d]", k), "must be finite and within ±10 V per cell, got %g", v)
		}
	}
	if h := p.Initial.H; !cell.Finite(h) || math.Abs(h) > 1 {
		return cell.Invalid("initial.hysteresis_volts", "must be finite and within ±1 V per cell, got %g", h)
	}
	if err := cell.CheckCelsius("temperature_celsius", p.Celsius); err != nil {
		return err
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"cell_cutoff_volts", p.CellCutoffVolts}, {"pack_cutoff_volts", p.PackCutoffVolts}} {
		if !cell.Finite(f.v) || f.v < 0 {
			return cell.Invalid(f.name, "must be finite and positive (0 for the type's cut-off), got %g", f.v)
		}
	}
	if p.CellCutoffVolts > 0 && p.PackCutoffVolts > 0 {
		return cell.Invalid("pack_cutoff_volts", "give the cut-off per cell or per pack, not both")
	}
	if v := p.CutoffVolts(); v > 10 {
		return cell.Invalid("cell_cutoff_volts", "cut-off %g V per cell is above 10 V; is the pack cut-off given as a cell cut-off?", v)
	}
	if err := p.Load.Validate(); err != nil {
		return err
	}
	if !p.Pack.Type.Rechargeable() {
		for k, sg := range p.Load.Segments {
			if (sg.Kind == Current || sg.Kind == Power) && sg.Value < 0 {
				return cell.Invalid(segField(k, "value"), "%g %s would charge a primary (non-rechargeable) cell, which must never be charged", sg.Value, sg.Kind.Unit())
			}
		}
	}
	return nil
}

// CutoffVolts returns the cut-off voltage per cell that applies to the problem.
func (p *Problem) CutoffVolts() float64 {
	switch {
	case p.CellCutoffVolts > 0:
		return p.CellCutoffVolts
	case p.PackCutoffVolts > 0:
		return p.PackCutoffVolts / float64(p.Pack.Series)
	}
	return p.Pack.Type.Limits.CutoffVolts
}

// Circuit returns the problem's pack at its temperature.
func (p *Problem) Circuit() Circuit {
	return Circuit{Pack: p.Pack, Kelvin: cell.Kelvin(p.Celsius)}
}

// Settings tune [Run]. The zero value, like a nil *Settings, selects every default.
type Settings struct {
	// Step is the longest simulation step in s; 0 means 1 s. Steps are also cut at
	// segment boundaries and output times.
	Step float64
	// Interval is the time between recorded samples in s; 0 means Step.
	Interval float64
	// Horizon is how long to simulate in s; 0 means the load's duration if it ends, and
	// 24 h otherwise.
	Horizon float64
	// IgnoreCutoff keeps simulating a discharge below the cut-off voltage (it still
	// stops at state of charge 0). By default a run stops at the cut-off.
	IgnoreCutoff bool
	// MaxSamples caps the number of samples a run may record; 0 means 1 000 000.
	MaxSamples int
}

// Bounds on the work one run may be asked for.
const (
	DefaultHorizon    = 24 * 3600.0 // s
	DefaultMaxSamples = 1000000
	MaxSteps          = 10000000 // steps in one run
)

// Sample is the state of the pack at one instant. The current is the one the load draws
// at that instant (at a segment boundary, the new segment's; at the end of a load, the
// last segment's).
type Sample struct {
	Time  float64                   `json:"time_seconds"`      // s since the start
	SOC   float64                   `json:"state_of_charge"`   // fraction 0–1
	Volts float64                   `json:"voltage_volts"`     // pack terminal voltage, V
	Amps  float64                   `json:"current_amps"`      // pack current, A, positive = discharge
	Watts float64                   `json:"power_watts"`       // terminal power, W, positive = discharge
	RC    [cell.MaxBranches]float64 `json:"rc_voltages_volts"` // RC branch voltages per cell, V
}

// Status tells why a run stopped.
type Status uint8

// Run outcomes.
const (
	StatusHorizon    Status = iota + 1 // ran to the horizon
	StatusLoadEnded                    // the load's last segment ended
	StatusCutoff                       // discharging, a cell reached the cut-off voltage
	StatusEmpty                        // discharging, the state of charge reached 0
	StatusFull                         // charging, the state of charge reached 1
	StatusPowerLimit                   // the load asked for more power than the pack can deliver
)

var statusNames = [...]string{
	StatusHorizon: "horizon", StatusLoadEnded: "load-ended", StatusCutoff: "cutoff",
	StatusEmpty: "empty", StatusFull: "full", StatusPowerLimit: "power-limit",
}

// String returns a short lowercase name for the status.
func (s Status) String() string {
	if s >= StatusHorizon && s <= StatusPowerLimit {
		return statusNames[s]
	}
	return fmt.Sprintf("Status(%d)", uint8(s))
}

// Result is the outcome of [Run].
type Result struct {
	Samples   []Sample   // recorded samples, at 0, every Interval, and at the end
	Status    Status     // why the run stopped
	Seconds   float64    // time simulated, s
	Final     cell.State // state at the end
	AmpHours  float64    // net charge delivered by the pack, Ah (negative if charged)
	WattHours float64    // net energy delivered at the terminals, Wh (negative if charged)
	Steps     int        // steps taken
}

// Run simulates prob and returns its samples appended to dst[:0] in Result.Samples.
// A nil settings selects the defaults. Charge and energy integrate the held current and
// the terminal voltage (trapezoid rule) over each step. Run returns a [*cell.FieldError]
// for an invalid problem or settings, and never panics on one.
func Run(dst []Sample, prob *Problem, settings *Settings) (Result, error) {
	var set Settings
	if settings != nil {
		set = *settings
	}
	if err := prob.Validate(); err != nil {
		return Result{}, err
	}
	if err := set.resolve(&prob.Load); err != nil {
		return Result{}, err
	}
	c := prob.Circuit()
	cut := prob.CutoffVolts()
	ns := float64(prob.Pack.Series)
	res := Result{Final: prob.Initial}
	s := &res.Final
	cur := prob.Load.Cursor()
	samples := dst[:0]

	// stop reports why the run must stop at the present instant, or 0. It also
	// returns the sample for this instant.
	stop := func(t float64) (Status, Sample) {
		sg := cur.Segment()
		e, r := c.Thevenin(s, sg.Charges())
		i, err := Draw(sg.Kind, sg.Value, e, r)
		smp := Sample{Time: t, SOC: s.SOC, RC: s.V}
		if err != nil {
			smp.Volts = e / 2 // the terminal voltage at the maximum-power point
			return StatusPowerLimit, smp
		}
		v := e - r*i
		smp.Volts, smp.Amps, smp.Watts = v, i, v*i
		switch {
		case i > 0 && s.SOC <= 0:
			return StatusEmpty, smp
		case i < 0 && s.SOC >= 1:
			return StatusFull, smp
		case i > 0 && !set.IgnoreCutoff && v/ns <= cut:
			return StatusCutoff, smp
		}
		return 0, smp
	}

	t := 0.0
	nout := 1
	st, smp := stop(0)
	samples = append(samples, smp)
	for st == 0 {
		if t >= set.Horizon {
			st = StatusHorizon
			break
		}
		segEnd := cur.End()
		next := math.Min(math.Min(segEnd, set.Horizon), math.Min(float64(nout)*set.Interval, t+set.Step))
		sg := cur.Segment()
		dt := next - t
		e0, r0 := c.Thevenin(s, sg.Charges())
		i, err := c.Advance(s, sg.Kind, sg.Value, dt)
		if err != nil {
			st = StatusPowerLimit
			break
		}
		e1, r1 := c.Thevenin(s, sg.Charges())
		res.Steps++
		res.AmpHours += i * dt / 3600
		res.WattHours += i * dt * ((e0 - r0*i) + (e1 - r1*i)) / 2 / 3600
		t = next
		if t >= segEnd && !cur.Next() {
			st = StatusLoadEnded
		}
		var st2 Status
		st2, smp = stop(t)
		if st == 0 {
			st = st2
		}
		if t >= float64(nout)*set.Interval {
			for float64(nout)*set.Interval <= t {
				nout++
			}
			samples = append(samples, smp)
		} else if st != 0 {
			samples = append(samples, smp)
		}
	}
	if st == StatusPowerLimit && (len(samples) == 0 || samples[len(samples)-1].Time != t) {
		_, smp = stop(t)
		samples = append(samples, smp)
	}
	res.Status = st
	res.Seconds = t
	res.Samples = samples
	return res, nil
}

// resolve fills in defaults and checks the settings against the load.
func (set *Settings) resolve(l *Load) error {
	for _, f := range []struct {
		name string
		v    float64
	}{{"settings.step", set.Step}, {"settings.interval", set.Interval}, {"settings.horizon", set.Horizon}} {
		if !cell.Finite(f.v) || f.v < 0 {
			return cell.Invalid(f.name, "must be finite and non-negative seconds, got %g", f.v)
		}
	}
	if set.MaxSamples < 0 {
		return cell.Invalid("settings.max_samples", "must be non-negative, got %d", set.MaxSamples)
	}
	if set.Step == 0 {
		set.Step = 1
	}
	if set.Step < MinDuration {
		return cell.Invalid("settings.step", "must be at least %g s, got %g", MinDuration, set.Step)
	}
	if set.Interval == 0 {
		set.Interval = set.Step
	}
	if set.Interval < MinDuration {
		return cell.Invalid("settings.interval", "must be at least %g s, got %g", MinDuration, set.Interval)
	}
	if set.MaxSamples == 0 {
		set.MaxSamples = DefaultMaxSamples
	}
	if set.Horizon == 0 {
		set.Horizon = DefaultHorizon
		if l.Finite() {
			set.Horizon = l.Duration()
		}
	}
	if n := set.Horizon/set.Interval + 2; n > float64(set.MaxSamples) {
		return cell.Invalid("settings.interval", "%g s over %g s would record %.0f samples, more than the %d allowed", set.Interval, set.Horizon, n, set.MaxSamples)
	}
	steps := set.Horizon/set.Step + set.Horizon/set.Interval
	if p := l.Duration(); !math.IsInf(p, 1) {
		steps += (set.Horizon/p + 1) * float64(len(l.Segments))
	} else {
		steps += float64(len(l.Segments))
	}
	if steps > MaxSteps {
		return cell.Invalid("settings.step", "the run would take about %.3g steps, more than %d; lengthen the step or shorten the horizon", steps, MaxSteps)
	}
	return nil
}
