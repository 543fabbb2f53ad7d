package service

import (
	"context"
	"fmt"
	"math"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/forecast"
	"github.com/voltcast/voltcast/model/sim"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

// forecastServer serves ForecastService: ForecastRuntime on model/forecast (here),
// PlanCharge on model/charge (charge.go), AssessHealth on model/ageing (health.go).
// Each validates the whole request into violations first, then resolves the pack
// (resolveSubject), then calls the model once.
type forecastServer struct {
	pb.UnimplementedForecastServiceServer
	s *Service
}

// maxForecast is the longest runtime forecast the API simulates (30 days).
const maxForecast = 30 * 24 * time.Hour

// subject is the pack a forecast is about and where it starts.
type subject struct {
	pack      cell.Pack
	state     cell.State
	socSigma  float64
	celsius   float64
	fromStore bool
}

// checkPackSpec validates an ad-hoc pack description (without looking up its type).
func checkPackSpec(v *violations, field string, p *pb.PackSpec) {
	if _, err := parseName(field+".battery_type", p.GetBatteryType(), collBatteryTypes); err != nil {
		v.add(field+".battery_type", "must be \"batteryTypes/{id}\", got %q", truncate(p.GetBatteryType(), 100))
	}
	if n := p.GetSeriesCount(); n < 1 || n > maxCells {
		v.add(field+".series_count", "must be 1 to %d, got %d", maxCells, n)
	}
	if n := p.GetParallelCount(); n < 1 || n > maxCells {
		v.add(field+".parallel_count", "must be 1 to %d, got %d", maxCells, n)
	}
	if z := p.GetStateOfCharge(); !cell.Finite(z) || z < 0 || z > 1 {
		v.add(field+".state_of_charge", "must be a fraction in [0, 1], got %g", z)
	}
	if s := p.GetStateOfChargeStddev(); !cell.Finite(s) || s < 0 || s > 0.5 {
		v.add(field+".state_of_charge_stddev", "must be a fraction in [0, 0.5], got %g", s)
	}
	if f := p.GetCapacityFraction(); !cell.Finite(f) || f < 0 || f > 2 {
		v.add(field+".capacity_fraction", "must be in (0, 2] (0 means 1), got %g", f)
	}
	if f := p.GetResistanceFraction(); !cell.Finite(f) || f < 0 || f > 20 {
		v.add(field+".resistance_fraction", "must be in (0, 20] (0 means 1), got %g", f)
	}
}

// resolveSubject returns the pack and starting state of a forecast: a stored battery's
// tracked state, or the ad-hoc pack. The request was validated.
func (s *Service) resolveSubject(ctx context.Context, battery string, spec *pb.PackSpec, celsius *float64) (subject, error) {
	var sub subject
	if battery != "" {
		id, err := parseName("battery", battery, collBatteries)
		if err != nil {
			return sub, err
		}
		e, err := s.acquire(ctx, id)
		if err != nil {
			return sub, err
		}
		defer e.mu.Unlock()
		est := e.ekf.State()
		sub.pack = e.pack
		sub.pack.CapacityFactor, sub.pack.ResistanceFactor = est.CapacityFactor, est.ResistanceFactor
		sub.state = cell.State{SOC: clamp01(est.SOC), V: est.BranchVolts, H: est.HysteresisVolts}
		sub.socSigma = math.Min(0.5, math.Sqrt(math.Max(est.Covariance[0][0], 0)))
		sub.celsius = 25
		if e.st.Initialized {
			sub.celsius = e.st.LastTemperatureC
		}
		sub.fromStore = true
	} else {
		t, err := s.lookupType(ctx, "pack.battery_type", spec.GetBatteryType())
		if err != nil {
			return sub, err
		}
		sub.pack = cell.Pack{Type: t, Series: int(spec.GetSeriesCount()), Parallel: int(spec.GetParallelCount()),
			CapacityFactor: spec.GetCapacityFraction(), ResistanceFactor: spec.GetResistanceFraction()}
		if err := sub.pack.Validate(); err != nil {
			return sub, modelFieldErr("pack", err)
		}
		sub.state = cell.State{SOC: spec.GetStateOfCharge()}
		sub.socSigma = spec.GetStateOfChargeStddev()
		sub.celsius = 25
	}
	if celsius != nil {
		sub.celsius = *celsius
	}
	return sub, nil
}

// loadFromPB converts and validates a load. Duty cycles repeat until the cut-off.
func loadFromPB(v *violations, field string, l *pb.Load) sim.Load {
	positive := func(f string, x float64, what string) {
		if !cell.Finite(x) || x <= 0 {
			v.add(f, "%s must be positive and finite, got %g", what, x)
		}
	}
	switch k := l.GetKind().(type) {
	case *pb.Load_CurrentAmps:
		positive(field+".current_amps", k.CurrentAmps, "a discharge current (positive = discharge)")
		return sim.ConstantCurrent(k.CurrentAmps)
	case *pb.Load_PowerWatts:
		positive(field+".power_watts", k.PowerWatts, "a discharge power (positive = discharge)")
		return sim.ConstantPower(k.PowerWatts)
	case *pb.Load_ResistanceOhms:
		positive(field+".resistance_ohms", k.ResistanceOhms, "the load resistance")
		return sim.ConstantResistance(k.ResistanceOhms)
	case *pb.Load_DutyCycle:
		steps := k.DutyCycle.GetSteps()
		if len(steps) == 0 || len(steps) > sim.MaxSegments {
			v.add(field+".duty_cycle.steps", "need 1 to %d steps, got %d", sim.MaxSegments, len(steps))
			return sim.Load{}
		}
		out := sim.Load{Repeat: true, Segments: make([]sim.Segment, len(steps))}
		discharges := false
		for i, st := range steps {
			f := fmt.Sprintf("%s.duty_cycle.steps[%d]", field, i)
			d := st.GetDuration()
			if d == nil || d.CheckValid() != nil || d.AsDuration().Seconds() < sim.MinDuration || d.AsDuration().Seconds() > sim.MaxDuration {
				v.add(f+".duration", "must be %g s to %g s", sim.MinDuration, sim.MaxDuration)
			} else {
				out.Segments[i].Duration = d.AsDuration().Seconds()
			}
			var val float64
			switch sk := st.GetKind().(type) {
			case *pb.DutyCycleStep_CurrentAmps:
				out.Segments[i].Kind, val = sim.Current, sk.CurrentAmps
			case *pb.DutyCycleStep_PowerWatts:
				out.Segments[i].Kind, val = sim.Power, sk.PowerWatts
			case *pb.DutyCycleStep_ResistanceOhms:
				out.Segments[i].Kind, val = sim.Resistance, sk.ResistanceOhms
				positive(f+".resistance_ohms", val, "the load resistance")
			default:
				v.add(f, "one of current_amps, power_watts or resistance_ohms is required")
				continue
			}
			if !cell.Finite(val) {
				v.add(f, "the load value must be finite, got %g", val)
			}
			out.Segments[i].Value = val
			discharges = discharges || out.Segments[i].Kind == sim.Resistance || val > 0
		}
		if !discharges {
			v.add(field+".duty_cycle.steps", "no step discharges the pack (positive current or power), so it never reaches cut-off")
		}
		return out
	}
	v.add(field, "is required: one of current_amps, power_watts, resistance_ohms or duty_cycle")
	return sim.Load{}
}

// checkSubject validates "exactly one of battery and pack".
func checkSubject(v *violations, battery string, pack *pb.PackSpec) {
	switch {
	case battery != "" && pack != nil:
		v.add("battery", "give either battery or pack, not both")
	case battery == "" && pack == nil:
		v.add("battery", "one of battery or pack is required")
	case battery != "":
		if _, err := parseName("battery", battery, collBatteries); err != nil {
			v.add("battery", "must be \"batteries/{id}\", got %q", truncate(battery, 100))
		}
	default:
		checkPackSpec(v, "pack", pack)
	}
}

func checkCelsius(v *violations, field string, c *float64) {
	if c != nil {
		if err := cell.CheckCelsius(field, *c); err != nil {
			v.add(field, "%s", err.(*cell.FieldError).Reason)
		}
	}
}

func (h *forecastServer) ForecastRuntime(ctx context.Context, req *pb.ForecastRuntimeRequest) (*pb.ForecastRuntimeResponse, error) {
	resp, err := h.forecastRuntime(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return resp, nil
}

func (h *forecastServer) forecastRuntime(ctx context.Context, req *pb.ForecastRuntimeRequest) (*pb.ForecastRuntimeResponse, error) {
	var v violations
	checkSubject(&v, req.GetBattery(), req.GetPack())
	load := loadFromPB(&v, "load", req.GetLoad())
	checkCelsius(&v, "temperature_celsius", req.TemperatureCelsius)
	horizon := maxForecast
	if d := req.GetMaxDuration(); d != nil {
		if d.CheckValid() != nil || d.AsDuration() <= 0 || d.AsDuration() > maxForecast {
			v.add("max_duration", "must be positive and at most %s", maxForecast)
		} else {
			horizon = d.AsDuration()
		}
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	sub, err := h.s.resolveSubject(ctx, req.GetBattery(), req.GetPack(), req.TemperatureCelsius)
	if err != nil {
		return nil, err
	}
	prob := forecast.Problem{
		Problem:  sim.Problem{Pack: sub.pack, Initial: sub.state, Celsius: sub.celsius, Load: load},
		SOCSigma: sub.socSigma,
	}
	res, err := forecast.Run(nil, &prob, &forecast.Settings{Horizon: horizon.Seconds()})
	if err != nil {
		return nil, modelFieldErr("", err)
	}
	return runtimeToPB(res), nil
}

// runtimeToPB converts a forecast result.
func runtimeToPB(res forecast.Result) *pb.ForecastRuntimeResponse {
	out := &pb.ForecastRuntimeResponse{
		Runtime:          seconds(res.Seconds),
		RuntimeLower:     seconds(res.LowSeconds),
		RuntimeUpper:     seconds(res.HighSeconds),
		ChargeAmpHours:   res.AmpHours,
		EnergyWattHours:  res.WattHours,
		EndStateOfCharge: clamp01(res.Final.SOC),
		EndVoltageVolts:  res.FinalVolts,
		Warnings:         append([]string(nil), res.Warnings...),
		Cautions:         []string{forecast.Caution},
	}
	switch res.Status {
	case forecast.StatusCutoff, forecast.StatusSOCFloor:
		out.EndReason = pb.RuntimeEndReason_RUNTIME_END_REASON_CUTOFF_VOLTAGE
	case forecast.StatusEmpty:
		out.EndReason = pb.RuntimeEndReason_RUNTIME_END_REASON_EMPTY
	case forecast.StatusPowerLimit, forecast.StatusCannotStart:
		out.EndReason = pb.RuntimeEndReason_RUNTIME_END_REASON_LOAD_NOT_DELIVERABLE
	default:
		out.EndReason = pb.RuntimeEndReason_RUNTIME_END_REASON_MAX_DURATION
	}
	if res.Status == forecast.StatusCannotStart || res.Status == forecast.StatusStepLimit {
		out.Warnings = append(out.Warnings, res.Status.Describe())
	}
	return out
}

// seconds converts s to a Duration, rounded to the microsecond.
func seconds(s float64) *durationpb.Duration {
	if !cell.Finite(s) || s < 0 {
		s = 0
	}
	return durationpb.New(time.Duration(math.Round(s*1e6)) * time.Microsecond)
}
