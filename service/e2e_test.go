package service_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"net"
	"net/http"
	"slices"
	"strings"
	"testing"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/fieldmaskpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/gateway"
	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	"github.com/voltcast/voltcast/model/estimate"
	"github.com/voltcast/voltcast/model/forecast"
	"github.com/voltcast/voltcast/model/sim"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service"
	"github.com/voltcast/voltcast/service/internal/pgtest"
	"github.com/voltcast/voltcast/service/servicetest"
	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/postgres"
)

// env is an in-process server: the real gRPC server on a loopback port chosen by the
// kernel, the REST gateway on another, and a store: the embedded SQLite store in a
// temporary directory, or PostgreSQL in a fresh schema (see eachStore).
type env struct {
	conn     *grpc.ClientConn
	httpBase string
	types    pb.BatteryTypeServiceClient
	bats     pb.BatteryServiceClient
	tel      pb.TelemetryServiceClient
	fc       pb.ForecastServiceClient
	cal      pb.CalibrationServiceClient
	svc      *service.Service
	st       store.Store
}

// opener opens a fresh, empty store for one test.
type opener func(t testing.TB) store.Store

func openSQLite(t testing.TB) store.Store { return servicetest.SQLite(t) }

// openPostgres opens a store in a fresh schema, or skips (see package pgtest:
// VOLTCAST_TEST_POSTGRES_DSN, VOLTCAST_REQUIRE_POSTGRES).
// The caller closes the store (before the schema is dropped: cleanups run
// last-registered first, so register the Close after calling openPostgres).
func openPostgres(t testing.TB) store.Store {
	t.Helper()
	schema, dsn := pgtest.Schema(t)
	s, err := postgres.Open(context.Background(), dsn, &postgres.Options{Schema: schema, MaxConns: 8})
	if err != nil {
		t.Fatalf("postgres.Open: %v", err)
	}
	return s
}

// eachStore runs f once per store backend, as subtests "sqlite" and "postgres".
func eachStore(t *testing.T, f func(t *testing.T, open opener)) { runStores(t, false, f) }

// eachStoreParallel is eachStore with the two subtests in parallel, for tests that
// mostly wait.
func eachStoreParallel(t *testing.T, f func(t *testing.T, open opener)) { runStores(t, true, f) }

func runStores(t *testing.T, parallel bool, f func(t *testing.T, open opener)) {
	for _, b := range []struct {
		name string
		open opener
	}{{"sqlite", openSQLite}, {"postgres", openPostgres}} {
		t.Run(b.name, func(t *testing.T) {
			if parallel {
				t.Parallel()
			}
			f(t, b.open)
		})
	}
}

func newEnv(t testing.TB, open opener, limits service.Limits) *env {
	t.Helper()
	srv := servicetest.Start(t, open(t), service.Options{Limits: limits})
	gw, err := gateway.New(context.Background(), gateway.Options{GRPCAddress: srv.Addr, MaxBodyBytes: 1 << 20})
	if err != nil {
		t.Fatalf("gateway.New: %v", err)
	}
	hlis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	hs := &http.Server{Handler: gw.Handler()}
	go hs.Serve(hlis)
	// Registered after servicetest.Start's cleanup, so it runs first: the gateway stops
	// before the gRPC server it calls.
	t.Cleanup(func() {
		hs.Close()
		gw.Close()
	})
	conn := srv.Conn
	return &env{
		conn: conn, httpBase: "http://" + hlis.Addr().String(), svc: srv.Service, st: srv.Store,
		types: pb.NewBatteryTypeServiceClient(conn),
		bats:  pb.NewBatteryServiceClient(conn),
		tel:   pb.NewTelemetryServiceClient(conn),
		fc:    pb.NewForecastServiceClient(conn),
		cal:   pb.NewCalibrationServiceClient(conn),
	}
}

// do sends an HTTP request with a JSON body and decodes the JSON answer.
func (e *env) do(t *testing.T, method, path, body string) (int, map[string]any) {
	t.Helper()
	req, err := http.NewRequest(method, e.httpBase+path, strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	var out map[string]any
	if len(bytes.TrimSpace(b)) > 0 {
		if err := json.Unmarshal(b, &out); err != nil {
			t.Fatalf("%s %s: body is not JSON: %v\n%s", method, path, err, b)
		}
	}
	return resp.StatusCode, out
}

// details returns the ErrorInfo reason and the BadRequest fields of a status error.
func details(err error) (reason string, fields []string) {
	for _, d := range status.Convert(err).Details() {
		switch d := d.(type) {
		case *errdetails.ErrorInfo:
			reason = d.GetReason()
		case *errdetails.BadRequest:
			for _, v := range d.GetFieldViolations() {
				fields = append(fields, v.GetField())
			}
		}
	}
	return reason, fields
}

func TestBatteryTypesCatalogue(t *testing.T) { eachStore(t, testBatteryTypesCatalogue) }

func testBatteryTypesCatalogue(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{})
	ctx := context.Background()

	// Listing in pages of 4 returns the whole catalogue once, in order, and then stops.
	var names []string
	tok := ""
	for range 20 {
		resp, err := e.types.ListBatteryTypes(ctx, &pb.ListBatteryTypesRequest{PageSize: 4, PageToken: tok})
		if err != nil {
			t.Fatalf("ListBatteryTypes: %v", err)
		}
		for _, bt := range resp.GetBatteryTypes() {
			names = append(names, strings.TrimPrefix(bt.GetName(), "batteryTypes/"))
			if !bt.GetBuiltIn() {
				t.Errorf("%s: built_in = false", bt.GetName())
			}
		}
		if tok = resp.GetNextPageToken(); tok == "" {
			break
		}
	}
	if want := chem.Names(); strings.Join(names, ",") != strings.Join(want, ",") {
		t.Errorf("listed %v; want the catalogue %v", names, want)
	}

	// Get returns the catalogue's values (the model is the reference here: the API
	// must not change them on the way).
	want, err := chem.Lookup("generic-nmc-18650")
	if err != nil {
		t.Fatal(err)
	}
	got, err := e.types.GetBatteryType(ctx, &pb.GetBatteryTypeRequest{Name: "batteryTypes/generic-nmc-18650"})
	if err != nil {
		t.Fatalf("GetBatteryType: %v", err)
	}
	bt := got.GetBatteryType()
	if bt.GetCapacityAmpHours() != want.CapacityAh || bt.GetLimits().GetCutoffVoltageVolts() != want.Limits.CutoffVolts ||
		bt.GetChemistry() != pb.Chemistry_CHEMISTRY_NMC || len(bt.GetRcBranches()) != len(want.Branches) {
		t.Errorf("GetBatteryType = %v; want the values of chem.Lookup", bt)
	}
	_, y := want.OCV.Curve(0).Knot(want.OCV.Curve(0).Len() - 1)
	if rows := bt.GetOpenCircuitVoltageVolts().GetRows(); len(rows) == 0 || rows[0].GetValues()[len(rows[0].GetValues())-1] != y {
		t.Errorf("OCV table differs from the catalogue's")
	}

	// Errors: malformed name, unknown name, built-in delete, negative page size.
	for _, c := range []struct {
		call   func() error
		code   codes.Code
		reason string
	}{
		{func() error {
			_, err := e.types.GetBatteryType(ctx, &pb.GetBatteryTypeRequest{Name: "types/x"})
			return err
		}, codes.InvalidArgument, service.ReasonInvalidField},
		{func() error {
			_, err := e.types.GetBatteryType(ctx, &pb.GetBatteryTypeRequest{Name: "batteryTypes/none-such"})
			return err
		}, codes.NotFound, service.ReasonNotFound},
		{func() error {
			_, err := e.types.DeleteBatteryType(ctx, &pb.DeleteBatteryTypeRequest{Name: "batteryTypes/generic-nmc-18650"})
			return err
		}, codes.FailedPrecondition, service.ReasonBuiltIn},
		{func() error {
			_, err := e.types.ListBatteryTypes(ctx, &pb.ListBatteryTypesRequest{PageSize: -1})
			return err
		}, codes.InvalidArgument, service.ReasonInvalidField},
		{func() error {
			_, err := e.types.ListBatteryTypes(ctx, &pb.ListBatteryTypesRequest{PageToken: "garbage!"})
			return err
		}, codes.InvalidArgument, service.ReasonInvalidPageToken},
	} {
		err := c.call()
		if reason, _ := details(err); status.Code(err) != c.code || reason != c.reason {
			t.Errorf("error = %v (reason %q); want %v with reason %s", err, reason, c.code, c.reason)
		}
	}
}

func TestBatteryTypeRegister(t *testing.T) { eachStore(t, testBatteryTypeRegister) }

func testBatteryTypeRegister(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{})
	ctx := context.Background()
	base, err := e.types.GetBatteryType(ctx, &pb.GetBatteryTypeRequest{Name: "batteryTypes/generic-lfp-26650"})
	if err != nil {
		t.Fatal(err)
	}
	in := proto.Clone(base.GetBatteryType()).(*pb.BatteryType)
	in.DisplayName = "bench cell A"
	in.CapacityAmpHours = 3.1

	created, err := e.types.CreateBatteryType(ctx, &pb.CreateBatteryTypeRequest{BatteryTypeId: "bench-a", BatteryType: in})
	if err != nil {
		t.Fatalf("CreateBatteryType: %v", err)
	}
	if c := created.GetBatteryType(); c.GetName() != "batteryTypes/bench-a" || c.GetBuiltIn() || c.GetCapacityAmpHours() != 3.1 || c.GetDisplayName() != "bench cell A" {
		t.Errorf("created %v", c)
	}
	// It lists after the catalogue.
	resp, err := e.types.ListBatteryTypes(ctx, &pb.ListBatteryTypesRequest{PageSize: 1000})
	if err != nil {
		t.Fatal(err)
	}
	if n := len(resp.GetBatteryTypes()); n != len(chem.Names())+1 || resp.GetBatteryTypes()[n-1].GetName() != "batteryTypes/bench-a" {
		t.Errorf("list has %d types, last %v", n, resp.GetBatteryTypes()[n-1].GetName())
	}
	// A built-in id is taken.
	if _, err := e.types.CreateBatteryType(ctx, &pb.CreateBatteryTypeRequest{BatteryTypeId: "generic-lfp-26650", BatteryType: in}); status.Code(err) != codes.AlreadyExists {
		t.Errorf("create with a built-in id: %v; want ALREADY_EXISTS", err)
	}
	// An invalid parameter set names the field, and stores nothing. Absurd magnitudes
	// (a unit slip, or 1e308 Ah, which overflowed a tracked state of charge to NaN) are
	// refused like non-finite ones.
	for _, c := range []struct {
		name  string
		edit  func(*pb.BatteryType)
		field string
	}{
		{"NaN cut-off", func(b *pb.BatteryType) { b.Limits.CutoffVoltageVolts = math.NaN() }, "battery_type.limits.cutoff_voltage_volts"},
		{"huge capacity", func(b *pb.BatteryType) { b.CapacityAmpHours = 1e308 }, "battery_type.capacity_amp_hours"},
		{"mAh as Ah", func(b *pb.BatteryType) { b.CapacityAmpHours = 3100e3 }, "battery_type.capacity_amp_hours"},
		{"tiny capacity", func(b *pb.BatteryType) { b.CapacityAmpHours = 1e-300 }, "battery_type.capacity_amp_hours"},
		{"huge nominal voltage", func(b *pb.BatteryType) { b.NominalVoltageVolts = 1e300 }, "battery_type.nominal_voltage_volts"},
		{"huge series resistance", func(b *pb.BatteryType) { b.SeriesResistanceOhms = &pb.TemperatureParameter{Value: 1e300} }, "battery_type.series_resistance_ohms.value"},
		{"huge open-circuit voltage", func(b *pb.BatteryType) { b.OpenCircuitVoltageVolts.Rows[0].Values[3] *= 1e6 }, "battery_type.open_circuit_voltage_volts.rows[0].values[3]"},
		{"huge C-rate", func(b *pb.BatteryType) { b.Limits.MaxDischargeCRate = 1e300 }, "battery_type.limits.max_discharge_c_rate"},
	} {
		bad := proto.Clone(in).(*pb.BatteryType)
		c.edit(bad)
		_, err = e.types.CreateBatteryType(ctx, &pb.CreateBatteryTypeRequest{BatteryTypeId: "bench-b", BatteryType: bad})
		if _, fields := details(err); status.Code(err) != codes.InvalidArgument || !slices.Contains(fields, c.field) {
			t.Errorf("%s: %v (fields %v); want INVALID_ARGUMENT on %s", c.name, err, fields, c.field)
		}
		if _, err := e.types.GetBatteryType(ctx, &pb.GetBatteryTypeRequest{Name: "batteryTypes/bench-b"}); status.Code(err) != codes.NotFound {
			t.Errorf("%s: rejected type was stored: %v", c.name, err)
		}
	}
	// In use: a battery refers to it.
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "b1", Battery: &pb.Battery{BatteryType: "batteryTypes/bench-a", SeriesCount: 4, ParallelCount: 1}}); err != nil {
		t.Fatal(err)
	}
	if _, err := e.types.DeleteBatteryType(ctx, &pb.DeleteBatteryTypeRequest{Name: "batteryTypes/bench-a"}); status.Code(err) != codes.FailedPrecondition {
		t.Errorf("delete a type in use: %v; want FAILED_PRECONDITION", err)
	}
	if _, err := e.bats.DeleteBattery(ctx, &pb.DeleteBatteryRequest{Name: "batteries/b1"}); err != nil {
		t.Fatal(err)
	}
	if _, err := e.types.DeleteBatteryType(ctx, &pb.DeleteBatteryTypeRequest{Name: "batteryTypes/bench-a"}); err != nil {
		t.Errorf("DeleteBatteryType: %v", err)
	}
}

func TestBatteriesCRUDOverRESTAndGRPC(t *testing.T) { eachStore(t, testBatteriesCRUDOverRESTAndGRPC) }

func testBatteriesCRUDOverRESTAndGRPC(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{})
	ctx := context.Background()

	code, body := e.do(t, "POST", "/v1/batteries?batteryId=bike-7", `{"batteryType":"batteryTypes/generic-nmc-18650","seriesCount":13,"parallelCount":4,"displayName":"cargo bike 7","labels":{"fleet":"north"},"initialStateOfCharge":0.8}`)
	if code != http.StatusOK || body["name"] != "batteries/bike-7" {
		t.Fatalf("POST /v1/batteries = %d %v", code, body)
	}
	state := body["state"].(map[string]any)
	if state["initialized"] != true || state["stateOfCharge"] != 0.8 {
		t.Errorf("initial state %v; want initialized at 0.8", state)
	}

	got, err := e.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/bike-7"})
	if err != nil {
		t.Fatal(err)
	}
	if b := got.GetBattery(); b.GetSeriesCount() != 13 || b.GetLabels()["fleet"] != "north" || b.GetDisplayName() != "cargo bike 7" {
		t.Errorf("GetBattery = %v", b)
	}

	// Update the labels only; the display name stays.
	up, err := e.bats.UpdateBattery(ctx, &pb.UpdateBatteryRequest{
		Battery:    &pb.Battery{Name: "batteries/bike-7", Labels: map[string]string{"fleet": "south"}, DisplayName: "ignored"},
		UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"labels"}},
	})
	if err != nil {
		t.Fatal(err)
	}
	if b := up.GetBattery(); b.GetLabels()["fleet"] != "south" || b.GetDisplayName() != "cargo bike 7" {
		t.Errorf("UpdateBattery = %v", b)
	}
	// A stale etag is ABORTED.
	_, err = e.bats.UpdateBattery(ctx, &pb.UpdateBatteryRequest{
		Battery:    &pb.Battery{Name: "batteries/bike-7", DisplayName: "x", Etag: got.GetBattery().GetEtag()},
		UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"display_name"}},
	})
	if status.Code(err) != codes.Aborted {
		t.Errorf("update with a stale etag: %v; want ABORTED", err)
	}
	// Over REST the mask may use the JSON name (AIP-161), as a query parameter.
	if code, body := e.do(t, "PATCH", "/v1/batteries/bike-7?updateMask=displayName", `{"displayName":"cargo bike 7b","labels":{"ignored":"x"}}`); code != http.StatusOK ||
		body["displayName"] != "cargo bike 7b" || body["labels"].(map[string]any)["fleet"] != "south" {
		t.Errorf("REST PATCH ?updateMask=displayName = %d %v; want 200 with the new display name and the labels kept", code, body)
	}
	// Immutable fields cannot be in the mask.
	_, err = e.bats.UpdateBattery(ctx, &pb.UpdateBatteryRequest{
		Battery:    &pb.Battery{Name: "batteries/bike-7", SeriesCount: 2},
		UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"series_count"}},
	})
	if _, fields := details(err); status.Code(err) != codes.InvalidArgument || len(fields) == 0 || fields[0] != "update_mask" {
		t.Errorf("update of series_count: %v; want INVALID_ARGUMENT on update_mask", err)
	}

	// Bad input over REST: every problem named, HTTP 400, nothing stored.
	code, body = e.do(t, "POST", "/v1/batteries?batteryId=Bad_Id", `{"batteryType":"batteryTypes/generic-nmc-18650","seriesCount":0,"parallelCount":4,"initialStateOfCharge":1.5}`)
	if code != http.StatusBadRequest {
		t.Fatalf("bad create = %d %v; want 400", code, body)
	}
	var fields []string
	for _, d := range body["details"].([]any) {
		d := d.(map[string]any)
		if d["@type"] == "type.googleapis.com/google.rpc.BadRequest" {
			for _, v := range d["fieldViolations"].([]any) {
				fields = append(fields, v.(map[string]any)["field"].(string))
			}
		}
	}
	if want := "battery_id,battery.series_count,battery.initial_state_of_charge"; strings.Join(fields, ",") != want {
		t.Errorf("field violations %v; want %s", fields, want)
	}
	code, _ = e.do(t, "POST", "/v1/batteries?batteryId=b2", `{"batteryType":"batteryTypes/generic-nmc-18650","seriesCount":1,"parallelCount":1,"unknownField":1}`)
	if code != http.StatusBadRequest {
		t.Errorf("unknown JSON field = %d; want 400", code)
	}
	code, _ = e.do(t, "POST", "/v1/batteries?batteryId=b3", `{"batteryType":"batteryTypes/none","seriesCount":1,"parallelCount":1}`)
	if code != http.StatusNotFound {
		t.Errorf("unknown type = %d; want 404", code)
	}
	code, body = e.do(t, "GET", "/v1/batteries", "")
	if code != http.StatusOK || len(body["batteries"].([]any)) != 1 {
		t.Errorf("GET /v1/batteries = %d %v; want the one battery", code, body)
	}
	code, _ = e.do(t, "DELETE", "/v1/batteries/bike-7", "")
	if code != http.StatusOK {
		t.Errorf("DELETE = %d", code)
	}
	code, _ = e.do(t, "GET", "/v1/batteries/bike-7", "")
	if code != http.StatusNotFound {
		t.Errorf("GET after DELETE = %d; want 404", code)
	}
}

// samples makes a discharge of a rested pack: constant current i for n samples one
// second apart, the voltage from the model itself (the pack's OCV minus the ohmic and
// RC drops as cell.Pack.Step evolves them).
func samples(pack cell.Pack, soc0, i float64, n int) (offsets, cur, volt []float64) {
	st := cell.State{SOC: soc0}
	tk := cell.Kelvin(25)
	for k := range n {
		if k > 0 {
			pack.Step(&st, i, 1, tk)
		}
		ik := i
		if k == 0 {
			ik = 0 // the first sample is the rested voltage the estimate starts from
		}
		offsets = append(offsets, float64(k))
		cur = append(cur, ik)
		volt = append(volt, pack.Voltage(&st, ik, tk))
	}
	return offsets, cur, volt
}

func TestTelemetryIngestIdempotentAndEqualToModel(t *testing.T) {
	eachStore(t, testTelemetryIngestIdempotentAndEqualToModel)
}

func testTelemetryIngestIdempotentAndEqualToModel(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{PersistEverySamples: 50})
	ctx := context.Background()
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "shop-ups", Battery: &pb.Battery{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 4, ParallelCount: 2}}); err != nil {
		t.Fatal(err)
	}
	typ, _ := chem.Lookup("generic-nmc-18650")
	pack, _ := cell.NewPack(typ, 4, 2)
	off, cur, volt := samples(pack, 0.9, 2.5, 120)
	base := time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC)
	seq := make([]int64, len(off))
	for k := range seq {
		seq[k] = int64(1000 + k)
	}
	block := func(from, to int) *pb.SampleBlock {
		return &pb.SampleBlock{Battery: "batteries/shop-ups", SequenceNumbers: seq[from:to], BaseTime: timestamppb.New(base),
			TimeOffsetsSeconds: off[from:to], CurrentAmps: cur[from:to], VoltageVolts: volt[from:to], TemperatureCelsius: []float64{25}}
	}
	resp, err := e.tel.IngestTelemetry(ctx, &pb.IngestTelemetryRequest{Blocks: []*pb.SampleBlock{block(0, 80)}})
	if err != nil {
		t.Fatalf("IngestTelemetry: %v", err)
	}
	r := resp.GetResults()[0]
	if r.GetError() != nil || r.GetAppliedCount() != 80 || r.GetState().GetAppliedSequenceNumber() != seq[79] {
		t.Fatalf("first batch: %v", r)
	}
	if d := r.GetState().GetDurableSequenceNumber(); d != seq[79] {
		// 80 applied ≥ PersistEverySamples (50): persisted at the end of the block.
		t.Errorf("durable watermark %d; want %d", d, seq[79])
	}
	// Resend overlapping: 60..120. 20 duplicates, 40 new.
	resp, err = e.tel.IngestTelemetry(ctx, &pb.IngestTelemetryRequest{Blocks: []*pb.SampleBlock{block(60, 120)}})
	if err != nil {
		t.Fatal(err)
	}
	r = resp.GetResults()[0]
	if r.GetAppliedCount() != 40 || r.GetDuplicateCount() != 20 || r.GetRejectedCount() != 0 {
		t.Errorf("overlapping batch: applied %d, duplicates %d, rejected %d; want 40, 20, 0", r.GetAppliedCount(), r.GetDuplicateCount(), r.GetRejectedCount())
	}

	// The same samples through the model directly give the same estimate.
	settings := estimate.Settings{Health: true}
	f, err := estimate.NewEKF(pack, 0.5, &settings)
	if err != nil {
		t.Fatal(err)
	}
	if err := f.InitFromVoltage(volt[0], cell.Kelvin(25)); err != nil {
		t.Fatal(err)
	}
	var last estimate.Estimate
	for k := range off {
		tk := base.Add(time.Duration(off[k] * 1e9))
		if last, err = f.Update(estimate.Sample{Time: float64(tk.UnixNano()) / 1e9, Current: cur[k], Voltage: volt[k], Temperature: cell.Kelvin(25)}); err != nil {
			t.Fatal(err)
		}
	}
	got := r.GetState()
	if math.Abs(got.GetStateOfCharge()-last.SOC) > 1e-12 || math.Abs(got.GetStateOfChargeStddev()-last.SOCSigma) > 1e-12 {
		t.Errorf("service SOC %g ± %g; model directly %g ± %g", got.GetStateOfCharge(), got.GetStateOfChargeStddev(), last.SOC, last.SOCSigma)
	}
	// Equivalent full cycles by their definition (DESIGN.md: discharged charge over
	// the rated capacity): 119 one-second intervals at 2.5 A over the pack's rating.
	wantCycles := 2.5 * 119 / 3600 / pack.RatedCapacityAh()
	if math.Abs(got.GetEquivalentFullCycles()-wantCycles) > 1e-9 {
		t.Errorf("equivalent cycles %g; want %g", got.GetEquivalentFullCycles(), wantCycles)
	}

	// Bad samples are rejected one by one; the rest of the block applies.
	bad := block(0, 0)
	bad.SequenceNumbers = []int64{5000, 5001, 5002, 5003, 5004, 5005, 5006}
	bad.TimeOffsetsSeconds = []float64{200, 201, 100, 203, math.NaN(), math.Inf(1), -1}
	bad.CurrentAmps = []float64{1, math.NaN(), 1, 1, 1, 1, 1}
	bad.VoltageVolts = []float64{volt[119], volt[119], volt[119], -1, volt[119], volt[119], volt[119]}
	bad.TemperatureCelsius = nil
	resp, err = e.tel.IngestTelemetry(ctx, &pb.IngestTelemetryRequest{Blocks: []*pb.SampleBlock{bad, {Battery: "batteries/missing", BaseTime: timestamppb.New(base), TimeOffsetsSeconds: []float64{1}, CurrentAmps: []float64{1}, VoltageVolts: []float64{3}}}})
	if err != nil {
		t.Fatal(err)
	}
	r = resp.GetResults()[0]
	var reasons []string
	for _, rj := range r.GetRejections() {
		reasons = append(reasons, fmt.Sprintf("%d:%d:%s", rj.GetIndex(), rj.GetSequenceNumber(), rj.GetReason()))
	}
	// Each rejection names its sample by index and by the sequence number the caller
	// gave, also when the time offset itself is what is wrong.
	if want := "1:5001:SAMPLE_REJECTION_REASON_NOT_FINITE,2:5002:SAMPLE_REJECTION_REASON_TIME_BACKWARDS,3:5003:SAMPLE_REJECTION_REASON_OUT_OF_RANGE," +
		"4:5004:SAMPLE_REJECTION_REASON_NOT_FINITE,5:5005:SAMPLE_REJECTION_REASON_NOT_FINITE,6:5006:SAMPLE_REJECTION_REASON_OUT_OF_RANGE"; r.GetAppliedCount() != 1 || r.GetRejectedCount() != 6 || strings.Join(reasons, ",") != want {
		t.Errorf("bad block: applied %d rejected %d rejections %v; want 1 applied, 6 rejected: %s", r.GetAppliedCount(), r.GetRejectedCount(), reasons, want)
	}
	if be := resp.GetResults()[1].GetError(); be.GetCode() != "NOT_FOUND" || be.GetReason() != service.ReasonNotFound {
		t.Errorf("block of a missing battery: %v; want NOT_FOUND", be)
	}

	// Over REST: int64 sequence numbers as JSON strings, same semantics.
	code, body := e.do(t, "POST", "/v1/batteries:ingestTelemetry", `{"blocks":[{"battery":"batteries/shop-ups","sequenceNumbers":["5000","6000"],"baseTime":"2026-03-01T08:10:00Z","timeOffsetsSeconds":[0,1],"currentAmps":[1,1],"voltageVolts":[`+
		jsonNum(volt[119])+","+jsonNum(volt[119])+`]}]}`)
	if code != http.StatusOK {
		t.Fatalf("REST ingest = %d %v", code, body)
	}
	res := body["results"].([]any)[0].(map[string]any)
	if res["appliedCount"] != 1.0 || res["duplicateCount"] != 1.0 {
		t.Errorf("REST ingest result %v; want 1 applied, 1 duplicate", res)
	}

	// Too large a batch is refused as a whole.
	e2 := newEnv(t, open, service.Limits{MaxBatchSamples: 10})
	_, err = e2.tel.IngestTelemetry(ctx, &pb.IngestTelemetryRequest{Blocks: []*pb.SampleBlock{block(0, 11)}})
	if reason, _ := details(err); status.Code(err) != codes.InvalidArgument || reason != service.ReasonRequestTooLarge {
		t.Errorf("oversized batch: %v; want INVALID_ARGUMENT REQUEST_TOO_LARGE", err)
	}
}

func jsonNum(v float64) string {
	b, _ := json.Marshal(v)
	return string(b)
}

func TestTelemetryStream(t *testing.T) { eachStore(t, testTelemetryStream) }

func testTelemetryStream(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{})
	ctx := context.Background()
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "drone-1", Battery: &pb.Battery{BatteryType: "batteryTypes/generic-lfp-26650", SeriesCount: 6, ParallelCount: 1}}); err != nil {
		t.Fatal(err)
	}
	typ, _ := chem.Lookup("generic-lfp-26650")
	pack, _ := cell.NewPack(typ, 6, 1)
	off, cur, volt := samples(pack, 0.7, 3, 30)
	base := time.Date(2026, 3, 1, 9, 0, 0, 0, time.UTC)
	stream, err := e.tel.StreamTelemetry(ctx)
	if err != nil {
		t.Fatal(err)
	}
	for k := 0; k < 30; k += 10 {
		if err := stream.Send(&pb.StreamTelemetryRequest{Block: &pb.SampleBlock{Battery: "batteries/drone-1", BaseTime: timestamppb.New(base),
			TimeOffsetsSeconds: off[k : k+10], CurrentAmps: cur[k : k+10], VoltageVolts: volt[k : k+10]}}); err != nil {
			t.Fatal(err)
		}
		resp, err := stream.Recv()
		if err != nil {
			t.Fatal(err)
		}
		if r := resp.GetResult(); r.GetAppliedCount() != 10 {
			t.Errorf("stream block %d: %v", k/10, r)
		}
	}
	if err := stream.CloseSend(); err != nil {
		t.Fatal(err)
	}
	if _, err := stream.Recv(); err != io.EOF {
		t.Fatalf("stream end: %v", err)
	}
	// Closing the stream persisted the state: the durable watermark caught up. Without
	// sequence numbers, the sample time in microseconds is the sequence number.
	wantSeq := base.Add(29 * time.Second).UnixMicro()
	deadline := time.Now().Add(5 * time.Second)
	for {
		got, err := e.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/drone-1"})
		if err != nil {
			t.Fatal(err)
		}
		if got.GetBattery().GetState().GetDurableSequenceNumber() == wantSeq {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("durable watermark %d; want %d after the stream closed", got.GetBattery().GetState().GetDurableSequenceNumber(), wantSeq)
		}
		time.Sleep(10 * time.Millisecond)
	}
}

// TestForecastRuntime checks the ad-hoc and stored forecasts against calling
// model/forecast directly with the same problem (the model is validated on its own
// against REFERENCE.md; here the API must neither change nor lose anything), and the
// validation of bad loads.
func TestForecastRuntime(t *testing.T) { eachStore(t, testForecastRuntime) }

func testForecastRuntime(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{})
	ctx := context.Background()
	fc := pb.NewForecastServiceClient(e.conn)

	typ, _ := chem.Lookup("generic-nmc-18650")
	pack, _ := cell.NewPack(typ, 13, 4)
	prob := forecast.Problem{Problem: sim.Problem{Pack: pack, Initial: cell.State{SOC: 0.8}, Celsius: 25, Load: sim.ConstantPower(350)}, SOCSigma: 0.03}
	want, err := forecast.Run(nil, &prob, &forecast.Settings{Horizon: (30 * 24 * time.Hour).Seconds()})
	if err != nil {
		t.Fatal(err)
	}
	got, err := fc.ForecastRuntime(ctx, &pb.ForecastRuntimeRequest{
		Pack: &pb.PackSpec{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 13, ParallelCount: 4, StateOfCharge: 0.8, StateOfChargeStddev: 0.03},
		Load: &pb.Load{Kind: &pb.Load_PowerWatts{PowerWatts: 350}},
	})
	if err != nil {
		t.Fatalf("ForecastRuntime: %v", err)
	}
	if d := got.GetRuntime().AsDuration().Seconds() - want.Seconds; math.Abs(d) > 1e-6 ||
		math.Abs(got.GetRuntimeLower().AsDuration().Seconds()-want.LowSeconds) > 1e-6 ||
		math.Abs(got.GetEnergyWattHours()-want.WattHours) > 1e-9 ||
		got.GetEndReason() != map[forecast.Status]pb.RuntimeEndReason{
			forecast.StatusCutoff: pb.RuntimeEndReason_RUNTIME_END_REASON_CUTOFF_VOLTAGE,
			forecast.StatusEmpty:  pb.RuntimeEndReason_RUNTIME_END_REASON_EMPTY,
		}[want.Status] {
		t.Errorf("ForecastRuntime = %v; model directly: %gs (%g..%g), %g Wh, %v", got, want.Seconds, want.LowSeconds, want.HighSeconds, want.WattHours, want.Status)
	}

	// Over REST, ad hoc, a repeating duty cycle.
	code, body := e.do(t, "POST", "/v1/batteries:forecastRuntime", `{"pack":{"batteryType":"batteryTypes/generic-lfp-26650","seriesCount":4,"parallelCount":1,"stateOfCharge":1},
		"load":{"dutyCycle":{"steps":[{"duration":"60s","currentAmps":5},{"duration":"30s","currentAmps":0}]}}}`)
	if r := body["endReason"]; code != http.StatusOK || (r != "RUNTIME_END_REASON_CUTOFF_VOLTAGE" && r != "RUNTIME_END_REASON_EMPTY") {
		t.Errorf("REST duty-cycle forecast = %d %v", code, body)
	}

	// A stored battery forecasts from its tracked state.
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "bike-1", Battery: &pb.Battery{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 13, ParallelCount: 4, InitialStateOfCharge: proto.Float64(0.8)}}); err != nil {
		t.Fatal(err)
	}
	code, body = e.do(t, "POST", "/v1/batteries/bike-1:forecastRuntime", `{"load":{"powerWatts":350}}`)
	if code != http.StatusOK {
		t.Fatalf("stored forecast = %d %v", code, body)
	}
	rt, _ := time.ParseDuration(body["runtime"].(string))
	if math.Abs(rt.Seconds()-want.Seconds) > 1e-3 {
		// Same pack and SOC; the stored estimate's σ differs, the nominal runtime not.
		t.Errorf("stored forecast runtime %v; want %gs as for the same ad-hoc pack", rt, want.Seconds)
	}

	for _, c := range []struct {
		req   *pb.ForecastRuntimeRequest
		field string
	}{
		{&pb.ForecastRuntimeRequest{Load: &pb.Load{Kind: &pb.Load_CurrentAmps{CurrentAmps: 1}}}, "battery"},
		{&pb.ForecastRuntimeRequest{Battery: "batteries/bike-1"}, "load"},
		{&pb.ForecastRuntimeRequest{Battery: "batteries/bike-1", Load: &pb.Load{Kind: &pb.Load_CurrentAmps{CurrentAmps: -3}}}, "load.current_amps"},
		{&pb.ForecastRuntimeRequest{Battery: "batteries/bike-1", Load: &pb.Load{Kind: &pb.Load_PowerWatts{PowerWatts: math.Inf(1)}}}, "load.power_watts"},
		{&pb.ForecastRuntimeRequest{Battery: "batteries/bike-1", Load: &pb.Load{Kind: &pb.Load_CurrentAmps{CurrentAmps: 1}}, TemperatureCelsius: proto.Float64(300)}, "temperature_celsius"},
		{&pb.ForecastRuntimeRequest{Pack: &pb.PackSpec{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 1, ParallelCount: 1, StateOfCharge: math.NaN()}, Load: &pb.Load{Kind: &pb.Load_CurrentAmps{CurrentAmps: 1}}}, "pack.state_of_charge"},
	} {
		_, err := fc.ForecastRuntime(ctx, c.req)
		if _, fields := details(err); status.Code(err) != codes.InvalidArgument || len(fields) == 0 || fields[0] != c.field {
			t.Errorf("ForecastRuntime(%v) = %v (fields %v); want INVALID_ARGUMENT on %s", c.req, err, fields, c.field)
		}
	}
	_, err = fc.ForecastRuntime(ctx, &pb.ForecastRuntimeRequest{Battery: "batteries/none", Load: &pb.Load{Kind: &pb.Load_CurrentAmps{CurrentAmps: 1}}})
	if status.Code(err) != codes.NotFound {
		t.Errorf("forecast of a missing battery: %v; want NOT_FOUND", err)
	}
}

// TestTelemetryOutliers: a sample whose voltage the estimator's innovation gate
// discards still counts as applied (its current moved the estimate and the watermark),
// and is reported as an outlier, exactly where the model itself flags it.
func TestTelemetryOutliers(t *testing.T) { eachStore(t, testTelemetryOutliers) }

func testTelemetryOutliers(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{})
	ctx := context.Background()
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "scooter-4", Battery: &pb.Battery{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 10, ParallelCount: 2}}); err != nil {
		t.Fatal(err)
	}
	typ, _ := chem.Lookup("generic-nmc-18650")
	pack, _ := cell.NewPack(typ, 10, 2)
	off, cur, volt := samples(pack, 0.8, 3, 120)
	// A 9 V dip on a 37 V pack: a bad reading, beyond the gate (the predicted σ of
	// the voltage is about 2 V here; a rise that large would leave the sensor range
	// and be rejected as invalid instead).
	volt[100] -= 9
	base := time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)
	resp, err := e.tel.IngestTelemetry(ctx, &pb.IngestTelemetryRequest{Blocks: []*pb.SampleBlock{{Battery: "batteries/scooter-4", BaseTime: timestamppb.New(base),
		TimeOffsetsSeconds: off, CurrentAmps: cur, VoltageVolts: volt, TemperatureCelsius: []float64{25}}}})
	if err != nil {
		t.Fatal(err)
	}
	// The model directly, on the same samples: which does its gate discard?
	f, err := estimate.NewEKF(pack, 0.5, &estimate.Settings{Health: true})
	if err != nil {
		t.Fatal(err)
	}
	if err := f.InitFromVoltage(volt[0], cell.Kelvin(25)); err != nil {
		t.Fatal(err)
	}
	var flagged []int32
	for k := range off {
		tk := base.Add(time.Duration(off[k] * 1e9))
		est, err := f.Update(estimate.Sample{Time: float64(tk.UnixNano()) / 1e9, Current: cur[k], Voltage: volt[k], Temperature: cell.Kelvin(25)})
		if err != nil {
			t.Fatal(err)
		}
		if est.Flags&estimate.FlagRejected != 0 {
			flagged = append(flagged, int32(k))
		}
	}
	if len(flagged) == 0 {
		t.Fatal("the model does not flag the 9 V dip; the test needs a sample it discards")
	}
	r := resp.GetResults()[0]
	var got []int32
	for _, o := range r.GetOutliers() {
		got = append(got, o.GetIndex())
		if o.GetReason() != pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_OUTLIER || o.GetMessage() == "" {
			t.Errorf("outlier entry %v", o)
		}
	}
	if r.GetAppliedCount() != int32(len(off)) || r.GetRejectedCount() != 0 || r.GetOutlierCount() != int32(len(flagged)) ||
		fmt.Sprint(got) != fmt.Sprint(flagged) {
		t.Errorf("block result: applied %d, rejected %d, outliers %d at %v; want all %d applied, none rejected, outliers at %v as the model flags",
			r.GetAppliedCount(), r.GetRejectedCount(), r.GetOutlierCount(), got, len(off), flagged)
	}
	// Applied means applied: a resend is all duplicates, the spike included.
	resp, err = e.tel.IngestTelemetry(ctx, &pb.IngestTelemetryRequest{Blocks: []*pb.SampleBlock{{Battery: "batteries/scooter-4", BaseTime: timestamppb.New(base),
		TimeOffsetsSeconds: off[90:], CurrentAmps: cur[90:], VoltageVolts: volt[90:], TemperatureCelsius: []float64{25}}}})
	if err != nil {
		t.Fatal(err)
	}
	if r := resp.GetResults()[0]; r.GetDuplicateCount() != 30 || r.GetOutlierCount() != 0 {
		t.Errorf("resend: %v; want 30 duplicates, no outliers", r)
	}
}

// TestTelemetryStreamBadInput checks the stream's answers to a battery that does not
// exist and to time going backwards within a battery's samples: the block is answered
// with an error or per-sample rejections, the stream stays open, and the battery's
// applied watermark does not move for rejected samples.
func TestTelemetryStreamBadInput(t *testing.T) { eachStore(t, testTelemetryStreamBadInput) }

func testTelemetryStreamBadInput(t *testing.T, open opener) {
	e := newEnv(t, open, service.Limits{})
	ctx := context.Background()
	if _, err := e.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: "tool-7", Battery: &pb.Battery{BatteryType: "batteryTypes/generic-nmc-18650", SeriesCount: 5, ParallelCount: 1}}); err != nil {
		t.Fatal(err)
	}
	typ, _ := chem.Lookup("generic-nmc-18650")
	pack, _ := cell.NewPack(typ, 5, 1)
	off, cur, volt := samples(pack, 0.6, 2, 6)
	base := time.Date(2026, 3, 2, 7, 0, 0, 0, time.UTC)
	stream, err := e.tel.StreamTelemetry(ctx)
	if err != nil {
		t.Fatal(err)
	}
	send := func(b *pb.SampleBlock) *pb.BlockResult {
		t.Helper()
		if err := stream.Send(&pb.StreamTelemetryRequest{Block: b}); err != nil {
			t.Fatal(err)
		}
		resp, err := stream.Recv()
		if err != nil {
			t.Fatal(err)
		}
		return resp.GetResult()
	}
	// A battery that does not exist: the block gets NOT_FOUND, nothing is created.
	r := send(&pb.SampleBlock{Battery: "batteries/no-such-pack", BaseTime: timestamppb.New(base),
		TimeOffsetsSeconds: off[:2], CurrentAmps: cur[:2], VoltageVolts: volt[:2]})
	if be := r.GetError(); be.GetCode() != "NOT_FOUND" || r.GetAppliedCount() != 0 {
		t.Errorf("block for a missing battery: %v; want NOT_FOUND and nothing applied", r)
	}
	if _, err := e.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/no-such-pack"}); status.Code(err) != codes.NotFound {
		t.Errorf("GetBattery after a stream block for it = %v; want NotFound", err)
	}
	// Four good samples, then two whose time goes back before the last applied one.
	r = send(&pb.SampleBlock{Battery: "batteries/tool-7", BaseTime: timestamppb.New(base),
		TimeOffsetsSeconds: off[:4], CurrentAmps: cur[:4], VoltageVolts: volt[:4]})
	if r.GetAppliedCount() != 4 {
		t.Fatalf("good block: %v", r)
	}
	applied := r.GetState().GetAppliedSequenceNumber()
	r = send(&pb.SampleBlock{Battery: "batteries/tool-7", BaseTime: timestamppb.New(base),
		TimeOffsetsSeconds: []float64{off[1] + 0.5, off[2] + 0.5}, CurrentAmps: cur[4:6], VoltageVolts: volt[4:6]})
	if r.GetAppliedCount() != 0 || r.GetDuplicateCount()+r.GetRejectedCount() != 2 {
		t.Errorf("samples older than the watermark: applied %d, duplicates %d, rejected %d; want none applied",
			r.GetAppliedCount(), r.GetDuplicateCount(), r.GetRejectedCount())
	}
	if got := r.GetState().GetAppliedSequenceNumber(); got != applied {
		t.Errorf("applied watermark moved from %d to %d on stale samples", applied, got)
	}
	if err := stream.CloseSend(); err != nil {
		t.Fatal(err)
	}
	if _, err := stream.Recv(); err != io.EOF {
		t.Fatalf("stream end: %v", err)
	}
}
