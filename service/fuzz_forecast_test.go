package service

import (
	"context"
	"log/slog"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/chem"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

// fuzzService is a service whose store is never reached: the fuzz targets below only
// send ad-hoc requests naming built-in types.
func fuzzService(f *testing.F) *Service {
	f.Helper()
	s, err := New(Options{Store: nopStore{}, Logger: slog.New(slog.DiscardHandler), Now: func() time.Time {
		return time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC)
	}})
	if err != nil {
		f.Fatal(err)
	}
	return s
}

// builtin reports whether a resource name names a built-in type (no store needed).
func builtin(name string) bool {
	return slices.Contains(chem.Names(), strings.TrimPrefix(name, collBatteryTypes+"/"))
}

// FuzzPlanCharge: no charge request may panic, and an answer always carries cautions.
func FuzzPlanCharge(f *testing.F) {
	start := time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC)
	for _, req := range []*pb.PlanChargeRequest{
		{Pack: &pb.PackSpec{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 13, ParallelCount: 4, StateOfCharge: 0.2}, TargetStateOfCharge: 0.8,
			Charger: &pb.Charger{MaxCurrentAmps: 4, Efficiency: 0.9}},
		{Pack: &pb.PackSpec{BatteryType: "batteryTypes/generic-vrla-2v-cell", SeriesCount: 6, ParallelCount: 1, StateOfCharge: 0.5}, TargetStateOfCharge: 1,
			TemperatureCelsius: proto.Float64(-5), StartTime: timestamppb.New(start), DeadlineTime: timestamppb.New(start.Add(6 * time.Hour))},
		{Pack: &pb.PackSpec{BatteryType: "batteryTypes/generic-alkaline-aa", SeriesCount: 2, ParallelCount: 1, StateOfCharge: 0.5}, TargetStateOfCharge: 1},
		{Pack: &pb.PackSpec{BatteryType: "batteryTypes/generic-nimh-aa", SeriesCount: 8, ParallelCount: 1, StateOfCharge: 0}, TargetStateOfCharge: 0.5,
			Charger: &pb.Charger{MaxCurrentAmps: 0.24, MaxVoltageVolts: 11, MaxPowerWatts: 5}, TerminationCRate: 0.1},
	} {
		b, _ := proto.Marshal(req)
		f.Add(b)
	}
	s := fuzzService(f)
	f.Fuzz(func(t *testing.T, b []byte) {
		var req pb.PlanChargeRequest
		if proto.Unmarshal(b, &req) != nil || req.GetBattery() != "" || !builtin(req.GetPack().GetBatteryType()) {
			return
		}
		resp, err := s.planCharge(context.Background(), &req)
		if err == nil && len(resp.GetCautions()) == 0 {
			t.Fatalf("a plan without cautions: %v", resp)
		}
		if err == nil && (math.IsNaN(resp.GetChargeAmpHours()) || math.IsNaN(resp.GetEndStateOfCharge())) {
			t.Fatalf("NaN in a plan: %v", resp)
		}
	})
}

// FuzzAssessHealth: no ad-hoc history may panic or give NaN projections.
func FuzzAssessHealth(f *testing.F) {
	t0 := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	req := &pb.AssessHealthRequest{}
	for i := range 12 {
		req.History = append(req.History, &pb.HealthPoint{ObserveTime: timestamppb.New(t0.Add(time.Duration(i) * 24 * time.Hour)),
			EquivalentFullCycles: 10 * float64(i), CapacityFraction: 1 - 0.001*float64(i)})
	}
	b, _ := proto.Marshal(req)
	f.Add(b)
	req.History[3].CapacityFraction = 0.2
	req.EndOfLifeCapacityFraction = 0.7
	b, _ = proto.Marshal(req)
	f.Add(b)
	s := fuzzService(f)
	f.Fuzz(func(t *testing.T, b []byte) {
		var req pb.AssessHealthRequest
		if proto.Unmarshal(b, &req) != nil || req.GetBattery() != "" || len(req.GetHistory()) > 2000 {
			return
		}
		resp, err := s.assessHealth(context.Background(), &req)
		if err == nil && (math.IsNaN(resp.GetEndOfLifeCycles()) || math.IsNaN(resp.GetFadePerHundredCycles()) ||
			math.IsInf(resp.GetEndOfLifeCycles(), 0) || math.IsInf(resp.GetFadePerHundredCycles(), 0)) {
			t.Fatalf("non-finite projection: %v", resp)
		}
	})
}

// FuzzCalibrationRequest: validation of submitted test data never panics, and what it
// accepts is what the fitter may be given: equal lengths, finite values, strictly
// increasing times.
func FuzzCalibrationRequest(f *testing.F) {
	d := &pb.CalibrationData{Kind: pb.CalibrationTestKind_CALIBRATION_TEST_KIND_PULSE, TemperatureCelsius: []float64{25}}
	for k := range 12 {
		d.TimeOffsetsSeconds = append(d.TimeOffsetsSeconds, float64(k))
		d.CurrentAmps = append(d.CurrentAmps, float64(k%3))
		d.VoltageVolts = append(d.VoltageVolts, 3.7-0.01*float64(k))
	}
	low := proto.Clone(d).(*pb.CalibrationData)
	low.Kind = pb.CalibrationTestKind_CALIBRATION_TEST_KIND_LOW_RATE_DISCHARGE
	req := &pb.CreateCalibrationRequest{Settings: &pb.CalibrationSettings{Chemistry: pb.Chemistry_CHEMISTRY_NMC, CapacityAmpHours: 3},
		Data: low, Tests: []*pb.CalibrationData{d}}
	b, _ := proto.Marshal(req)
	f.Add(b)
	d.DischargedAmpHours = make([]float64, len(d.TimeOffsetsSeconds))
	d.TemperatureCelsius = nil
	req.Settings.InitialStateOfCharge = proto.Float64(0.5)
	b, _ = proto.Marshal(req)
	f.Add(b)
	s := fuzzService(f)
	f.Fuzz(func(t *testing.T, b []byte) {
		var req pb.CreateCalibrationRequest
		if proto.Unmarshal(b, &req) != nil {
			return
		}
		if bt := req.GetSettings().GetBaseBatteryType(); bt != "" && !builtin(bt) {
			return
		}
		p, _, tests, err := s.checkCalibration(context.Background(), &req)
		if err != nil {
			return
		}
		if p.Base == nil || len(p.PulseTests) == 0 {
			t.Fatalf("accepted without a base type or pulse test")
		}
		for _, tt := range tests {
			r := tt.rec
			n := r.Len()
			if len(r.Current) != n || len(r.Voltage) != n || len(r.Temperature) != n || (r.DischargedAh != nil && len(r.DischargedAh) != n) {
				t.Fatalf("%s: accepted with unequal lengths", tt.label)
			}
			for k := range n {
				if k > 0 && !(r.Time[k] > r.Time[k-1]) {
					t.Fatalf("%s: accepted time %g after %g", tt.label, r.Time[k], r.Time[k-1])
				}
				for _, x := range []float64{r.Time[k], r.Current[k], r.Voltage[k], r.Temperature[k]} {
					if math.IsNaN(x) || math.IsInf(x, 0) {
						t.Fatalf("%s: accepted a non-finite value at %d", tt.label, k)
					}
				}
			}
		}
	})
}
