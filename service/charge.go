package service

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/charge"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

// PlanCharge answers with model/charge's plan. Refusals (a primary cell, a pack outside
// its charge temperature window) are FAILED_PRECONDITION, not INVALID_ARGUMENT: the
// request is well formed and what forbids the charge is the state of the battery, its
// chemistry or temperature (AIP-193). Every refusal carries the chemistry's cautions in
// the ErrorInfo metadata, as every plan carries them in its response.
func (h *forecastServer) PlanCharge(ctx context.Context, req *pb.PlanChargeRequest) (*pb.PlanChargeResponse, error) {
	resp, err := h.s.planCharge(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return resp, nil
}

// maxChargeDeadline is the furthest deadline a plan accepts, the model's horizon.
const maxChargeDeadline = 72 * time.Hour

func (s *Service) planCharge(ctx context.Context, req *pb.PlanChargeRequest) (*pb.PlanChargeResponse, error) {
	var v violations
	checkSubject(&v, req.GetBattery(), req.GetPack())
	if z := req.GetTargetStateOfCharge(); !cell.Finite(z) || z <= 0 || z > 1 {
		v.add("target_state_of_charge", "is required: a fraction in (0, 1], got %g", z)
	}
	checkCelsius(&v, "temperature_celsius", req.TemperatureCelsius)
	ch := req.GetCharger()
	nonNegative := func(field string, x float64, what string) {
		if !cell.Finite(x) || x < 0 {
			v.add(field, "%s must be finite and non-negative (0 = no limit), got %g", what, x)
		}
	}
	nonNegative("charger.max_current_amps", ch.GetMaxCurrentAmps(), "the current limit (a magnitude)")
	nonNegative("charger.max_power_watts", ch.GetMaxPowerWatts(), "the power limit")
	nonNegative("charger.max_voltage_volts", ch.GetMaxVoltageVolts(), "the voltage limit")
	if e := ch.GetEfficiency(); !cell.Finite(e) || e < 0 || e > 1 {
		v.add("charger.efficiency", "must be a fraction in (0, 1] (0 means 1), got %g", e)
	}
	if r := req.GetTerminationCRate(); !cell.Finite(r) || r < 0 || r >= 1 {
		v.add("termination_c_rate", "must be a C-rate in [0, 1) (0 means the type's), got %g", r)
	}
	start := s.now()
	if t := req.GetStartTime(); t != nil {
		if err := t.CheckValid(); err != nil {
			v.add("start_time", "not a valid timestamp: %v", err)
		} else {
			start = t.AsTime()
		}
	}
	var deadline time.Duration
	if t := req.GetDeadlineTime(); t != nil {
		if err := t.CheckValid(); err != nil {
			v.add("deadline_time", "not a valid timestamp: %v", err)
		} else if deadline = t.AsTime().Sub(start); deadline <= 0 || deadline > maxChargeDeadline {
			v.add("deadline_time", "must be after start_time (or now) and at most %s later, got %s", maxChargeDeadline, deadline)
		}
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	sub, err := s.resolveSubject(ctx, req.GetBattery(), req.GetPack(), req.TemperatureCelsius)
	if err != nil {
		return nil, err
	}
	creq := chargeRequest(sub, req, deadline)
	res, err := charge.Plan(creq, nil)
	if err != nil {
		return nil, chargeErr(err, sub, req)
	}
	return chargeToPB(res, start, deadline), nil
}

// chargeRequest builds the model's request for a validated PlanChargeRequest.
func chargeRequest(sub subject, req *pb.PlanChargeRequest, deadline time.Duration) *charge.Request {
	ch := req.GetCharger()
	current := ch.GetMaxCurrentAmps()
	if current == 0 {
		// No charger limit: the cell's own maximum charge rate bounds the current. A type
		// without one (a primary cell) gets 1 C so that the model reaches its refusal.
		current = sub.pack.Type.Limits.MaxChargeRate * sub.pack.RatedCapacityAh()
		if current <= 0 {
			current = sub.pack.RatedCapacityAh()
		}
	}
	eff := ch.GetEfficiency()
	if eff == 0 {
		eff = 1
	}
	return &charge.Request{
		Pack:               sub.pack,
		State:              sub.state,
		TemperatureCelsius: sub.celsius,
		TargetSOC:          req.GetTargetStateOfCharge(),
		MaxCurrentAmps:     current,
		MaxVoltageVolts:    ch.GetMaxVoltageVolts(),
		MaxPowerWatts:      ch.GetMaxPowerWatts(),
		Efficiency:         eff,
		DeadlineSeconds:    deadline.Seconds(),
		TerminationRate:    req.GetTerminationCRate(),
	}
}

// chargeErr maps the model's refusals; other errors pass to toStatus.
func chargeErr(err error, sub subject, req *pb.PlanChargeRequest) error {
	t := sub.pack.Type
	subjectName := req.GetBattery()
	if subjectName == "" {
		subjectName = req.GetPack().GetBatteryType()
	}
	meta := map[string]string{"chemistry": string(t.Chemistry), "cautions": strings.Join(charge.Cautions(t.Chemistry, t.ChargeMethod), "\n")}
	switch {
	case errors.Is(err, charge.ErrPrimaryCell):
		return &Error{Code: codes.FailedPrecondition, Reason: ReasonNotRechargeable, Resource: subjectName, Metadata: meta,
			Msg:        "refusing to plan a charge: " + subjectName + " is a primary (non-rechargeable) cell; primary cells must never be charged, they can leak, rupture, vent or burn",
			Violations: []Violation{{Field: ReasonNotRechargeable, Description: "the battery type's charge method is none (a primary cell); never charge it"}}}
	case errors.Is(err, charge.ErrTemperature):
		l := t.Limits
		return &Error{Code: codes.FailedPrecondition, Reason: ReasonChargeTemperature, Resource: subjectName, Metadata: meta,
			Msg: "refusing to plan a charge outside the charge temperature window; wait until the pack is within it (the cell maker's datasheet governs)",
			Violations: []Violation{{Field: ReasonChargeTemperature,
				Description: fmt.Sprintf("pack temperature %g °C is outside the type's charge window %g to %g °C", sub.celsius, l.ChargeMinCelsius, l.ChargeMaxCelsius)}}}
	}
	return modelFieldErr("", chargeField(err))
}

// chargeField renames a model field error into the request's field names.
func chargeField(err error) error {
	var fe *cell.FieldError
	if !errors.As(err, &fe) {
		return err
	}
	names := map[string]string{
		"target_soc": "target_state_of_charge", "max_current_amps": "charger.max_current_amps",
		"max_voltage_volts": "charger.max_voltage_volts", "max_power_watts": "charger.max_power_watts",
		"efficiency": "charger.efficiency", "termination_c_rate": "termination_c_rate",
		"temperature_celsius": "temperature_celsius", "state.soc": "pack.state_of_charge",
	}
	if n, ok := names[fe.Field]; ok {
		return &cell.FieldError{Field: n, Reason: fe.Reason}
	}
	return err
}

var phaseKindToPB = map[charge.PhaseKind]pb.ChargePhaseKind{
	charge.PhasePrecharge:       pb.ChargePhaseKind_CHARGE_PHASE_KIND_PRECHARGE,
	charge.PhaseConstantCurrent: pb.ChargePhaseKind_CHARGE_PHASE_KIND_CONSTANT_CURRENT,
	charge.PhaseConstantPower:   pb.ChargePhaseKind_CHARGE_PHASE_KIND_CONSTANT_POWER,
	charge.PhaseConstantVoltage: pb.ChargePhaseKind_CHARGE_PHASE_KIND_CONSTANT_VOLTAGE,
	charge.PhaseBulk:            pb.ChargePhaseKind_CHARGE_PHASE_KIND_CONSTANT_CURRENT,
	charge.PhaseAbsorption:      pb.ChargePhaseKind_CHARGE_PHASE_KIND_ABSORPTION,
	charge.PhaseFloat:           pb.ChargePhaseKind_CHARGE_PHASE_KIND_FLOAT,
	charge.PhaseOvercharge:      pb.ChargePhaseKind_CHARGE_PHASE_KIND_OVERCHARGE,
}

// upperSnake turns the model's kebab-case codes ("cold-derate") into the API's
// UPPER_SNAKE_CASE ("COLD_DERATE").
func upperSnake(s string) string {
	return strings.ToUpper(strings.ReplaceAll(s, "-", "_"))
}

// chargeToPB converts a plan. start is when the charge starts; deadline is 0 when none
// was given.
func chargeToPB(res *charge.Result, start time.Time, deadline time.Duration) *pb.PlanChargeResponse {
	end := res.Full
	if res.Target.Reached {
		end = res.Target
	}
	out := &pb.PlanChargeResponse{
		ChargeCurrentAmps:      res.CurrentAmps,
		Duration:               seconds(end.Seconds),
		EndStateOfCharge:       end.SOC,
		ChargeAmpHours:         end.ChargeAh,
		EnergyWattHours:        end.SupplyWh,
		TargetReached:          res.Target.Reached,
		Termination:            upperSnake(string(res.Termination)),
		ChargeVoltageVolts:     res.ChargeVolts,
		FloatVoltageVolts:      res.FloatVolts,
		TerminationCurrentAmps: res.TerminationAmps,
		Cautions:               append([]string(nil), res.Cautions...),
	}
	out.EndTime = timestamppb.New(start.Add(out.Duration.AsDuration()))
	out.DeadlineMet = res.Target.Reached && (deadline == 0 || res.Target.Seconds <= deadline.Seconds())
	if res.Termination != charge.TerminationNone {
		out.FullDuration = seconds(res.Full.Seconds)
	}
	for _, ph := range res.Phases {
		out.Phases = append(out.Phases, &pb.ChargePhase{
			Kind:               phaseKindToPB[ph.Kind],
			Duration:           seconds(ph.EndSeconds - ph.StartSeconds),
			StartCurrentAmps:   ph.StartCurrentAmps,
			EndCurrentAmps:     ph.EndCurrentAmps,
			StartVoltageVolts:  ph.StartVolts,
			EndVoltageVolts:    ph.EndVolts,
			StartStateOfCharge: ph.StartSOC,
			EndStateOfCharge:   ph.EndSOC,
			ChargeAmpHours:     ph.ChargeAh,
			EnergyWattHours:    ph.EnergyWh,
		})
	}
	for _, w := range res.Warnings {
		out.Warnings = append(out.Warnings, &pb.ChargeWarning{Code: upperSnake(string(w.Code)), Message: w.Message})
	}
	return out
}
