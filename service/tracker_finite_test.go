package service_test

import (
	"context"
	"encoding/json"
	"math"
	"testing"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/chem"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service"
	"github.com/voltcast/voltcast/service/store"
)

// A type stored before the API bounded its magnitudes (here 1e308 Ah per cell) made
// a sample's charge count overflow, so the tracked state of charge became NaN and the
// state could never be persisted again; an absurd current on a large but bounded type
// left an RC voltage of 1e6 V, persisted but refused on reload. Such samples must be
// rejected and the state left usable: persistable, and loadable after a restart.
func TestTelemetryNeverLeavesNonFiniteState(t *testing.T) {
	ctx := context.Background()
	st := openSQLite(t)
	base, err := chem.Lookup("generic-nmc-18650")
	if err != nil {
		t.Fatal(err)
	}
	absurd := *base
	absurd.Name, absurd.CapacityAh = "legacy-absurd", 1e308
	params, err := json.Marshal(&absurd)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := st.CreateBatteryType(ctx, store.DefaultTenant, store.BatteryType{Name: absurd.Name, Chemistry: string(absurd.Chemistry), Parameters: params}, ""); err != nil {
		t.Fatal(err)
	}
	e := newEnv(t, func(testing.TB) store.Store { return st }, service.Limits{})
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "legacy", Battery: &pb.Battery{BatteryType: "batteryTypes/legacy-absurd", SeriesCount: 1000, ParallelCount: 1000}}); err != nil {
		t.Fatal(err)
	}
	resp, err := e.tel.IngestTelemetry(ctx, &pb.IngestTelemetryRequest{Blocks: []*pb.SampleBlock{{
		Battery: "batteries/legacy", SequenceNumbers: []int64{1, 2},
		BaseTime: timestamppb.New(time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)), TimeOffsetsSeconds: []float64{0, 1},
		CurrentAmps: []float64{1e200, 1e200}, VoltageVolts: []float64{3700, 3700},
	}}})
	if err != nil {
		t.Fatal(err)
	}
	r := resp.GetResults()[0]
	if soc := r.GetState().GetStateOfCharge(); math.IsNaN(soc) || math.IsInf(soc, 0) {
		t.Errorf("tracked state of charge %g after absurd samples; want it finite (applied %d, rejected %d)", soc, r.GetAppliedCount(), r.GetRejectedCount())
	}
	if err := e.svc.Flush(ctx); err != nil {
		t.Errorf("Flush after absurd samples: %v; want the state persistable", err)
	}

	// Bounded magnitudes (1e5 Ah, 1000 C) but 1000 cells in parallel and 1e12 A.
	big := *base
	big.Name, big.CapacityAh = "big", 1e5
	big.Limits.MaxChargeRate, big.Limits.StandardChargeRate, big.Limits.MaxDischargeRate = 1000, 1000, 1000
	if params, err = json.Marshal(&big); err != nil {
		t.Fatal(err)
	}
	if _, err := st.CreateBatteryType(ctx, store.DefaultTenant, store.BatteryType{Name: big.Name, Chemistry: string(big.Chemistry), Parameters: params}, ""); err != nil {
		t.Fatal(err)
	}
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "big", Battery: &pb.Battery{BatteryType: "batteryTypes/big", SeriesCount: 1000, ParallelCount: 1000}}); err != nil {
		t.Fatal(err)
	}
	if _, err = e.tel.IngestTelemetry(ctx, &pb.IngestTelemetryRequest{Blocks: []*pb.SampleBlock{{
		Battery: "batteries/big", SequenceNumbers: []int64{1, 2},
		BaseTime: timestamppb.New(time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)), TimeOffsetsSeconds: []float64{0, 1},
		CurrentAmps: []float64{1e12, 1e12}, VoltageVolts: []float64{3700, 3700},
	}}}); err != nil {
		t.Fatal(err)
	}
	if err := e.svc.Flush(ctx); err != nil {
		t.Fatalf("Flush: %v", err)
	}
	// A second service on the same store loads the persisted state, as after a restart.
	e2 := newEnv(t, func(testing.TB) store.Store { return st }, service.Limits{})
	if _, err := e2.fc.PlanCharge(ctx, &pb.PlanChargeRequest{Battery: "batteries/big", TargetStateOfCharge: 0.9}); err != nil {
		t.Errorf("PlanCharge from the persisted state after absurd samples: %v; want a plan", err)
	}
}
