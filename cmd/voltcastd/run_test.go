package main

import (
	"bytes"
	"context"
	"encoding/json"
	"io"
	"net/http"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	reflectionpb "google.golang.org/grpc/reflection/grpc_reflection_v1"
)

func env(m map[string]string) func(string) (string, bool) {
	return func(k string) (string, bool) { v, ok := m[k]; return v, ok }
}

func TestConfigPrecedenceAndValidation(t *testing.T) {
	// Flag beats env beats default.
	c, err := parseConfig([]string{"--grpc-address", "127.0.0.1:9001"}, env(map[string]string{
		"VOLTCAST_GRPC_ADDRESS": "127.0.0.1:9999", "VOLTCAST_HTTP_ADDRESS": "127.0.0.1:9002", "VOLTCAST_PERSIST_INTERVAL": "3s",
	}), io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if c.GRPCAddress != "127.0.0.1:9001" || c.HTTPAddress != "127.0.0.1:9002" || c.PersistInterval != 3*time.Second || c.Store != "embedded" {
		t.Errorf("parseConfig = %+v", c)
	}
	if err := c.Validate(); err != nil {
		t.Errorf("Validate() = %v; want nil", err)
	}
	// A malformed env value is an error, not a silent default.
	if _, err := parseConfig(nil, env(map[string]string{"VOLTCAST_MAX_BATCH_SAMPLES": "many"}), io.Discard); err == nil {
		t.Error("VOLTCAST_MAX_BATCH_SAMPLES=many: no error")
	}
	// Validate reports every problem at once.
	bad := c
	bad.Store, bad.LogFormat, bad.PersistEverySamples = "cloud", "xml", 0
	err = bad.Validate()
	for _, want := range []string{"--store", "--log-format", "--persist-every-samples"} {
		if err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("Validate() = %v; want it to mention %s", err, want)
		}
	}
	pg := c
	pg.Store = "postgres"
	if err := pg.Validate(); err == nil || !strings.Contains(err.Error(), "--store-dsn") {
		t.Errorf("postgres without DSN: %v", err)
	}
}

func TestConfigLogRedactsSecrets(t *testing.T) {
	c := Config{StoreDSN: "postgres://app:s3cret@db:5432/voltcast?sslmode=disable&password=other"}
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.Encode(c.LogValue().Group()[4].Value.String())
	if strings.Contains(buf.String(), "s3cret") || strings.Contains(buf.String(), "other") {
		t.Errorf("logged DSN %s leaks a secret", buf.String())
	}
	if got := redactDSN("host=db password=x"); got != "REDACTED" {
		t.Errorf("redactDSN(key=value form) = %q", got)
	}
}

// TestRunServesAndStops starts the server in-process as the acceptance checks do
// (--grpc-address, --http-address, --data-dir, --demo), on kernel-chosen ports, reads
// /openapi.json, /healthz and /metrics, lists services by reflection, and shuts down
// cleanly when the context ends.
func TestRunServesAndStops(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	type addrs struct{ grpc, http string }
	ready := make(chan addrs, 1)
	done := make(chan error, 1)
	go func() {
		done <- run(ctx, []string{"--grpc-address", "127.0.0.1:0", "--http-address", "127.0.0.1:0", "--data-dir", t.TempDir(), "--demo", "--log-level", "warn"},
			io.Discard, t.Output(), env(nil), func(g, h string) { ready <- addrs{g, h} })
	}()
	var a addrs
	select {
	case a = <-ready:
	case err := <-done:
		t.Fatalf("run ended early: %v", err)
	case <-time.After(20 * time.Second):
		t.Fatal("server did not start")
	}

	for _, c := range []struct{ path, want string }{
		{"/openapi.json", `"swagger": "2.0"`},
		{"/healthz", `"SERVING"`},
		{"/metrics", "go_goroutines"},
		{"/v1/batteryTypes?pageSize=1", `"batteryTypes"`},
	} {
		resp, err := http.Get("http://" + a.http + c.path)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		if resp.StatusCode != http.StatusOK || !strings.Contains(string(b), c.want) {
			t.Errorf("GET %s = %d, body without %q:\n%.300s", c.path, resp.StatusCode, c.want, b)
		}
	}

	conn, err := grpc.NewClient(a.grpc, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	hc, err := healthpb.NewHealthClient(conn).Check(ctx, &healthpb.HealthCheckRequest{})
	if err != nil || hc.GetStatus() != healthpb.HealthCheckResponse_SERVING {
		t.Errorf("health = %v, %v", hc, err)
	}
	rs, err := reflectionpb.NewServerReflectionClient(conn).ServerReflectionInfo(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if err := rs.Send(&reflectionpb.ServerReflectionRequest{MessageRequest: &reflectionpb.ServerReflectionRequest_ListServices{}}); err != nil {
		t.Fatal(err)
	}
	rr, err := rs.Recv()
	if err != nil {
		t.Fatal(err)
	}
	var services []string
	for _, s := range rr.GetListServicesResponse().GetService() {
		services = append(services, s.GetName())
	}
	if got := strings.Join(services, ","); !strings.Contains(got, "voltcast.v1.TelemetryService") || !strings.Contains(got, "grpc.health.v1.Health") {
		t.Errorf("reflection lists %s", got)
	}
	rs.CloseSend()

	cancel()
	select {
	case err := <-done:
		if err != nil {
			t.Errorf("run() = %v; want a clean shutdown", err)
		}
	case <-time.After(20 * time.Second):
		t.Fatal("server did not stop")
	}
}
