package gateway

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"io"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

var update = flag.Bool("update", false, "rewrite the golden files in testdata")

// fakeBatteries answers with fixed values, so that the JSON is the gateway's alone.
type fakeBatteries struct {
	pb.UnimplementedBatteryServiceServer
	lastCreate *pb.CreateBatteryRequest
}

var fixedTime = timestamppb.New(time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC))

func fixedBattery() *pb.Battery {
	return &pb.Battery{
		Name: "batteries/bike-7", DisplayName: "cargo bike 7", BatteryType: "batteryTypes/generic-nmc-18650",
		SeriesCount: 13, ParallelCount: 4, Labels: map[string]string{"fleet": "north"},
		State: &pb.BatteryState{Initialized: true, StateOfCharge: 0.5, StateOfChargeStddev: 0.02, CapacityFraction: 1,
			ResistanceFraction: 1, LastSampleTime: fixedTime, TemperatureCelsius: 21.5, VoltageVolts: 47.1, CurrentAmps: -2,
			AppliedSequenceNumber: 9007199254740993, DurableSequenceNumber: 0},
		CreateTime: fixedTime, UpdateTime: fixedTime, Etag: "3",
	}
}

func (f *fakeBatteries) GetBattery(_ context.Context, req *pb.GetBatteryRequest) (*pb.GetBatteryResponse, error) {
	if req.GetName() != "batteries/bike-7" {
		st, _ := status.New(codes.NotFound, req.GetName()+" not found").WithDetails(
			&errdetails.ErrorInfo{Domain: "voltcast.dev", Reason: "RESOURCE_NOT_FOUND"})
		return nil, st.Err()
	}
	return &pb.GetBatteryResponse{Battery: fixedBattery()}, nil
}

func (f *fakeBatteries) CreateBattery(_ context.Context, req *pb.CreateBatteryRequest) (*pb.CreateBatteryResponse, error) {
	f.lastCreate = req
	if req.GetBattery().GetSeriesCount() < 1 {
		st, _ := status.New(codes.InvalidArgument, "invalid request: battery.series_count: must be 1 to 1000, got 0").WithDetails(
			&errdetails.ErrorInfo{Domain: "voltcast.dev", Reason: "INVALID_FIELD"},
			&errdetails.BadRequest{FieldViolations: []*errdetails.BadRequest_FieldViolation{{Field: "battery.series_count", Description: "must be 1 to 1000, got 0"}}})
		return nil, st.Err()
	}
	return &pb.CreateBatteryResponse{Battery: fixedBattery()}, nil
}

// DeleteBattery fails as a gRPC server that cannot be reached does: a bare status with
// no details, which the gateway must complete with an ErrorInfo.
func (f *fakeBatteries) DeleteBattery(context.Context, *pb.DeleteBatteryRequest) (*pb.DeleteBatteryResponse, error) {
	return nil, status.Error(codes.Unavailable, "connection refused")
}

type healthy struct{}

func (healthy) Check(context.Context, *healthpb.HealthCheckRequest, ...grpc.CallOption) (*healthpb.HealthCheckResponse, error) {
	return &healthpb.HealthCheckResponse{Status: healthpb.HealthCheckResponse_SERVING}, nil
}
func (healthy) List(context.Context, *healthpb.HealthListRequest, ...grpc.CallOption) (*healthpb.HealthListResponse, error) {
	return &healthpb.HealthListResponse{}, nil
}
func (healthy) Watch(context.Context, *healthpb.HealthCheckRequest, ...grpc.CallOption) (grpc.ServerStreamingClient[healthpb.HealthCheckResponse], error) {
	return nil, status.Error(codes.Unimplemented, "no watch")
}

func newTestHandler(t *testing.T, f *fakeBatteries) http.Handler {
	t.Helper()
	mux := NewServeMux(healthy{})
	if err := pb.RegisterBatteryServiceHandlerServer(context.Background(), mux, f); err != nil {
		t.Fatal(err)
	}
	root := http.NewServeMux()
	root.HandleFunc("GET /livez", serveLive)
	root.Handle("/", limitBody(mux, 1024))
	return root
}

// golden compares got with testdata/name, or rewrites it with -update.
func golden(t *testing.T, name string, got []byte) {
	t.Helper()
	var buf bytes.Buffer
	if err := json.Indent(&buf, got, "", "  "); err != nil {
		t.Fatalf("%s: not JSON: %v\n%s", name, err, got)
	}
	buf.WriteByte('\n')
	path := filepath.Join("testdata", name)
	if *update {
		if err := os.WriteFile(path, buf.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test ./gateway -update to create it)", err)
	}
	if !bytes.Equal(buf.Bytes(), want) {
		t.Errorf("%s differs from the golden file (run with -update if the change is intended):\ngot:\n%s\nwant:\n%s", name, buf.Bytes(), want)
	}
}

// TestJSONGolden pins the JSON the gateway speaks: lowerCamelCase names, defaults
// emitted, enums by name, int64 as strings, timestamps in RFC 3339, errors with their
// details, and the HTTP status of each.
func TestJSONGolden(t *testing.T) {
	f := &fakeBatteries{}
	h := newTestHandler(t, f)
	for _, c := range []struct {
		name, method, path, body string
		code                     int
	}{
		{"get_battery.json", "GET", "/v1/batteries/bike-7", "", http.StatusOK},
		{"not_found.json", "GET", "/v1/batteries/none", "", http.StatusNotFound},
		{"invalid_argument.json", "POST", "/v1/batteries?batteryId=b", `{"batteryType":"batteryTypes/x","seriesCount":0}`, http.StatusBadRequest},
		{"unknown_field.json", "POST", "/v1/batteries?batteryId=b", `{"batteryType":"batteryTypes/x","serieCount":1}`, http.StatusBadRequest},
		{"too_large.json", "POST", "/v1/batteries?batteryId=b", `{"displayName":"` + strings.Repeat("x", 2000) + `"}`, http.StatusRequestEntityTooLarge},
		{"healthz.json", "GET", "/healthz", "", http.StatusOK},
		{"livez.json", "GET", "/livez", "", http.StatusOK},
		{"syntax_error.json", "POST", "/v1/batteries?batteryId=b", `{"batteryType":`, http.StatusBadRequest},
		{"bad_query.json", "GET", "/v1/batteries?pageSize=many", "", http.StatusBadRequest},
		{"unknown_path.json", "GET", "/v1/widgets", "", http.StatusNotFound},
		{"unavailable.json", "DELETE", "/v1/batteries/bike-7", "", http.StatusServiceUnavailable},
	} {
		t.Run(c.name, func(t *testing.T) {
			req := httptest.NewRequest(c.method, c.path, strings.NewReader(c.body))
			rec := httptest.NewRecorder()
			h.ServeHTTP(rec, req)
			if rec.Code != c.code {
				t.Errorf("%s %s = %d; want %d\n%s", c.method, c.path, rec.Code, c.code, rec.Body)
			}
			golden(t, c.name, rec.Body.Bytes())
		})
	}
	// Proto names are accepted on input too, and the query parameter fills the id.
	req := httptest.NewRequest("POST", "/v1/batteries?batteryId=b9", strings.NewReader(`{"battery_type":"batteryTypes/x","series_count":2,"parallel_count":1}`))
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, req)
	if rec.Code != http.StatusOK || f.lastCreate.GetBatteryId() != "b9" || f.lastCreate.GetBattery().GetSeriesCount() != 2 {
		t.Errorf("create with proto names = %d, request %v", rec.Code, f.lastCreate)
	}
}

// TestOpenAPI checks the served document: it is the generated file, byte for byte
// (make check-generate keeps that fresh), valid JSON, and has a path for every REST
// binding of voltcast_api.yaml.
func TestOpenAPI(t *testing.T) {
	rec := httptest.NewRecorder()
	serveOpenAPI(rec, httptest.NewRequest("GET", "/openapi.json", nil))
	onDisk, err := os.ReadFile(filepath.Join("openapi", "voltcast.swagger.json"))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(rec.Body.Bytes(), onDisk) || rec.Header().Get("Content-Type") != "application/json" {
		t.Fatalf("served document differs from openapi/voltcast.swagger.json")
	}
	var doc struct {
		Swagger string                    `json:"swagger"`
		Info    struct{ Title string }    `json:"info"`
		Paths   map[string]map[string]any `json:"paths"`
	}
	if err := json.Unmarshal(onDisk, &doc); err != nil {
		t.Fatal(err)
	}
	api, err := os.ReadFile(filepath.Join("..", "proto", "voltcast", "v1", "voltcast_api.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	n := 0
	for _, line := range strings.Split(string(api), "\n") {
		line = strings.TrimSpace(strings.TrimPrefix(strings.TrimSpace(line), "- "))
		for _, m := range []string{"get", "post", "patch", "delete"} {
			if p, ok := strings.CutPrefix(line, m+": "); ok {
				n++
				if _, ok := doc.Paths[expand(p)][m]; !ok {
					t.Errorf("OpenAPI has no %s %s (from %s)", m, expand(p), p)
				}
			}
		}
	}
	if n < 15 || doc.Swagger != "2.0" || doc.Info.Title != "voltcast API" {
		t.Errorf("document: swagger %q, title %q, %d bindings checked", doc.Swagger, doc.Info.Title, n)
	}
}

// expand turns a binding like /v1/{name=batteries/*} into the OpenAPI path the
// generator writes with expand_slashed_path_patterns (buf.gen.yaml).
func expand(p string) string {
	r := strings.NewReplacer(
		"{name=batteries/*}", "batteries/{battery}", "{battery=batteries/*}", "batteries/{battery}",
		"{battery.name=batteries/*}", "batteries/{battery}", "{name=batteryTypes/*}", "batteryTypes/{batteryType}",
		"{name=calibrations/*}", "calibrations/{calibration}")
	return r.Replace(p)
}

func TestLimitBodyChunked(t *testing.T) {
	h := newTestHandler(t, &fakeBatteries{})
	// A chunked body has no Content-Length; the cap still holds (the decoder fails).
	req := httptest.NewRequest("POST", "/v1/batteries?batteryId=b", io.MultiReader(strings.NewReader(`{"displayName":"`), strings.NewReader(strings.Repeat("x", 4000)+`"}`)))
	req.ContentLength = -1
	rec := httptest.NewRecorder()
	h.ServeHTTP(rec, req)
	if rec.Code < 400 || rec.Code >= 500 {
		t.Errorf("oversized chunked body = %d; want a 4xx", rec.Code)
	}
}
