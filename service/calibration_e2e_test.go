package service_test

import (
	"context"
	"encoding/json"
	"fmt"
	"log/slog"
	"math"
	"net/http"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/proto"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	"github.com/voltcast/voltcast/model/fit"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service"
	"github.com/voltcast/voltcast/service/store"
)

// labTest records a test of one cell of a known type by stepping the model
// (cell.Pack.Step), so the generating parameters are known. It samples every second
// while current flows and for the first minute of a rest, every 10 s after that, or at
// a fixed interval when every is set.
type labTest struct {
	p     cell.Pack
	st    cell.State
	tk    float64
	t     float64
	every float64
	data  *pb.CalibrationData
}

func newLabTest(typ *cell.Type, kind pb.CalibrationTestKind, every float64) *labTest {
	l := &labTest{p: cell.Pack{Type: typ, Series: 1, Parallel: 1}, st: cell.State{SOC: 1}, tk: cell.Kelvin(25), every: every,
		data: &pb.CalibrationData{Kind: kind, TemperatureCelsius: []float64{25}}}
	l.sample(0)
	return l
}

func (l *labTest) sample(i float64) {
	l.data.TimeOffsetsSeconds = append(l.data.TimeOffsetsSeconds, l.t)
	l.data.CurrentAmps = append(l.data.CurrentAmps, i)
	l.data.VoltageVolts = append(l.data.VoltageVolts, l.p.Voltage(&l.st, i, l.tk))
}

// hold applies current i (positive = discharge) for secs seconds, or until stop says so.
func (l *labTest) hold(i, secs float64, stop func() bool) {
	for el := 0.0; el < secs-1e-9; {
		step := l.every
		if step == 0 {
			step = 1
			if i == 0 && el >= 60 {
				step = 10
			}
		}
		step = math.Min(step, secs-el)
		l.p.Step(&l.st, i, step, l.tk)
		l.t += step
		el += step
		l.sample(i)
		if stop != nil && stop() {
			return
		}
	}
}

// calibrationTests returns a low-rate test (C/20 discharge from full to the cut-off,
// an hour's rest, C/20 charge back) and a pulse test (three levels of a 2C discharge
// and a 1.5C charge pulse of 10 s with 2 min rests, then 10 % of capacity at 1C and
// 30 min rest), both of one generic-nmc-18650 cell at 25 °C: the shapes of the
// low-rate and HPPC-style tests the fitter is built for (model/fit package doc).
func calibrationTests(t testing.TB) (*cell.Type, []*pb.CalibrationData) {
	typ, err := chem.Lookup("generic-nmc-18650")
	if err != nil {
		t.Fatal(err)
	}
	q := typ.CapacityAh
	ocv := newLabTest(typ, pb.CalibrationTestKind_CALIBRATION_TEST_KIND_LOW_RATE_DISCHARGE, 60)
	ocv.hold(0, 600, nil)
	start := ocv.t
	// To the cut-off, or empty: the type's OCV at 0 % sits above its cut-off at C/20.
	ocv.hold(q/20, 25*3600, func() bool {
		return ocv.data.VoltageVolts[len(ocv.data.VoltageVolts)-1] <= typ.Limits.CutoffVolts || ocv.st.SOC <= 0
	})
	dis := ocv.t - start
	ocv.hold(0, 3600, nil)
	ocv.hold(-q/20, 0.95*dis, nil)
	ocv.hold(0, 600, nil)

	hppc := newLabTest(typ, pb.CalibrationTestKind_CALIBRATION_TEST_KIND_PULSE, 0)
	hppc.hold(0, 600, nil)
	for range 3 {
		hppc.hold(2*q, 10, nil)
		hppc.hold(0, 120, nil)
		hppc.hold(-1.5*q, 10, nil)
		hppc.hold(0, 120, nil)
		hppc.hold(q, 360, nil)
		hppc.hold(0, 1800, nil)
	}
	return typ, []*pb.CalibrationData{ocv.data, hppc.data}
}

// directFit is the model called directly on the same records as the service builds
// for calibration id, computed once for every store.
var directFit struct {
	once sync.Once
	res  *fit.Result
	err  error
}

func fitDirectly(t *testing.T, id string, typ *cell.Type, tests []*pb.CalibrationData) *fit.Result {
	t.Helper()
	directFit.once.Do(func() {
		rec := func(label string, d *pb.CalibrationData) fit.Record {
			r := fit.Record{Name: "calibrations/" + id + " " + label, Time: d.TimeOffsetsSeconds, Current: d.CurrentAmps, Voltage: d.VoltageVolts}
			for range d.TimeOffsetsSeconds {
				r.Temperature = append(r.Temperature, cell.Kelvin(25))
			}
			return r
		}
		p := &fit.Problem{Name: id, OCVTest: rec("tests[0]", tests[0]), PulseTests: []fit.Record{rec("tests[1]", tests[1])}, Base: typ}
		directFit.res, directFit.err = fit.Fit(context.Background(), p, nil)
	})
	if directFit.err != nil {
		t.Fatalf("fit.Fit: %v", directFit.err)
	}
	return directFit.res
}

// waitCalibration polls until the calibration leaves PENDING and RUNNING.
func waitCalibration(t *testing.T, e *env, name string) *pb.Calibration {
	t.Helper()
	deadline := time.Now().Add(60 * time.Second)
	for {
		c, err := e.cal.GetCalibration(context.Background(), &pb.GetCalibrationRequest{Name: name})
		if err != nil {
			t.Fatalf("GetCalibration: %v", err)
		}
		switch c.GetCalibration().GetState() {
		case pb.CalibrationState_CALIBRATION_STATE_PENDING, pb.CalibrationState_CALIBRATION_STATE_RUNNING:
		default:
			return c.GetCalibration()
		}
		if time.Now().After(deadline) {
			t.Fatalf("%s still %v after 60 s", name, c.GetCalibration().GetState())
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// TestCalibrations runs its stores in parallel: it mostly waits (for fits, and for a
// lease to lapse).
func TestCalibrations(t *testing.T) { eachStoreParallel(t, testCalibrations) }

func testCalibrations(t *testing.T, open opener) {
	typ, tests := calibrationTests(t)
	// Room for the two tests and one more pulse test, not two more.
	lim := service.Limits{CalibrationWorkers: 2, CalibrationQueue: 1, CalibrationLease: 3 * time.Second,
		MaxCalibrationSamples: len(tests[0].TimeOffsetsSeconds) + 2*len(tests[1].TimeOffsetsSeconds)}
	e := newEnv(t, open, lim)
	ctx := context.Background()
	// Jobs named cal-hold-* wait in the runner, RUNNING, until release is closed.
	release := make(chan struct{})
	service.SetCalibrationHook(e.svc, func(id string) {
		if strings.HasPrefix(id, "cal-hold") {
			<-release
		}
	})
	settings := &pb.CalibrationSettings{Chemistry: pb.Chemistry_CHEMISTRY_NMC, CapacityAmpHours: typ.CapacityAh}

	created, err := e.cal.CreateCalibration(ctx, &pb.CreateCalibrationRequest{CalibrationId: "cal-ok", DisplayName: "bench run 1",
		Settings: settings, Tests: tests, RequestId: "req-1"})
	if err != nil {
		t.Fatalf("CreateCalibration: %v", err)
	}
	if s := created.GetCalibration().GetState(); s != pb.CalibrationState_CALIBRATION_STATE_PENDING && s != pb.CalibrationState_CALIBRATION_STATE_RUNNING {
		t.Errorf("new calibration is %v; want PENDING or RUNNING", s)
	}
	// A retried request id returns the first calibration and starts nothing, whether
	// the retry repeats the id or not, while the first still runs.
	for _, id := range []string{"cal-ok", "cal-other", ""} {
		again, err := e.cal.CreateCalibration(ctx, &pb.CreateCalibrationRequest{CalibrationId: id, Settings: settings, Tests: tests, RequestId: "req-1"})
		if err != nil || again.GetCalibration().GetName() != "calibrations/cal-ok" {
			t.Errorf("replayed request id (calibration_id %q): %v, %v; want calibrations/cal-ok", id, again, err)
		}
	}
	// The same id without the request id is taken.
	if _, err := e.cal.CreateCalibration(ctx, &pb.CreateCalibrationRequest{CalibrationId: "cal-ok", Settings: settings, Tests: tests}); status.Code(err) != codes.AlreadyExists {
		t.Errorf("create with a taken id: %v; want ALREADY_EXISTS", err)
	}
	got := waitCalibration(t, e, "calibrations/cal-ok")
	if got.GetState() != pb.CalibrationState_CALIBRATION_STATE_SUCCEEDED {
		t.Fatalf("calibration ended %v: %v", got.GetState(), got.GetError())
	}

	// Equal to the model called directly: the stored parameter set is the model's,
	// byte for byte, and the report carries the model's numbers.
	want := fitDirectly(t, "cal-ok", typ, tests)
	row, err := e.st.GetCalibration(ctx, store.DefaultTenant, "cal-ok")
	if err != nil {
		t.Fatal(err)
	}
	var rep struct {
		Type json.RawMessage `json:"type"`
	}
	if err := json.Unmarshal(row.Report, &rep); err != nil {
		t.Fatal(err)
	}
	wantJSON, _ := json.Marshal(want.Type)
	if string(rep.Type) != string(wantJSON) {
		t.Errorf("fitted type differs from fit.Fit's:\nservice %.300s\nmodel   %.300s", rep.Type, wantJSON)
	}
	bt := got.GetBatteryType()
	r0 := bt.GetSeriesResistanceOhms().GetTable()
	wantR0 := want.Type.R0.Table
	if bt.GetCapacityAmpHours() != want.Type.CapacityAh || len(r0.GetRows()) != len(wantR0.Temps()) || bt.GetName() != "" {
		t.Errorf("API battery type: capacity %g Ah, %d R0 rows, name %q; model %g Ah, %d rows", bt.GetCapacityAmpHours(), len(r0.GetRows()), bt.GetName(), want.Type.CapacityAh, len(wantR0.Temps()))
	} else {
		for j := range r0.GetRows() {
			for i, z := range r0.GetStateOfChargeKnots() {
				if w := wantR0.At(z, wantR0.Temps()[j]); !near(r0.GetRows()[j].GetValues()[i], w, 1e-15) {
					t.Errorf("R0[%d][%d] = %g; model %g", j, i, r0.GetRows()[j].GetValues()[i], w)
				}
			}
		}
	}
	r := got.GetReport()
	if len(r.GetTests()) != len(want.Report.Files) {
		t.Fatalf("report has %d tests; model reports %d files", len(r.GetTests()), len(want.Report.Files))
	}
	var ss float64
	var n int
	for i, f := range want.Report.Files {
		g := r.GetTests()[i]
		if g.GetSampleCount() != int32(f.Samples) || g.GetVoltageRmseVolts() != f.RMSE || g.GetMaxVoltageErrorVolts() != f.Max || g.GetMethod() != f.How {
			t.Errorf("report test %d = %v; model %s: %d samples, RMSE %g, max %g", i, g, f.Name, f.Samples, f.RMSE, f.Max)
		}
		ss += f.RMSE * f.RMSE * float64(f.Samples)
		n += f.Samples
	}
	if r.GetTests()[0].GetTest() != "tests[0]" || r.GetTests()[0].GetKind() != pb.CalibrationTestKind_CALIBRATION_TEST_KIND_LOW_RATE_DISCHARGE ||
		r.GetSampleCount() != int32(n) || !near(r.GetVoltageRmseVolts(), math.Sqrt(ss/float64(n)), 1e-15) || len(r.GetNotes()) == 0 {
		t.Errorf("report %v", r)
	}
	// The data came from generic-nmc-18650 itself, so the fit must describe it: the
	// capacity the low-rate test removed down to the cut-off is within 3 % of the
	// type's rating, and the pulse test is reproduced to 10 mV RMS.
	if !near(bt.GetCapacityAmpHours()/typ.CapacityAh, 1, 0.03) || r.GetTests()[1].GetVoltageRmseVolts() > 0.01 {
		t.Errorf("fit of the generating type: capacity %g Ah (type %g), pulse RMSE %g V", bt.GetCapacityAmpHours(), typ.CapacityAh, r.GetTests()[1].GetVoltageRmseVolts())
	}

	// Register a battery type from it; it names the calibration and serves a battery.
	if _, err := e.types.CreateBatteryType(ctx, &pb.CreateBatteryTypeRequest{BatteryTypeId: "bench-fit", Calibration: "calibrations/cal-ok",
		BatteryType: &pb.BatteryType{DisplayName: "bench fit", Description: "fitted on the bench"}}); err != nil {
		t.Fatalf("CreateBatteryType from a calibration: %v", err)
	}
	reg, err := e.types.GetBatteryType(ctx, &pb.GetBatteryTypeRequest{Name: "batteryTypes/bench-fit"})
	if err != nil {
		t.Fatal(err)
	}
	if b := reg.GetBatteryType(); b.GetCalibration() != "calibrations/cal-ok" || b.GetCapacityAmpHours() != want.Type.CapacityAh || b.GetDescription() != "fitted on the bench" || b.GetDisplayName() != "bench fit" {
		t.Errorf("registered type %v", b)
	}
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "lab-1", Battery: &pb.Battery{BatteryType: "batteryTypes/bench-fit", SeriesCount: 4, ParallelCount: 1}}); err != nil {
		t.Errorf("battery of the fitted type: %v", err)
	}

	// REST: get and list.
	code, body := e.do(t, "GET", "/v1/calibrations/cal-ok", "")
	if code != http.StatusOK || body["state"] != "CALIBRATION_STATE_SUCCEEDED" || body["report"] == nil {
		t.Errorf("GET /v1/calibrations/cal-ok = %d %.200v", code, body)
	}
	code, body = e.do(t, "GET", "/v1/calibrations", "")
	if code != http.StatusOK || len(body["calibrations"].([]any)) != 1 {
		t.Errorf("GET /v1/calibrations = %d %.200v; want the one calibration", code, body)
	}

	// Bad input: the field named, nothing stored.
	nan := proto.Clone(tests[1]).(*pb.CalibrationData)
	nan.VoltageVolts[5] = math.NaN()
	back := proto.Clone(tests[1]).(*pb.CalibrationData)
	back.TimeOffsetsSeconds[7] = back.TimeOffsetsSeconds[6]
	milli := proto.Clone(tests[1]).(*pb.CalibrationData)
	firstPulse := -1
	for i := range milli.CurrentAmps {
		milli.CurrentAmps[i] *= 1000
		if firstPulse < 0 && milli.CurrentAmps[i] != 0 {
			firstPulse = i
		}
	}
	short := proto.Clone(tests[1]).(*pb.CalibrationData)
	short.CurrentAmps = short.CurrentAmps[:10]
	for _, c := range []struct {
		name  string
		req   *pb.CreateCalibrationRequest
		code  codes.Code
		field string
	}{
		{"no settings", &pb.CreateCalibrationRequest{Tests: tests}, codes.InvalidArgument, "settings"},
		{"no chemistry", &pb.CreateCalibrationRequest{Settings: &pb.CalibrationSettings{CapacityAmpHours: 3}, Tests: tests}, codes.InvalidArgument, "settings.chemistry"},
		{"NaN capacity", &pb.CreateCalibrationRequest{Settings: &pb.CalibrationSettings{Chemistry: pb.Chemistry_CHEMISTRY_NMC, CapacityAmpHours: math.NaN()}, Tests: tests}, codes.InvalidArgument, "settings.capacity_amp_hours"},
		{"three branches", &pb.CreateCalibrationRequest{Settings: &pb.CalibrationSettings{Chemistry: pb.Chemistry_CHEMISTRY_NMC, CapacityAmpHours: 3, RcBranchCount: 3}, Tests: tests}, codes.InvalidArgument, "settings.rc_branch_count"},
		{"no tests", &pb.CreateCalibrationRequest{Settings: settings}, codes.InvalidArgument, "tests"},
		{"no pulse test", &pb.CreateCalibrationRequest{Settings: settings, Data: tests[0]}, codes.InvalidArgument, "tests"},
		{"NaN voltage", &pb.CreateCalibrationRequest{Settings: settings, Data: tests[0], Tests: []*pb.CalibrationData{nan}}, codes.InvalidArgument, "tests[0].voltage_volts[5]"},
		{"time not increasing", &pb.CreateCalibrationRequest{Settings: settings, Tests: []*pb.CalibrationData{tests[0], back}}, codes.InvalidArgument, "tests[1].time_offsets_seconds[7]"},
		{"milliamperes", &pb.CreateCalibrationRequest{Settings: settings, Tests: []*pb.CalibrationData{tests[0], milli}}, codes.InvalidArgument, fmt.Sprintf("tests[1].current_amps[%d]", firstPulse)},
		{"unequal arrays", &pb.CreateCalibrationRequest{Settings: settings, Tests: []*pb.CalibrationData{tests[0], short}}, codes.InvalidArgument, "tests[1].current_amps"},
		{"bad id", &pb.CreateCalibrationRequest{CalibrationId: "Cal_1", Settings: settings, Tests: tests}, codes.InvalidArgument, "calibration_id"},
		{"oversized", &pb.CreateCalibrationRequest{Settings: settings, Tests: []*pb.CalibrationData{tests[0], tests[1], tests[1], tests[1]}}, codes.InvalidArgument, "tests"},
		{"unknown base type", &pb.CreateCalibrationRequest{Settings: &pb.CalibrationSettings{Chemistry: pb.Chemistry_CHEMISTRY_NMC, CapacityAmpHours: 3, BaseBatteryType: "batteryTypes/none"}, Tests: tests}, codes.NotFound, ""},
		{"base of another chemistry", &pb.CreateCalibrationRequest{Settings: &pb.CalibrationSettings{Chemistry: pb.Chemistry_CHEMISTRY_NMC, CapacityAmpHours: 3, BaseBatteryType: "batteryTypes/generic-lfp-26650"}, Tests: tests}, codes.InvalidArgument, "settings.base_battery_type"},
	} {
		_, err := e.cal.CreateCalibration(ctx, c.req)
		if _, fields := details(err); status.Code(err) != c.code || (c.field != "" && (len(fields) == 0 || fields[0] != c.field)) {
			t.Errorf("%s: %v (fields %v); want %v on %q", c.name, err, fields, c.code, c.field)
		}
	}
	if list, err := e.cal.ListCalibrations(ctx, &pb.ListCalibrationsRequest{}); err != nil || len(list.GetCalibrations()) != 1 {
		t.Errorf("after rejected requests: %d calibrations, %v; want still 1", len(list.GetCalibrations()), err)
	}
	// Over REST, an unknown field in the test data is 400 with the field named.
	code, body = e.do(t, "POST", "/v1/calibrations", `{"settings":{"chemistry":"CHEMISTRY_NMC","capacityAmpHours":3},"tests":[{"kind":"CALIBRATION_TEST_KIND_PULSE","voltages":[1]}]}`)
	if code != http.StatusBadRequest || !strings.Contains(body["message"].(string), "voltages") {
		t.Errorf("REST unknown field = %d %v", code, body)
	}

	// Registering a type from a calibration that did not succeed, or does not exist.
	if _, err := e.types.CreateBatteryType(ctx, &pb.CreateBatteryTypeRequest{BatteryTypeId: "x", Calibration: "calibrations/none"}); status.Code(err) != codes.NotFound {
		t.Errorf("type from a missing calibration: %v; want NOT_FOUND", err)
	}

	// REST: create (a fit that is cancelled at once), cancel, delete.
	reqJSON, err := protojson.Marshal(&pb.CreateCalibrationRequest{CalibrationId: "cal-rest", Settings: settings, Tests: tests})
	if err != nil {
		t.Fatal(err)
	}
	code, body = e.do(t, "POST", "/v1/calibrations", string(reqJSON))
	if st := body["state"]; code != http.StatusOK || body["name"] != "calibrations/cal-rest" || (st != "CALIBRATION_STATE_PENDING" && st != "CALIBRATION_STATE_RUNNING") {
		t.Errorf("REST create = %d %.200v", code, body)
	}
	code, body = e.do(t, "POST", "/v1/calibrations/cal-rest:cancel", `{}`)
	if code != http.StatusOK || body["state"] != "CALIBRATION_STATE_CANCELLED" {
		t.Errorf("REST cancel = %d %.200v", code, body)
	}
	if code, body = e.do(t, "DELETE", "/v1/calibrations/cal-rest", ""); code != http.StatusOK {
		t.Errorf("REST delete = %d %v", code, body)
	}
	if code, _ = e.do(t, "GET", "/v1/calibrations/cal-rest", ""); code != http.StatusNotFound {
		t.Errorf("REST get after delete = %d; want 404", code)
	}

	// The worker pool (two workers, a queue of one): A and A2 run, B waits, C is
	// refused before anything is stored.
	for _, id := range []string{"cal-hold-a", "cal-hold-a2", "cal-b"} {
		if _, err := e.cal.CreateCalibration(ctx, &pb.CreateCalibrationRequest{CalibrationId: id, Settings: settings, Tests: tests}); err != nil {
			t.Fatal(err)
		}
		if id != "cal-b" {
			waitRunning(t, e, "calibrations/"+id)
		}
	}
	_, err = e.cal.CreateCalibration(ctx, &pb.CreateCalibrationRequest{CalibrationId: "cal-c", Settings: settings, Tests: tests})
	if ei := errorInfo(err); status.Code(err) != codes.ResourceExhausted || ei.GetReason() != service.ReasonQueueFull {
		t.Errorf("fourth calibration with two workers and a queue of one: %v; want RESOURCE_EXHAUSTED", err)
	}
	if _, err := e.st.GetCalibration(ctx, store.DefaultTenant, "cal-c"); err == nil {
		t.Errorf("a refused calibration was stored")
	}
	// A calibration whose server died (a RUNNING row no job holds, not written for
	// longer than the lease) is found FAILED, WORKER_LOST.
	deadAt := time.Now()
	if _, err := e.st.CreateCalibration(ctx, store.DefaultTenant, store.Calibration{ID: "cal-dead", Status: store.CalibrationRunning}, ""); err != nil {
		t.Fatal(err)
	}
	if _, err := e.st.CreateCalibration(ctx, store.DefaultTenant, store.Calibration{ID: "cal-dead2", Status: store.CalibrationPending}, ""); err != nil {
		t.Fatal(err)
	}
	dead, err := e.cal.GetCalibration(ctx, &pb.GetCalibrationRequest{Name: "calibrations/cal-dead"})
	switch {
	case time.Since(deadAt) >= lim.CalibrationLease:
		t.Logf("the machine stalled for a lease; the within-lease check is skipped")
	case err != nil || dead.GetCalibration().GetState() != pb.CalibrationState_CALIBRATION_STATE_RUNNING:
		t.Errorf("within its lease: %v, %v; want RUNNING", dead, err)
	}
	time.Sleep(lim.CalibrationLease + 200*time.Millisecond)
	dead, err = e.cal.GetCalibration(ctx, &pb.GetCalibrationRequest{Name: "calibrations/cal-dead"})
	if err != nil || dead.GetCalibration().GetState() != pb.CalibrationState_CALIBRATION_STATE_FAILED || dead.GetCalibration().GetError().GetReason() != "WORKER_LOST" {
		t.Errorf("after its lease: %v, %v; want FAILED WORKER_LOST", dead, err)
	}
	// Jobs of this server, running or waiting, renew their lease: another replica on
	// the same store, sweeping as voltcastd does every half lease, takes only the dead
	// one.
	replica, err := service.New(service.Options{Store: e.st, Logger: slog.New(slog.DiscardHandler)})
	if err != nil {
		t.Fatal(err)
	}
	if n, err := replica.RecoverCalibrations(ctx, time.Now().Add(-lim.CalibrationLease)); err != nil || n != 1 {
		t.Errorf("replica's RecoverCalibrations = %d, %v; want 1 (cal-dead2)", n, err)
	}
	for name, want := range map[string]pb.CalibrationState{
		"calibrations/cal-hold-a": pb.CalibrationState_CALIBRATION_STATE_RUNNING, "calibrations/cal-hold-a2": pb.CalibrationState_CALIBRATION_STATE_RUNNING,
		"calibrations/cal-b": pb.CalibrationState_CALIBRATION_STATE_PENDING, "calibrations/cal-dead2": pb.CalibrationState_CALIBRATION_STATE_FAILED,
	} {
		if c, err := e.cal.GetCalibration(ctx, &pb.GetCalibrationRequest{Name: name}); err != nil || c.GetCalibration().GetState() != want {
			t.Errorf("%s after a lease and a replica's sweep: %v, %v; want %v", name, c.GetCalibration().GetState(), err, want)
		}
	}

	// Cancelling a running and a waiting calibration ends both CANCELLED; no type can
	// be made from them.
	for _, name := range []string{"calibrations/cal-hold-a2", "calibrations/cal-b"} {
		cb, err := e.cal.CancelCalibration(ctx, &pb.CancelCalibrationRequest{Name: name})
		if err != nil || cb.GetCalibration().GetState() != pb.CalibrationState_CALIBRATION_STATE_CANCELLED || cb.GetCalibration().GetEndTime() == nil {
			t.Errorf("CancelCalibration(%s): %v, %v; want CANCELLED", name, cb, err)
		}
	}
	code, body = e.do(t, "POST", "/v1/calibrations/cal-b:cancel", `{}`)
	if code != http.StatusOK || body["state"] != "CALIBRATION_STATE_CANCELLED" {
		t.Errorf("REST cancel of a cancelled calibration = %d %v; want 200 and unchanged", code, body)
	}
	_, err = e.types.CreateBatteryType(ctx, &pb.CreateBatteryTypeRequest{BatteryTypeId: "x", Calibration: "calibrations/cal-b"})
	if ei := errorInfo(err); status.Code(err) != codes.FailedPrecondition || ei.GetReason() != service.ReasonNotReady {
		t.Errorf("type from a cancelled calibration: %v; want FAILED_PRECONDITION NOT_READY", err)
	}

	// Shutdown interrupts the running fit: it ends FAILED, INTERRUPTED; new ones are
	// refused.
	closed := make(chan error, 1)
	go func() { closed <- e.svc.Close(ctx) }()
	close(release)
	if err := <-closed; err != nil {
		t.Fatal(err)
	}
	a, err := e.cal.GetCalibration(ctx, &pb.GetCalibrationRequest{Name: "calibrations/cal-hold-a"})
	if err != nil {
		t.Fatal(err)
	}
	if c := a.GetCalibration(); c.GetState() != pb.CalibrationState_CALIBRATION_STATE_FAILED || c.GetError().GetReason() != "INTERRUPTED" {
		t.Errorf("after Close: cal-hold-a %v %v; want FAILED INTERRUPTED", c.GetState(), c.GetError())
	}
	for _, name := range []string{"calibrations/cal-hold-a2", "calibrations/cal-b"} {
		if b, _ := e.cal.GetCalibration(ctx, &pb.GetCalibrationRequest{Name: name}); b.GetCalibration().GetState() != pb.CalibrationState_CALIBRATION_STATE_CANCELLED {
			t.Errorf("%s %v after Close; want still CANCELLED", name, b.GetCalibration().GetState())
		}
	}
	if _, err := e.cal.CreateCalibration(ctx, &pb.CreateCalibrationRequest{Settings: settings, Tests: tests}); status.Code(err) != codes.Unavailable {
		t.Errorf("create after Close: %v; want UNAVAILABLE", err)
	}
	// Delete.
	if _, err := e.cal.DeleteCalibration(ctx, &pb.DeleteCalibrationRequest{Name: "calibrations/cal-hold-a"}); err != nil {
		t.Fatal(err)
	}
	if _, err := e.cal.GetCalibration(ctx, &pb.GetCalibrationRequest{Name: "calibrations/cal-hold-a"}); status.Code(err) != codes.NotFound {
		t.Errorf("get after delete: %v; want NOT_FOUND", err)
	}
}

// waitRunning polls until the calibration is no longer PENDING.
func waitRunning(t *testing.T, e *env, name string) *pb.Calibration {
	t.Helper()
	for range 3000 {
		c, err := e.cal.GetCalibration(context.Background(), &pb.GetCalibrationRequest{Name: name})
		if err != nil {
			t.Fatal(err)
		}
		if c.GetCalibration().GetState() != pb.CalibrationState_CALIBRATION_STATE_PENDING {
			return c.GetCalibration()
		}
		time.Sleep(10 * time.Millisecond)
	}
	t.Fatalf("%s still PENDING", name)
	return nil
}
