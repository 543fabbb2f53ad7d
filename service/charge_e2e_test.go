package service_test

import (
	"context"
	"math"
	"net/http"
	"strings"
	"testing"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/charge"
	"github.com/voltcast/voltcast/model/chem"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service"
)

// errorInfo returns the ErrorInfo of a status error.
func errorInfo(err error) *errdetails.ErrorInfo {
	for _, d := range status.Convert(err).Details() {
		if ei, ok := d.(*errdetails.ErrorInfo); ok {
			return ei
		}
	}
	return nil
}

// near reports whether got is within tol of want (absolute).
func near(got, want, tol float64) bool { return math.Abs(got-want) <= tol }

// samePlan compares an API plan with the model's plan for the same request: the API
// must neither change nor lose anything (durations are rounded to the microsecond).
func samePlan(t *testing.T, got *pb.PlanChargeResponse, want *charge.Result) {
	t.Helper()
	end := want.Full
	if want.Target.Reached {
		end = want.Target
	}
	if !near(got.GetDuration().AsDuration().Seconds(), end.Seconds, 1e-6) || !near(got.GetChargeCurrentAmps(), want.CurrentAmps, 1e-12) ||
		!near(got.GetChargeAmpHours(), end.ChargeAh, 1e-12) || !near(got.GetEnergyWattHours(), end.SupplyWh, 1e-12) ||
		!near(got.GetEndStateOfCharge(), end.SOC, 1e-12) || got.GetTargetReached() != want.Target.Reached ||
		!near(got.GetChargeVoltageVolts(), want.ChargeVolts, 1e-12) || !near(got.GetTerminationCurrentAmps(), want.TerminationAmps, 1e-12) ||
		got.GetTermination() != strings.ToUpper(strings.ReplaceAll(string(want.Termination), "-", "_")) {
		t.Errorf("PlanCharge = %v\nmodel directly: current %g A, to target %+v, full %+v, termination %s", got, want.CurrentAmps, want.Target, want.Full, want.Termination)
	}
	if len(got.GetPhases()) != len(want.Phases) {
		t.Fatalf("%d phases; the model plans %d", len(got.GetPhases()), len(want.Phases))
	}
	for i, ph := range want.Phases {
		g := got.GetPhases()[i]
		if !near(g.GetDuration().AsDuration().Seconds(), ph.EndSeconds-ph.StartSeconds, 1e-6) || !near(g.GetStartCurrentAmps(), ph.StartCurrentAmps, 1e-12) ||
			!near(g.GetEndVoltageVolts(), ph.EndVolts, 1e-12) || !near(g.GetEndStateOfCharge(), ph.EndSOC, 1e-12) || !near(g.GetChargeAmpHours(), ph.ChargeAh, 1e-12) {
			t.Errorf("phase %d = %v; model %+v", i, g, ph)
		}
	}
	if len(got.GetWarnings()) != len(want.Warnings) {
		t.Errorf("warnings %v; model %v", got.GetWarnings(), want.Warnings)
	}
	if len(got.GetCautions()) == 0 || strings.Join(got.GetCautions(), "|") != strings.Join(want.Cautions, "|") {
		t.Errorf("cautions %q; want the model's %q (always present)", got.GetCautions(), want.Cautions)
	}
}

func TestPlanCharge(t *testing.T) { eachStore(t, testPlanCharge) }

func testPlanCharge(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{})
	ctx := context.Background()
	typ, _ := chem.Lookup("generic-nmc-18650")
	pack, _ := cell.NewPack(typ, 13, 4)

	// Ad hoc, no deadline: equal to charge.Plan with the same request.
	want, err := charge.Plan(&charge.Request{Pack: pack, State: cell.State{SOC: 0.2}, TemperatureCelsius: 20, TargetSOC: 0.8,
		MaxCurrentAmps: 4, Efficiency: 0.9}, nil)
	if err != nil {
		t.Fatal(err)
	}
	start := time.Date(2026, 3, 1, 22, 0, 0, 0, time.UTC)
	got, err := e.fc.PlanCharge(ctx, &pb.PlanChargeRequest{
		Pack:                &pb.PackSpec{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 13, ParallelCount: 4, StateOfCharge: 0.2},
		TargetStateOfCharge: 0.8, TemperatureCelsius: proto.Float64(20),
		Charger:   &pb.Charger{MaxCurrentAmps: 4, Efficiency: 0.9},
		StartTime: timestamppb.New(start),
	})
	if err != nil {
		t.Fatalf("PlanCharge: %v", err)
	}
	samePlan(t, got, want)
	if !got.GetDeadlineMet() || !got.GetEndTime().AsTime().Equal(start.Add(got.GetDuration().AsDuration())) {
		t.Errorf("deadline_met %v, end_time %v; want true and start + duration", got.GetDeadlineMet(), got.GetEndTime().AsTime())
	}
	// Charge balance by the definition of state of charge (common practice): moving
	// SOC from 0.2 to 0.8 puts 0.6 of the rated capacity in, over the coulombic
	// efficiency.
	eta := typ.CoulombicEfficiency
	if eta == 0 {
		eta = 1
	}
	if wantAh := 0.6 * pack.RatedCapacityAh() / eta; math.Abs(got.GetChargeAmpHours()/wantAh-1) > 0.01 {
		t.Errorf("charge %g Ah; want %g Ah (0.6 × %g Ah / η %g) within 1 %%", got.GetChargeAmpHours(), wantAh, pack.RatedCapacityAh(), eta)
	}

	// A deadline: the lowest current that makes it, as the model computes it.
	wantDL, err := charge.Plan(&charge.Request{Pack: pack, State: cell.State{SOC: 0.2}, TemperatureCelsius: 20, TargetSOC: 0.8,
		MaxCurrentAmps: 4, Efficiency: 0.9, DeadlineSeconds: 8 * 3600}, nil)
	if err != nil {
		t.Fatal(err)
	}
	gotDL, err := e.fc.PlanCharge(ctx, &pb.PlanChargeRequest{
		Pack:                &pb.PackSpec{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 13, ParallelCount: 4, StateOfCharge: 0.2},
		TargetStateOfCharge: 0.8, TemperatureCelsius: proto.Float64(20),
		Charger:   &pb.Charger{MaxCurrentAmps: 4, Efficiency: 0.9},
		StartTime: timestamppb.New(start), DeadlineTime: timestamppb.New(start.Add(8 * time.Hour)),
	})
	if err != nil {
		t.Fatalf("PlanCharge with a deadline: %v", err)
	}
	samePlan(t, gotDL, wantDL)
	if !gotDL.GetDeadlineMet() || gotDL.GetChargeCurrentAmps() >= got.GetChargeCurrentAmps() {
		t.Errorf("deadline plan: met %v at %g A; want met below the %g A of the plan without deadline", gotDL.GetDeadlineMet(), gotDL.GetChargeCurrentAmps(), got.GetChargeCurrentAmps())
	}

	// A stored battery plans from its tracked state: created at 30 % SOC, 25 °C
	// before any sample, so the same as the ad-hoc pack at 0.3 and 25 °C.
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "bike-3", Battery: &pb.Battery{BatteryType: "batteryTypes/generic-nmc-18650",
		SeriesCount: 13, ParallelCount: 4, InitialStateOfCharge: proto.Float64(0.3)}}); err != nil {
		t.Fatal(err)
	}
	before, err := e.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/bike-3"})
	if err != nil {
		t.Fatal(err)
	}
	wantStored, err := charge.Plan(&charge.Request{Pack: pack, State: cell.State{SOC: 0.3}, TemperatureCelsius: 25, TargetSOC: 1,
		MaxCurrentAmps: 0.5 * pack.RatedCapacityAh(), Efficiency: 1}, nil)
	if err != nil {
		t.Fatal(err)
	}
	code, body := e.do(t, "POST", "/v1/batteries/bike-3:planCharge", `{"targetStateOfCharge":1,"charger":{"maxCurrentAmps":`+jsonNum(0.5*pack.RatedCapacityAh())+`}}`)
	if code != http.StatusOK {
		t.Fatalf("REST planCharge = %d %v", code, body)
	}
	if d, _ := time.ParseDuration(body["duration"].(string)); !near(d.Seconds(), wantStored.Target.Seconds, 1e-6) || len(body["cautions"].([]any)) == 0 {
		t.Errorf("REST stored plan %v; model: %g s to full, cautions %q", body, wantStored.Target.Seconds, wantStored.Cautions)
	}
	// No charger limit means the cell's own maximum rate (1 C for this type).
	gotNoLimit, err := e.fc.PlanCharge(ctx, &pb.PlanChargeRequest{Battery: "batteries/bike-3", TargetStateOfCharge: 0.9})
	if err != nil {
		t.Fatal(err)
	}
	if want := typ.Limits.MaxChargeRate * pack.RatedCapacityAh(); !near(gotNoLimit.GetChargeCurrentAmps(), want, 1e-9) {
		t.Errorf("no charger limit: %g A; want the type's %g C = %g A", gotNoLimit.GetChargeCurrentAmps(), typ.Limits.MaxChargeRate, want)
	}

	// Refusals: a primary cell (ad hoc and stored) and a cold pack, with the cautions
	// in the error.
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "torch", Battery: &pb.Battery{BatteryType: "batteryTypes/generic-alkaline-aa",
		SeriesCount: 4, ParallelCount: 1, InitialStateOfCharge: proto.Float64(0.5)}}); err != nil {
		t.Fatal(err)
	}
	for _, req := range []*pb.PlanChargeRequest{
		{Pack: &pb.PackSpec{BatteryType: "batteryTypes/generic-alkaline-aa", SeriesCount: 2, ParallelCount: 1, StateOfCharge: 0.5}, TargetStateOfCharge: 1},
		{Battery: "batteries/torch", TargetStateOfCharge: 1, Charger: &pb.Charger{MaxCurrentAmps: 0.5}},
	} {
		_, err := e.fc.PlanCharge(ctx, req)
		ei := errorInfo(err)
		if status.Code(err) != codes.FailedPrecondition || ei.GetReason() != service.ReasonNotRechargeable ||
			!strings.Contains(ei.GetMetadata()["cautions"], "Never charge primary") || !strings.Contains(status.Convert(err).Message(), "never be charged") {
			t.Errorf("charge a primary cell (%v): %v, info %v; want FAILED_PRECONDITION NOT_RECHARGEABLE with the cautions", req, err, ei)
		}
	}
	code, body = e.do(t, "POST", "/v1/batteries/torch:planCharge", `{"targetStateOfCharge":1}`)
	if code != http.StatusBadRequest || !strings.Contains(body["message"].(string), "primary") {
		t.Errorf("REST charge of a primary cell = %d %v; want 400 (FAILED_PRECONDITION)", code, body)
	}
	_, err = e.fc.PlanCharge(ctx, &pb.PlanChargeRequest{Battery: "batteries/bike-3", TargetStateOfCharge: 1, TemperatureCelsius: proto.Float64(-10)})
	// generic-nmc-18650 charges from 0 °C (REFERENCE.md §1a via the catalogue, BU-410).
	if ei := errorInfo(err); status.Code(err) != codes.FailedPrecondition || ei.GetReason() != service.ReasonChargeTemperature || ei.GetMetadata()["cautions"] == "" {
		t.Errorf("charge at -10 °C: %v; want FAILED_PRECONDITION %s with cautions", err, service.ReasonChargeTemperature)
	}

	// Bad input: each names its field; unknown battery is NOT_FOUND.
	pk := &pb.PackSpec{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 13, ParallelCount: 4, StateOfCharge: 0.2}
	for _, c := range []struct {
		req   *pb.PlanChargeRequest
		field string
	}{
		{&pb.PlanChargeRequest{Pack: pk}, "target_state_of_charge"},
		{&pb.PlanChargeRequest{Pack: pk, TargetStateOfCharge: math.NaN()}, "target_state_of_charge"},
		{&pb.PlanChargeRequest{Pack: pk, TargetStateOfCharge: 1.2}, "target_state_of_charge"},
		{&pb.PlanChargeRequest{TargetStateOfCharge: 1}, "battery"},
		{&pb.PlanChargeRequest{Battery: "batteries/bike-3", Pack: pk, TargetStateOfCharge: 1}, "battery"},
		{&pb.PlanChargeRequest{Battery: "bike-3", TargetStateOfCharge: 1}, "battery"},
		{&pb.PlanChargeRequest{Pack: pk, TargetStateOfCharge: 1, Charger: &pb.Charger{MaxCurrentAmps: -1}}, "charger.max_current_amps"},
		{&pb.PlanChargeRequest{Pack: pk, TargetStateOfCharge: 1, Charger: &pb.Charger{MaxPowerWatts: math.Inf(1)}}, "charger.max_power_watts"},
		{&pb.PlanChargeRequest{Pack: pk, TargetStateOfCharge: 1, Charger: &pb.Charger{Efficiency: 1.5}}, "charger.efficiency"},
		{&pb.PlanChargeRequest{Pack: pk, TargetStateOfCharge: 1, TerminationCRate: 2}, "termination_c_rate"},
		{&pb.PlanChargeRequest{Pack: pk, TargetStateOfCharge: 1, TemperatureCelsius: proto.Float64(math.NaN())}, "temperature_celsius"},
		{&pb.PlanChargeRequest{Pack: pk, TargetStateOfCharge: 1, StartTime: timestamppb.New(start), DeadlineTime: timestamppb.New(start.Add(-time.Hour))}, "deadline_time"},
	} {
		_, err := e.fc.PlanCharge(ctx, c.req)
		if _, fields := details(err); status.Code(err) != codes.InvalidArgument || len(fields) == 0 || fields[0] != c.field {
			t.Errorf("PlanCharge(%v) = %v (fields %v); want INVALID_ARGUMENT on %s", c.req, err, fields, c.field)
		}
	}
	if _, err := e.fc.PlanCharge(ctx, &pb.PlanChargeRequest{Battery: "batteries/none", TargetStateOfCharge: 1}); status.Code(err) != codes.NotFound {
		t.Errorf("plan for a missing battery: %v; want NOT_FOUND", err)
	}
	// Planning changes nothing stored.
	after, err := e.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/bike-3"})
	if err != nil {
		t.Fatal(err)
	}
	if !proto.Equal(before.GetBattery(), after.GetBattery()) {
		t.Errorf("battery changed by planning:\nbefore %v\nafter  %v", before.GetBattery(), after.GetBattery())
	}
}
