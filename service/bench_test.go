package service_test

import (
	"context"
	"testing"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

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
