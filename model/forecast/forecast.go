package forecast

import (
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/sim"
)

// Problem is a runtime question: a pack, its state, temperature and load (the embedded
// [sim.Problem], whose cut-off fields say where the discharge ends), plus a floor state
// of charge and the uncertainty of the starting point.
type Problem struct {
	sim.Problem
	// SOCFloor ends the discharge when the state of charge falls to it (a fraction in
	// [0, 1)); 0 means empty.
	SOCFloor float64
	// SOCSigma is the standard deviation of Initial.SOC (a fraction, 0 to 0.5); 0 means
	// it is known exactly.
	SOCSigma float64
	// CapacitySigma is the standard deviation of the pack's capacity as a fraction of
	// it (0 to 0.5); 0 means it is known exactly.
	CapacitySigma float64
}

// Validate checks the problem and returns the first problem found as a
// [*cell.FieldError]. Beyond [sim.Problem.Validate], the load must discharge the pack:
// a constant current or power must be positive, and a piecewise load must have at
// least one discharging segment.
func (p *Problem) Validate() error {
	if err := p.Problem.Validate(); err != nil {
		return err
	}
	if f := p.SOCFloor; !cell.Finite(f) || f < 0 || f >= 1 {
		return cell.Invalid("soc_floor", "must be a fraction in [0, 1), got %g", f)
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"soc_sigma", p.SOCSigma}, {"capacity_sigma", p.CapacitySigma}} {
		if !cell.Finite(f.v) || f.v < 0 || f.v > 0.5 {
			return cell.Invalid(f.name, "must be a fraction from 0 to 0.5, got %g", f.v)
		}
	}
	segs := p.Load.Segments
	if len(segs) == 1 && segs[0].Kind != sim.Resistance && !(segs[0].Value > 0) {
		return cell.Invalid("load.segments[0].value", "a discharge forecast needs a positive %s (current is positive when it leaves the pack), got %g %s",
			segs[0].Kind, segs[0].Value, segs[0].Kind.Unit())
	}
	for _, sg := range segs {
		if sg.Kind == sim.Resistance || sg.Value > 0 {
			return nil
		}
	}
	return cell.Invalid("load.segments", "the load never discharges the pack, so it has no time to cut-off")
}

// Settings tune [Run]. The zero value, like a nil *Settings, selects every default.
type Settings struct {
	// Horizon is the longest time forecast, in s; 0 means 1000 h.
	Horizon float64
	// MaxSOCStep is the largest change of state of charge in one step; 0 means 0.05.
	MaxSOCStep float64
	// MaxVoltsStep is the largest predicted change of cell terminal voltage in one
	// step, in V; 0 means 0.02.
	MaxVoltsStep float64
	// MaxStep is the longest step in s; 0 means 3600.
	MaxStep float64
	// VoltsTolerance ends the search for the cut-off when the cell voltage is this close
	// to it, in V (the same number bounds state of charge at the floor); 0 means 1e-6.
	VoltsTolerance float64
	// TimeTolerance ends the search when the crossing is bracketed this tightly, in s;
	// 0 means 1e-6.
	TimeTolerance float64
	// TracePoints asks for a trace of that many samples evenly spaced from 0 to the
	// stop (at least 2); 0 means no trace. A trace costs a second run.
	TracePoints int
	// MaxSteps caps the steps of one run; 0 means 10 000 000.
	MaxSteps int
}

// Defaults of [Settings].
const (
	DefaultHorizon     = 1000 * 3600.0 // s
	DefaultMaxSOCStep  = 0.05
	DefaultMaxVolts    = 0.02 // V per cell
	DefaultMaxStep     = 3600.0
	DefaultVoltsTol    = 1e-6
	DefaultTimeTol     = 1e-6
	DefaultMaxSteps    = 10000000
	MaxTracePoints     = 100000
	maxHorizon         = 1e9 // s
	minAdaptiveStepSec = 1e-3
)

func (s *Settings) resolve() error {
	if err := orDefault("settings.horizon", &s.Horizon, DefaultHorizon, maxHorizon); err != nil {
		return err
	}
	if err := orDefault("settings.max_soc_step", &s.MaxSOCStep, DefaultMaxSOCStep, 0.5); err != nil {
		return err
	}
	if err := orDefault("settings.max_volts_step", &s.MaxVoltsStep, DefaultMaxVolts, 1); err != nil {
		return err
	}
	if err := orDefault("settings.max_step", &s.MaxStep, DefaultMaxStep, maxHorizon); err != nil {
		return err
	}
	if err := orDefault("settings.volts_tolerance", &s.VoltsTolerance, DefaultVoltsTol, 1e-2); err != nil {
		return err
	}
	if err := orDefault("settings.time_tolerance", &s.TimeTolerance, DefaultTimeTol, 1); err != nil {
		return err
	}
	if s.TracePoints < 0 || s.TracePoints == 1 || s.TracePoints > MaxTracePoints {
		return cell.Invalid("settings.trace_points", "must be 0 (no trace) or 2 to %d, got %d", MaxTracePoints, s.TracePoints)
	}
	if s.MaxSteps < 0 {
		return cell.Invalid("settings.max_steps", "must be non-negative, got %d", s.MaxSteps)
	}
	if s.MaxSteps == 0 {
		s.MaxSteps = DefaultMaxSteps
	}
	return nil
}

// orDefault checks a setting that must lie in [0, max] and replaces 0 with def.
func orDefault(name string, v *float64, def, max float64) error {
	if !cell.Finite(*v) || *v < 0 || *v > max {
		return cell.Invalid(name, "must be from 0 (default) to %g, got %g", max, *v)
	}
	if *v == 0 {
		*v = def
	}
	return nil
}

// Status tells how a forecast ended.
type Status uint8

// Forecast outcomes.
const (
	StatusCutoff      Status = iota + 1 // a cell reached the cut-off voltage
	StatusSOCFloor                      // the state of charge reached Problem.SOCFloor
	StatusPowerLimit                    // the pack could no longer deliver the load's power
	StatusLoadEnded                     // a load that does not repeat ended first
	StatusHorizon                       // the horizon passed first: does not reach cut-off
	StatusStepLimit                     // Settings.MaxSteps ran out first
	StatusCannotStart                   // the load takes the pack to or below the cut-off (or floor) at once
	StatusEmpty                         // the state of charge reached 0 before the cut-off voltage (no floor given)
)

var statusText = [...]struct{ name, text string }{
	StatusCutoff:      {"cutoff", "reached the cut-off voltage"},
	StatusSOCFloor:    {"soc-floor", "reached the floor state of charge"},
	StatusPowerLimit:  {"power-limit", "the pack could no longer deliver the requested power"},
	StatusLoadEnded:   {"load-ended", "the load ended before the cut-off"},
	StatusHorizon:     {"horizon", "does not reach the cut-off within the horizon"},
	StatusStepLimit:   {"step-limit", "stopped after the maximum number of steps"},
	StatusCannotStart: {"cannot-start", "the load pulls the pack to or below its cut-off (or floor, or power limit) at once"},
	StatusEmpty:       {"empty", "the cells emptied (0 % state of charge) before reaching the cut-off voltage"},
}

// String returns a short lowercase name: "cutoff", "soc-floor", "empty", "power-limit",
// "load-ended", "horizon", "step-limit" or "cannot-start".
func (s Status) String() string {
	if s >= StatusCutoff && s <= StatusEmpty {
		return statusText[s].name
	}
	return fmt.Sprintf("Status(%d)", uint8(s))
}

// Describe returns a sentence fragment that explains the status to a person.
func (s Status) Describe() string {
	if s >= StatusCutoff && s <= StatusEmpty {
		return statusText[s].text
	}
	return s.String()
}

// MarshalText encodes the status by its short name.
func (s Status) MarshalText() ([]byte, error) { return []byte(s.String()), nil }

// Reached reports whether the forecast ended at the cut-off, the floor, empty or the
// power limit, so that Result.Seconds is a runtime rather than a lower bound.
func (s Status) Reached() bool {
	return s == StatusCutoff || s == StatusSOCFloor || s == StatusEmpty || s == StatusPowerLimit
}

// Result is the outcome of [Run]. Voltages, currents, charge and energy are for the
// whole pack.
type Result struct {
	Status Status
	// Seconds is the time from the start to the stop, in s: the time to cut-off when
	// Status is StatusCutoff, otherwise the time at which the forecast ended.
	Seconds float64
	// LowSeconds and HighSeconds bound Seconds at ±1σ of the state of charge and
	// capacity (see the package documentation); both equal Seconds when no σ is given.
	LowSeconds, HighSeconds float64
	// AmpHours and WattHours are the charge and terminal energy delivered until the stop.
	AmpHours, WattHours float64
	// Final is the state at the stop; Final.SOC is the charge stranded at this rate.
	Final cell.State
	// StartVolts and StartAmps are the terminal voltage and current the load draws at
	// the start; FinalVolts and FinalAmps at the stop.
	StartVolts, StartAmps, FinalVolts, FinalAmps float64
	// CutoffVolts is the pack cut-off voltage that applied (cell cut-off × series).
	CutoffVolts float64
	// Trace holds Settings.TracePoints samples evenly spaced from 0 to Seconds.
	Trace []sim.Sample
	// Warnings are cautions about the request (cut-off below the cell's floor voltage,
	// current above its rating, temperature outside its discharge window).
	Warnings []string
	// Steps and Evaluations count the accepted steps and all model steps (including the
	// search for the crossing) of the nominal run.
	Steps, Evaluations int
}

// Run forecasts prob and returns the result, with the trace (if asked for) appended to
// dst[:0]. A nil settings selects the defaults. Run returns a [*cell.FieldError] for an
// invalid problem or settings and never panics on one. Beyond validating the cell type
// (cell.Type.Validate builds a few field names), Run allocates only for a trace or for
// warnings.
func Run(dst []sim.Sample, prob *Problem, settings *Settings) (Result, error) {
	var set Settings
	if settings != nil {
		set = *settings
	}
	if err := prob.Validate(); err != nil {
		return Result{}, err
	}
	if err := set.resolve(); err != nil {
		return Result{}, err
	}
	e := newEngine(prob, &set)
	res := e.run(prob.Initial, nil)
	res.CutoffVolts = e.cut * e.ns
	res.LowSeconds, res.HighSeconds = res.Seconds, res.Seconds
	if prob.SOCSigma > 0 || prob.CapacitySigma > 0 {
		res.LowSeconds, res.HighSeconds = spread(prob, &set, res.Seconds)
	}
	if set.TracePoints > 0 {
		tr := tracer{samples: dst[:0], n: set.TracePoints, end: res.Seconds}
		e.horizon, e.detect = res.Seconds, false
		e.run(prob.Initial, &tr)
		res.Trace = tr.samples
	}
	res.Warnings = warnings(prob, &res, e.peakCellAmps)
	return res, nil
}

// spread returns the ±1σ time range (package documentation, "Uncertainty").
func spread(prob *Problem, set *Settings, t0 float64) (low, high float64) {
	var dlo, dhi float64
	for axis := range 2 {
		var sigma float64
		if axis == 0 {
			sigma = prob.SOCSigma
		} else {
			sigma = prob.CapacitySigma
		}
		if sigma == 0 {
			continue
		}
		var tp, tm float64
		for _, sign := range [2]float64{1, -1} {
			q := *prob
			if axis == 0 {
				q.Initial.SOC = math.Min(1, math.Max(0, q.Initial.SOC+sign*sigma))
			} else {
				cf := q.Pack.CapacityFactor
				if cf == 0 {
					cf = 1
				}
				q.Pack.CapacityFactor = cf * (1 + sign*sigma)
			}
			e := newEngine(&q, set)
			r := e.run(q.Initial, nil)
			if sign > 0 {
				tp = r.Seconds
			} else {
				tm = r.Seconds
			}
		}
		d := t0 - math.Min(tp, tm)
		dlo += math.Max(0, d) * math.Max(0, d)
		d = math.Max(tp, tm) - t0
		dhi += math.Max(0, d) * math.Max(0, d)
	}
	return math.Max(0, t0-math.Sqrt(dlo)), t0 + math.Sqrt(dhi)
}

// Caution is the standing caution that goes with every forecast and simulation, in
// whatever form it is shown (command line, API response): deep discharge and
// temperature limits are the cell maker's to set.
const Caution = "a model estimate. Do not discharge cells below the cut-off voltage or outside " +
	"the temperature window of the cell maker's datasheet (deep discharge damages lithium cells); the datasheet, " +
	"local codes and licensed practice take precedence."

// warnings returns the cautions that apply to a forecast.
func warnings(prob *Problem, res *Result, peakCellAmps float64) []string {
	var w []string
	typ := prob.Pack.Type
	lim := &typ.Limits
	if cut := prob.CutoffVolts(); lim.FloorVolts > 0 && cut < lim.FloorVolts {
		w = append(w, fmt.Sprintf("the cut-off of %.3g V per cell is below the type's minimum of %.3g V: discharging this deep can damage the cells; the cell maker's datasheet governs", cut, lim.FloorVolts))
	}
	if max := lim.MaxDischargeRate * typ.CapacityAh; peakCellAmps > max*(1+1e-9) {
		w = append(w, fmt.Sprintf("the load draws up to %.3g A per cell, above the type's maximum continuous discharge of %.3g A (%.3g C)", peakCellAmps, max, lim.MaxDischargeRate))
	}
	if c := prob.Celsius; c < lim.DischargeMinCelsius || c > lim.DischargeMaxCelsius {
		w = append(w, fmt.Sprintf("%.3g °C is outside the type's discharge window of %.3g to %.3g °C", c, lim.DischargeMinCelsius, lim.DischargeMaxCelsius))
	}
	if res.Status == StatusCannotStart {
		w = append(w, fmt.Sprintf("at the start the load draws %.4g A at %.4g V, at or below the %.4g V cut-off", res.StartAmps, res.StartVolts, res.CutoffVolts))
	}
	return w
}
