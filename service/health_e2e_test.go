package service_test

import (
	"context"
	"math"
	"net/http"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/ageing"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service"
	"github.com/voltcast/voltcast/service/store"
)

// fadeHistory is a capacity history that fades linearly by 2 % of rated per 100
// equivalent full cycles, 20 cycles a day, with a small deterministic wobble so that
// the fit has residuals. By construction (arithmetic, not a measurement) its trend
// reaches 80 % at (1 − 0.8) / 0.0002 = 1000 cycles, day 50.
func fadeHistory(n int) (cycles, capacity []float64, times []time.Time) {
	t0 := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	for i := range n {
		c := 20 * float64(i)
		cycles = append(cycles, c)
		capacity = append(capacity, 1-0.0002*c+0.001*math.Sin(float64(i)))
		times = append(times, t0.Add(time.Duration(i)*24*time.Hour))
	}
	return cycles, capacity, times
}

// sameProjection compares an API assessment with ageing.Project's result.
func sameProjection(t *testing.T, got *pb.AssessHealthResponse, want ageing.Result, start time.Time) {
	t.Helper()
	if !near(got.GetEndOfLifeCycles(), fin(want.Cycles.Value), 1e-9) || !near(got.GetEndOfLifeCyclesLower(), fin(want.Cycles.Low), 1e-9) ||
		!near(got.GetEndOfLifeCyclesUpper(), fin(want.Cycles.High), 1e-9) || got.GetOutlierCount() != int32(want.Outliers) {
		t.Errorf("AssessHealth = %v; model directly: cycles %+v, law %s, outliers %d", got, want.Cycles, want.Model, want.Outliers)
	}
	if want.Days != nil {
		wantTime := start.Add(time.Duration(want.Days.Value * 24 * float64(time.Hour)))
		if d := got.GetEndOfLifeTime().AsTime().Sub(wantTime); d < -time.Millisecond || d > time.Millisecond {
			t.Errorf("end of life %v; model directly day %g = %v", got.GetEndOfLifeTime().AsTime(), want.Days.Value, wantTime)
		}
	}
}

func TestAssessHealth(t *testing.T) { eachStore(t, testAssessHealth) }

func testAssessHealth(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{})
	ctx := context.Background()

	// Ad hoc, with times: equal to ageing.Project on the same points.
	cycles, capacity, times := fadeHistory(30)
	req := &pb.AssessHealthRequest{}
	for i := range cycles {
		req.History = append(req.History, &pb.HealthPoint{ObserveTime: timestamppb.New(times[i]), EquivalentFullCycles: cycles[i], CapacityFraction: capacity[i], ResistanceFraction: 1 + 0.0005*cycles[i]})
	}
	days := make([]float64, len(times))
	for i, tm := range times {
		days[i] = tm.Sub(times[0]).Hours() / 24
	}
	want, err := ageing.Project(ageing.Problem{Cycles: cycles, Capacity: capacity, Days: days, ReferenceAh: 1}, &ageing.Settings{})
	if err != nil {
		t.Fatal(err)
	}
	got, err := e.fc.AssessHealth(ctx, req)
	if err != nil {
		t.Fatalf("AssessHealth: %v", err)
	}
	sameProjection(t, got, want, times[0])
	last := req.History[len(req.History)-1]
	if got.GetCapacityFraction() != last.GetCapacityFraction() || got.GetEquivalentFullCycles() != last.GetEquivalentFullCycles() ||
		got.GetResistanceFraction() != last.GetResistanceFraction() || got.GetPointCount() != 30 || got.GetTrendModel() == "" {
		t.Errorf("latest values / counts: %v", got)
	}
	// The construction's own answer (see fadeHistory): about 1000 cycles, 2 % per 100.
	if !near(got.GetEndOfLifeCycles(), 1000, 30) || !near(got.GetFadePerHundredCycles(), 0.02, 0.002) ||
		!(got.GetEndOfLifeCyclesLower() <= got.GetEndOfLifeCycles() && got.GetEndOfLifeCycles() <= got.GetEndOfLifeCyclesUpper()) {
		t.Errorf("projection %v cycles (%v..%v), fade %v per 100; want about 1000 and 0.02", got.GetEndOfLifeCycles(),
			got.GetEndOfLifeCyclesLower(), got.GetEndOfLifeCyclesUpper(), got.GetFadePerHundredCycles())
	}
	if d := got.GetEndOfLifeTime().AsTime().Sub(times[0]).Hours() / 24; !near(d, 50, 2) {
		t.Errorf("end of life on day %g; want about 50 (1000 cycles at 20 a day)", d)
	}

	// A stored battery: its stored history, records of equal cycles merged into their
	// mean (a battery at rest persists without cycling).
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "ups-2", Battery: &pb.Battery{BatteryType: "batteryTypes/generic-lfp-26650",
		SeriesCount: 8, ParallelCount: 2, InitialStateOfCharge: proto.Float64(0.9)}}); err != nil {
		t.Fatal(err)
	}
	var recs []store.HealthRecord
	for i := range cycles {
		recs = append(recs, store.HealthRecord{Time: times[i], CapacityFactor: capacity[i], ResistanceFactor: 1, SOC: 0.5, EquivalentCycles: cycles[i]})
	}
	// Two more records at the last cycle count, an hour and two hours later.
	n := len(cycles) - 1
	recs = append(recs, store.HealthRecord{Time: times[n].Add(time.Hour), CapacityFactor: capacity[n] + 0.003, ResistanceFactor: 1, EquivalentCycles: cycles[n]},
		store.HealthRecord{Time: times[n].Add(2 * time.Hour), CapacityFactor: capacity[n] + 0.006, ResistanceFactor: 1, EquivalentCycles: cycles[n]})
	if err := e.st.AppendHealth(ctx, store.DefaultTenant, "ups-2", recs); err != nil {
		t.Fatal(err)
	}
	mCap := append([]float64(nil), capacity...)
	mDays := append([]float64(nil), days...)
	mCap[n] = capacity[n] + 0.003 // mean of +0, +0.003, +0.006
	mDays[n] = days[n] + 1.0/24   // mean of +0 h, +1 h, +2 h
	wantStored, err := ageing.Project(ageing.Problem{Cycles: cycles, Capacity: mCap, Days: mDays, ReferenceAh: 1}, nil)
	if err != nil {
		t.Fatal(err)
	}
	before, _ := e.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/ups-2"})
	code, body := e.do(t, "POST", "/v1/batteries/ups-2:assessHealth", `{}`)
	if code != http.StatusOK {
		t.Fatalf("REST assessHealth = %d %v", code, body)
	}
	gotStored, err := e.fc.AssessHealth(ctx, &pb.AssessHealthRequest{Battery: "batteries/ups-2"})
	if err != nil {
		t.Fatal(err)
	}
	if !near(gotStored.GetEndOfLifeCycles(), fin(wantStored.Cycles.Value), 1e-6) || gotStored.GetPointCount() != int32(len(cycles)) {
		t.Errorf("stored assessment %v; model on the merged history: %+v over %d points", gotStored, wantStored.Cycles, len(cycles))
	}
	if body["endOfLifeCycles"].(float64) != gotStored.GetEndOfLifeCycles() {
		t.Errorf("REST %v and gRPC %v differ", body["endOfLifeCycles"], gotStored.GetEndOfLifeCycles())
	}
	// Latest values are the battery's tracked state.
	if gotStored.GetCapacityFraction() != before.GetBattery().GetState().GetCapacityFraction() {
		t.Errorf("latest capacity %g; tracked state says %g", gotStored.GetCapacityFraction(), before.GetBattery().GetState().GetCapacityFraction())
	}

	// Too few points: an answer with a note, nothing projected.
	few, err := e.fc.AssessHealth(ctx, &pb.AssessHealthRequest{History: req.History[:3]})
	if err != nil || few.GetEndOfLifeCycles() != 0 || len(few.GetNotes()) == 0 || !strings.Contains(few.GetNotes()[0], "at least 5") {
		t.Errorf("3 points: %v, %v; want a note and no projection", few, err)
	}
	// A battery with no history yet: the same.
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "new-1", Battery: &pb.Battery{BatteryType: "batteryTypes/generic-lfp-26650", SeriesCount: 1, ParallelCount: 1}}); err != nil {
		t.Fatal(err)
	}
	if r, err := e.fc.AssessHealth(ctx, &pb.AssessHealthRequest{Battery: "batteries/new-1"}); err != nil || r.GetPointCount() != 0 || r.GetCapacityFraction() != 1 {
		t.Errorf("new battery: %v, %v; want capacity 1, no points", r, err)
	}

	// Bad input names the field; unknown battery is NOT_FOUND.
	bad := func(mut func(h []*pb.HealthPoint)) []*pb.HealthPoint {
		h := make([]*pb.HealthPoint, len(req.History))
		for i, p := range req.History {
			h[i] = proto.Clone(p).(*pb.HealthPoint)
		}
		mut(h)
		return h
	}
	for _, c := range []struct {
		req   *pb.AssessHealthRequest
		field string
	}{
		{&pb.AssessHealthRequest{}, "battery"},
		{&pb.AssessHealthRequest{Battery: "batteries/ups-2", History: req.History}, "battery"},
		{&pb.AssessHealthRequest{History: req.History[:1]}, "history"},
		{&pb.AssessHealthRequest{History: bad(func(h []*pb.HealthPoint) { h[2].CapacityFraction = math.NaN() })}, "history[2].capacity_fraction"},
		{&pb.AssessHealthRequest{History: bad(func(h []*pb.HealthPoint) { h[3].EquivalentFullCycles = h[2].EquivalentFullCycles })}, "history[3].equivalent_full_cycles"},
		{&pb.AssessHealthRequest{History: bad(func(h []*pb.HealthPoint) { h[4].ObserveTime = nil })}, "history[4].observe_time"},
		{&pb.AssessHealthRequest{History: bad(func(h []*pb.HealthPoint) { h[5].ResistanceFraction = -1 })}, "history[5].resistance_fraction"},
		{&pb.AssessHealthRequest{History: req.History, EndOfLifeCapacityFraction: 1.5}, "end_of_life_capacity_fraction"},
	} {
		_, err := e.fc.AssessHealth(ctx, c.req)
		if _, fields := details(err); status.Code(err) != codes.InvalidArgument || len(fields) == 0 || fields[0] != c.field {
			t.Errorf("AssessHealth(%d points, battery %q) = %v (fields %v); want INVALID_ARGUMENT on %s", len(c.req.GetHistory()), c.req.GetBattery(), err, fields, c.field)
		}
	}
	if _, err := e.fc.AssessHealth(ctx, &pb.AssessHealthRequest{Battery: "batteries/none"}); status.Code(err) != codes.NotFound {
		t.Errorf("assess a missing battery: %v; want NOT_FOUND", err)
	}
	after, _ := e.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/ups-2"})
	if !proto.Equal(before.GetBattery(), after.GetBattery()) {
		t.Errorf("battery changed by an assessment")
	}
}

// TestAssessHealthOversized sends more points than the API allows. The store plays no
// part, so it runs on one backend only (the request costs a second under -race).
func TestAssessHealthOversized(t *testing.T) {
	e := newEnv(t, openSQLite, service.Limits{})
	huge := make([]*pb.HealthPoint, 100001)
	for i := range huge {
		huge[i] = &pb.HealthPoint{EquivalentFullCycles: float64(i), CapacityFraction: 1}
	}
	_, err := e.fc.AssessHealth(context.Background(), &pb.AssessHealthRequest{History: huge})
	if _, fields := details(err); status.Code(err) != codes.InvalidArgument || len(fields) != 1 || fields[0] != "history" {
		t.Errorf("100001 points: %v; want INVALID_ARGUMENT on history", err)
	}
}

func fin(x float64) float64 {
	if math.IsInf(x, 0) || math.IsNaN(x) {
		return 0
	}
	return x
}
