package service_test

import (
	"context"
	"fmt"
	"testing"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service"
)

// BenchmarkPlanChargeGRPC measures one ad-hoc PlanCharge over loopback gRPC: a 13s4p
// NMC pack from 20 % to 80 % (constant current only) and to 100 % (with the
// constant-voltage taper).
func BenchmarkPlanChargeGRPC(b *testing.B) {
	e := newEnv(b, openSQLite, service.Limits{})
	for _, target := range []float64{0.8, 1} {
		req := &pb.PlanChargeRequest{Pack: &pb.PackSpec{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 13, ParallelCount: 4, StateOfCharge: 0.2},
			TargetStateOfCharge: target, Charger: &pb.Charger{MaxCurrentAmps: 4, Efficiency: 0.9}}
		b.Run(map[float64]string{0.8: "to80", 1: "to100"}[target], func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, err := e.fc.PlanCharge(context.Background(), req); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkAssessHealthGRPC measures one ad-hoc AssessHealth over loopback gRPC with
// 30 and 1000 history points.
func BenchmarkAssessHealthGRPC(b *testing.B) {
	e := newEnv(b, openSQLite, service.Limits{})
	for _, n := range []int{30, 1000} {
		// 2 % of rated capacity lost per 100 cycles, one point per cycle step.
		req := &pb.AssessHealthRequest{}
		t0 := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
		for i := range n {
			c := 600 * float64(i) / float64(n)
			req.History = append(req.History, &pb.HealthPoint{ObserveTime: timestamppb.New(t0.Add(time.Duration(c) * time.Hour)),
				EquivalentFullCycles: c, CapacityFraction: 1 - 0.0002*c})
		}
		b.Run(map[int]string{30: "30points", 1000: "1000points"}[n], func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, err := e.fc.AssessHealth(context.Background(), req); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkIngestTelemetryGRPC measures the batched ingest path a telematics pipeline
// uses: each call carries one block of 100 samples for each of 50 batteries (5000
// samples), over loopback gRPC into the per-battery extended Kalman filters, with
// write-behind persistence to SQLite at the server's default cadence. It reports
// samples per second.
func BenchmarkIngestTelemetryGRPC(b *testing.B) {
	e := newEnv(b, openSQLite, service.Limits{})
	ctx := context.Background()
	const batteries, perBlock = 50, 100
	typ, _ := chem.Lookup("generic-nmc-18650")
	pack, _ := cell.NewPack(typ, 13, 4)
	off, cur, volt := samples(pack, 0.9, 6, perBlock)
	names := make([]string, batteries)
	for k := range names {
		id := fmt.Sprintf("bench-%02d", k)
		if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: id, Battery: &pb.Battery{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 13, ParallelCount: 4}}); err != nil {
			b.Fatal(err)
		}
		names[k] = "batteries/" + id
	}
	base := time.Date(2026, 5, 1, 0, 0, 0, 0, time.UTC)
	req := &pb.IngestTelemetryRequest{Blocks: make([]*pb.SampleBlock, batteries)}
	b.ReportAllocs()
	n := 0
	for b.Loop() {
		// Each call is the next 100 s of every battery's telemetry (the same current
		// and voltage pattern shifted in time, so every sample is new).
		t0 := base.Add(time.Duration(n*perBlock) * time.Second)
		for k := range req.Blocks {
			req.Blocks[k] = &pb.SampleBlock{Battery: names[k], BaseTime: timestamppb.New(t0),
				TimeOffsetsSeconds: off, CurrentAmps: cur, VoltageVolts: volt}
		}
		resp, err := e.tel.IngestTelemetry(ctx, req)
		if err != nil {
			b.Fatal(err)
		}
		if r := resp.GetResults()[0]; r.GetAppliedCount() != perBlock {
			b.Fatalf("applied %d of %d: %v", r.GetAppliedCount(), perBlock, r)
		}
		n++
	}
	b.ReportMetric(float64(n*batteries*perBlock)/b.Elapsed().Seconds(), "samples/s")
}
