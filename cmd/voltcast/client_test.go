package main

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service"
	"github.com/voltcast/voltcast/service/servicetest"
)

// The client subcommands are checked against the server itself: what the CLI prints
// must be what a direct gRPC call returns (the service's own end-to-end tests tie
// those answers to the model).

// testServer is an in-process voltcastd: the real gRPC server on a loopback port
// chosen by the kernel, with the embedded store in a temporary directory.
type testServer struct {
	addr  string
	bats  pb.BatteryServiceClient
	types pb.BatteryTypeServiceClient
	fc    pb.ForecastServiceClient
}

func startTestServer(t *testing.T) *testServer {
	t.Helper()
	srv := servicetest.Start(t, servicetest.SQLite(t), service.Options{})
	return &testServer{
		addr:  srv.Addr,
		bats:  pb.NewBatteryServiceClient(srv.Conn),
		types: pb.NewBatteryTypeServiceClient(srv.Conn),
		fc:    pb.NewForecastServiceClient(srv.Conn),
	}
}

// mustRun runs the tool and fails the test unless it exits 0.
func mustRun(t *testing.T, args ...string) string {
	t.Helper()
	code, out, errs := runVoltcast(t, args...)
	if code != 0 {
		t.Fatalf("voltcast %s: exit %d\nstderr: %s", strings.Join(args, " "), code, errs)
	}
	return out
}

// wantFail runs the tool, expects exit code want and one stderr line containing every
// fragment.
func wantFail(t *testing.T, want int, fragments []string, args ...string) {
	t.Helper()
	code, _, errs := runVoltcast(t, args...)
	if code != want {
		t.Errorf("voltcast %s: exit %d; want %d (stderr %q)", strings.Join(args, " "), code, want, errs)
	}
	if n := strings.Count(strings.TrimSpace(errs), "\n"); n > 0 && want == 1 {
		t.Errorf("voltcast %s: error on %d lines; want one:\n%s", strings.Join(args, " "), n+1, errs)
	}
	for _, f := range fragments {
		if !strings.Contains(errs, f) {
			t.Errorf("voltcast %s: stderr %q; want it to contain %q", strings.Join(args, " "), errs, f)
		}
	}
}

// unmarshal decodes the CLI's protojson output into m.
func unmarshal(t *testing.T, out string, m proto.Message) {
	t.Helper()
	if err := protojson.Unmarshal([]byte(out), m); err != nil {
		t.Fatalf("output is not a %T: %v\n%s", m, err, out)
	}
}

func TestClientBatteries(t *testing.T) {
	s := startTestServer(t)
	ctx := context.Background()
	srv := "--server=" + s.addr

	out := mustRun(t, "batteries", "create", "bike-1", srv, "--type", "generic-nmc-18650", "--series", "13", "--parallel", "4",
		"--display-name", "Bike one", "--label", "fleet=north", "--label", "kind=cargo")
	for _, want := range []string{"batteries/bike-1", "batteryTypes/generic-nmc-18650", "13 in series × 4 in parallel", "fleet=north, kind=cargo", "no telemetry yet"} {
		if !strings.Contains(out, want) {
			t.Errorf("batteries create printed\n%s\nwithout %q", out, want)
		}
	}
	// Flags may come before the id; the type may be a full name; --json prints the API's message.
	var created pb.Battery
	unmarshal(t, mustRun(t, "batteries", "create", srv, "--json", "--type", "batteryTypes/generic-lfp-26650", "--series", "4", "--parallel", "8",
		"--initial-soc", "0.6", "backup-1"), &created)
	if created.GetName() != "batteries/backup-1" || created.GetSeriesCount() != 4 || !created.GetState().GetInitialized() {
		t.Errorf("batteries create --json = %v", &created)
	}

	// get --json is the battery the server returns.
	var got pb.Battery
	unmarshal(t, mustRun(t, "batteries", "get", "bike-1", srv, "--json"), &got)
	direct, err := s.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/bike-1"})
	if err != nil {
		t.Fatal(err)
	}
	if !proto.Equal(&got, direct.GetBattery()) {
		t.Errorf("batteries get --json = %v; want %v", &got, direct.GetBattery())
	}

	// list: every battery, as a table and as JSON (here in pages of one).
	table := mustRun(t, "batteries", "list", srv)
	if !strings.Contains(table, "batteries/backup-1") || !strings.Contains(table, "batteries/bike-1") || !strings.Contains(table, "60.0 %") {
		t.Errorf("batteries list printed\n%s", table)
	}
	var list pb.ListBatteriesResponse
	unmarshal(t, mustRun(t, "batteries", "list", srv, "--json"), &list)
	if len(list.GetBatteries()) != 2 || list.GetNextPageToken() != "" {
		t.Errorf("batteries list --json has %d batteries, next token %q; want 2 and none", len(list.GetBatteries()), list.GetNextPageToken())
	}
	unmarshal(t, mustRun(t, "batteries", "list", srv, "--json", "--limit", "1"), &list)
	if len(list.GetBatteries()) != 1 || list.GetBatteries()[0].GetName() != "batteries/backup-1" {
		t.Errorf("batteries list --limit 1 = %v; want backup-1 only", list.GetBatteries())
	}

	// update: the display name and the labels (replaced as a whole).
	mustRun(t, "batteries", "update", "batteries/bike-1", srv, "--display-name", "Bike 1", "--label", "fleet=south")
	direct, err = s.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/bike-1"})
	if err != nil {
		t.Fatal(err)
	}
	if b := direct.GetBattery(); b.GetDisplayName() != "Bike 1" || len(b.GetLabels()) != 1 || b.GetLabels()["fleet"] != "south" {
		t.Errorf("after update: %v", b)
	}
	wantFail(t, 1, []string{"ABORTED"}, "batteries", "update", "bike-1", srv, "--clear-labels", "--etag", "999")
	mustRun(t, "batteries", "update", "bike-1", srv, "--clear-labels", "--etag", direct.GetBattery().GetEtag())

	// delete, then the battery is gone.
	if out := mustRun(t, "batteries", "delete", "bike-1", srv); !strings.Contains(out, "deleted batteries/bike-1") {
		t.Errorf("batteries delete printed %q", out)
	}
	if _, err := s.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/bike-1"}); status.Code(err) != codes.NotFound {
		t.Errorf("GetBattery after delete: %v; want NOT_FOUND", err)
	}

	// Errors are one line with the status code, the message and the offending fields.
	wantFail(t, 1, []string{"voltcast batteries: NOT_FOUND", "batteries/bike-1"}, "batteries", "get", "bike-1", srv)
	wantFail(t, 1, []string{"INVALID_ARGUMENT", "battery.series_count", "battery.parallel_count"},
		"batteries", "create", "bad-1", srv, "--type", "generic-nmc-18650", "--series", "0", "--parallel", "0")
	wantFail(t, 1, []string{"ALREADY_EXISTS"}, "batteries", "create", "backup-1", srv, "--type", "generic-lfp-26650", "--series", "4")
	wantFail(t, 2, []string{"--server"}, "batteries", "list")
	wantFail(t, 2, []string{"nothing to change"}, "batteries", "update", "backup-1", srv)
	wantFail(t, 2, []string{"unknown verb"}, "batteries", "rename", srv)
	wantFail(t, 1, []string{"UNAVAILABLE"}, "batteries", "list", "--server", "127.0.0.1:1", "--timeout", "5s")

	// VOLTCAST_SERVER stands in for --server.
	t.Setenv(envServer, s.addr)
	if out := mustRun(t, "batteries", "list"); !strings.Contains(out, "batteries/backup-1") {
		t.Errorf("batteries list with %s printed\n%s", envServer, out)
	}
}

func TestClientBatteryTypes(t *testing.T) {
	s := startTestServer(t)
	srv := "--server=" + s.addr
	out := mustRun(t, "battery-types", "list", srv)
	for _, name := range chem.Names() {
		if !strings.Contains(out, "batteryTypes/"+name) {
			t.Errorf("battery-types list lacks %s:\n%s", name, out)
		}
	}
	if !strings.Contains(out, "datasheet") {
		t.Errorf("battery-types list has no caution:\n%s", out)
	}
	var got pb.BatteryType
	unmarshal(t, mustRun(t, "battery-types", "get", "generic-vrla-2v-cell", srv, "--json"), &got)
	direct, err := s.types.GetBatteryType(context.Background(), &pb.GetBatteryTypeRequest{Name: "batteryTypes/generic-vrla-2v-cell"})
	if err != nil {
		t.Fatal(err)
	}
	if !proto.Equal(&got, direct.GetBatteryType()) {
		t.Errorf("battery-types get --json differs from GetBatteryType")
	}
	if out := mustRun(t, "battery-types", "get", "generic-vrla-2v-cell", srv); !strings.Contains(out, "three-stage to 2.40 V, float 2.27 V") {
		t.Errorf("battery-types get printed\n%s", out)
	}
	wantFail(t, 1, []string{"FAILED_PRECONDITION"}, "battery-types", "delete", "generic-nmc-18650", srv)
	wantFail(t, 1, []string{"NOT_FOUND"}, "battery-types", "get", "no-such-type", srv)
}

// writeIngestLog writes a telemetry CSV of a 1s1p generic NMC cell: a 1 A discharge from
// full, one row per second, voltages from the model. It is test input for the
// ingest path, not a reference for any estimate.
func writeIngestLog(t *testing.T, rows int, extra string) string {
	t.Helper()
	typ, err := chem.Lookup("generic-nmc-18650")
	if err != nil {
		t.Fatal(err)
	}
	p := cell.Pack{Type: typ, Series: 1, Parallel: 1}
	s := cell.State{SOC: 1}
	var b strings.Builder
	b.WriteString("time_s,current_a,voltage_v,temp_cell_c\n")
	for k := range rows {
		if k > 0 {
			p.Step(&s, 1, 1, cell.Kelvin(25))
		}
		fmt.Fprintf(&b, "%d,1,%.4f,25\n", k, p.Voltage(&s, 1, cell.Kelvin(25)))
	}
	b.WriteString(extra)
	path := filepath.Join(t.TempDir(), "log.csv")
	if err := os.WriteFile(path, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

type ingestOut struct {
	Samples, Calls, Applied, Duplicate, Rejected int
	Rejections                                   []struct {
		Row    int
		Reason string
	}
	AppliedSequenceNumber int64 `json:"applied_sequence_number"`
	State                 json.RawMessage
}

// ingestLogRows is the length of the log the ingest tests send.
const ingestLogRows = 300

// ingestStart is the instant time_s = 0 of that log stands for.
const ingestStart = "2025-06-02T08:00:00Z"

// serverWithTelemetry starts a server, registers batteries/cell-1 (a 1s1p generic NMC
// cell) and sends it a log through voltcast ingest: 300 rows, then one with a current
// no 3 Ah cell can carry, which the server rejects. It returns the server, the log's
// path, and the ingest's stdout and stderr.
func serverWithTelemetry(t *testing.T) (s *testServer, log, out, errs string) {
	t.Helper()
	s = startTestServer(t)
	srv := "--server=" + s.addr
	mustRun(t, "batteries", "create", "cell-1", srv, "--type", "generic-nmc-18650", "--series", "1")
	log = writeIngestLog(t, ingestLogRows, fmt.Sprintf("%d,4000,3.0,25\n", ingestLogRows))
	code, out, errs := runVoltcast(t, "ingest", srv, "--battery", "cell-1", "--in", log, "--start-time", ingestStart, "--chunk-samples", "64", "--json")
	if code != 0 {
		t.Fatalf("ingest: exit %d: %s", code, errs)
	}
	return s, log, out, errs
}

func TestClientIngest(t *testing.T) {
	s, log, out, errs := serverWithTelemetry(t)
	ctx := context.Background()
	srv := "--server=" + s.addr
	const rows, start = ingestLogRows, ingestStart
	var first ingestOut
	if err := json.Unmarshal([]byte(out), &first); err != nil {
		t.Fatalf("ingest --json: %v\n%s", err, out)
	}
	if first.Samples != rows+1 || first.Calls != 5 || first.Applied != rows || first.Duplicate != 0 || first.Rejected != 1 {
		t.Errorf("ingest = %+v; want %d samples in 5 calls, %d applied, 1 rejected", first, rows+1, rows)
	}
	if len(first.Rejections) != 1 || first.Rejections[0].Row != rows+1 || first.Rejections[0].Reason != "out-of-range" {
		t.Errorf("ingest rejections = %+v; want data row %d out-of-range", first.Rejections, rows+1)
	}
	if strings.Count(errs, "samples sent") != 5 || !strings.Contains(errs, "301/301 samples sent (100 %)") {
		t.Errorf("ingest progress on stderr:\n%s", errs)
	}
	t0, _ := time.Parse(time.RFC3339, start)
	if want := t0.Add((rows - 1) * time.Second).UnixMicro(); first.AppliedSequenceNumber != want {
		t.Errorf("applied watermark %d; want %d (the last applied sample's time in µs)", first.AppliedSequenceNumber, want)
	}
	// The printed state is the server's.
	var st pb.BatteryState
	unmarshal(t, string(first.State), &st)
	direct, err := s.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/cell-1"})
	if err != nil {
		t.Fatal(err)
	}
	if st.GetAppliedSequenceNumber() != direct.GetBattery().GetState().GetAppliedSequenceNumber() ||
		st.GetStateOfCharge() != direct.GetBattery().GetState().GetStateOfCharge() {
		t.Errorf("ingest state %v; server has %v", &st, direct.GetBattery().GetState())
	}

	// Sending the log again changes nothing: every applied sample is a duplicate (the
	// rejected one is tried, and rejected, again).
	out = mustRun(t, "ingest", srv, "--battery", "batteries/cell-1", "--in", log, "--start-time", start)
	for _, want := range []string{"applied            0", fmt.Sprintf("duplicate          %d", rows), "rejected           1", "rejected row 301"} {
		if !strings.Contains(out, want) {
			t.Errorf("second ingest printed\n%s\nwithout %q", out, want)
		}
	}
	wantFail(t, 1, []string{"NOT_FOUND"}, "ingest", srv, "--battery", "nope", "--in", log, "--start-time", start)
	wantFail(t, 2, []string{"--start-time"}, "ingest", srv, "--battery", "cell-1", "--in", log)
}

func TestClientForecast(t *testing.T) {
	s, _, _, _ := serverWithTelemetry(t)
	ctx := context.Background()
	srv := "--server=" + s.addr

	// forecast --battery: the server's ForecastRuntime for the same request.
	var fr pb.ForecastRuntimeResponse
	unmarshal(t, mustRun(t, "forecast", "--battery", "cell-1", srv, "--current-amps", "1.5", "--json"), &fr)
	wantFR, err := s.fc.ForecastRuntime(ctx, &pb.ForecastRuntimeRequest{Battery: "batteries/cell-1", Load: &pb.Load{Kind: &pb.Load_CurrentAmps{CurrentAmps: 1.5}}})
	if err != nil {
		t.Fatal(err)
	}
	if !proto.Equal(&fr, wantFR) {
		t.Errorf("forecast --battery --json = %v; want %v", &fr, wantFR)
	}
	out := mustRun(t, "forecast", "--battery", "cell-1", srv, "--power-watts", "5", "--temperature-celsius", "10", "--horizon-hours", "48")
	for _, want := range []string{"runtime", "range (±1σ)", "caution"} {
		if !strings.Contains(out, want) {
			t.Errorf("forecast --battery printed\n%s\nwithout %q", out, want)
		}
	}
	profile := filepath.Join(t.TempDir(), "duty.csv")
	if err := os.WriteFile(profile, []byte("duration_s,kind,value\n60,current,2\n30,rest,0\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	unmarshal(t, mustRun(t, "forecast", "--battery", "cell-1", srv, "--profile", profile, "--json"), &fr)
	wantFR, err = s.fc.ForecastRuntime(ctx, &pb.ForecastRuntimeRequest{Battery: "batteries/cell-1", Load: &pb.Load{Kind: &pb.Load_DutyCycle{DutyCycle: &pb.DutyCycle{Steps: []*pb.DutyCycleStep{
		{Duration: durationpb.New(time.Minute), Kind: &pb.DutyCycleStep_CurrentAmps{CurrentAmps: 2}},
		{Duration: durationpb.New(30 * time.Second), Kind: &pb.DutyCycleStep_CurrentAmps{CurrentAmps: 0}},
	}}}}})
	if err != nil {
		t.Fatal(err)
	}
	if !proto.Equal(&fr, wantFR) {
		t.Errorf("forecast --profile --json = %v; want %v", &fr, wantFR)
	}
	wantFail(t, 2, []string{"exactly one load"}, "forecast", "--battery", "cell-1", srv)
	wantFail(t, 1, []string{"NOT_FOUND"}, "forecast", "--battery", "nope", srv, "--current-amps", "1")

	// Without --battery or --server the offline path is untouched.
	if out := mustRun(t, "forecast", "--type", "generic-nmc-18650", "--soc", "0.5", "--temperature-celsius", "25", "--current-amps", "1"); !strings.Contains(out, "charge delivered  1.5 Ah") {
		t.Errorf("offline forecast printed\n%s", out)
	}
}

func TestClientCharge(t *testing.T) {
	s, _, _, _ := serverWithTelemetry(t)
	ctx := context.Background()
	srv := "--server=" + s.addr

	// charge --battery: the server's PlanCharge for the same request.
	begin := "2025-06-02T20:00:00Z"
	var pc pb.PlanChargeResponse
	unmarshal(t, mustRun(t, "charge", "--battery", "cell-1", srv, "--charger-current-amps", "1.5", "--target-soc", "0.9",
		"--start-time", begin, "--deadline", "6h", "--json"), &pc)
	b0, _ := time.Parse(time.RFC3339, begin)
	wantPC, err := s.fc.PlanCharge(ctx, &pb.PlanChargeRequest{
		Battery: "batteries/cell-1", TargetStateOfCharge: 0.9,
		Charger:   &pb.Charger{MaxCurrentAmps: 1.5, Efficiency: 0.9},
		StartTime: timestamppb.New(b0), DeadlineTime: timestamppb.New(b0.Add(6 * time.Hour)),
	})
	if err != nil {
		t.Fatal(err)
	}
	if !proto.Equal(&pc, wantPC) {
		t.Errorf("charge --battery --json = %v; want %v", &pc, wantPC)
	}
	if len(pc.GetCautions()) == 0 {
		t.Error("charge --battery: no cautions")
	}
	out := mustRun(t, "charge", "--battery", "cell-1", srv, "--charger-current-amps", "1.5")
	for _, want := range []string{"PHASE", "constant-current", "cautions:"} {
		if !strings.Contains(out, want) {
			t.Errorf("charge --battery printed\n%s\nwithout %q", out, want)
		}
	}
	wantFail(t, 2, []string{"--deadline"}, "charge", "--battery", "cell-1", srv, "--deadline", "-1h")
}

func TestClientHealth(t *testing.T) {
	s, _, _, _ := serverWithTelemetry(t)
	ctx := context.Background()
	srv := "--server=" + s.addr

	// health --battery: the server's AssessHealth (here with too short a history for
	// a trend, which the notes say).
	var ah pb.AssessHealthResponse
	unmarshal(t, mustRun(t, "health", "--battery", "cell-1", srv, "--json"), &ah)
	wantAH, err := s.fc.AssessHealth(ctx, &pb.AssessHealthRequest{Battery: "batteries/cell-1", EndOfLifeCapacityFraction: 0.8})
	if err != nil {
		t.Fatal(err)
	}
	if !proto.Equal(&ah, wantAH) {
		t.Errorf("health --json = %v; want %v", &ah, wantAH)
	}
	if out := mustRun(t, "health", "--battery", "cell-1", srv); !strings.Contains(out, "capacity") || !strings.Contains(out, "note:") {
		t.Errorf("health printed\n%s", out)
	}
	wantFail(t, 2, []string{"--end-of-life-fraction"}, "health", "--battery", "cell-1", srv, "--end-of-life-fraction", "1.5")
}
