package service

import (
	"context"
	"errors"
	"testing"
	"time"

	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
)

// TestHealthPingsStoreCached: readiness is SERVING only while the store answers, pings
// at most once per readinessCache, and NOT_SERVING set at shutdown wins without a ping.
func TestHealthPingsStoreCached(t *testing.T) {
	now := time.Date(2026, 3, 1, 8, 0, 0, 0, time.UTC)
	pings := 0
	var pingErr error
	h := &Health{Server: health.NewServer(), now: func() time.Time { return now },
		ping: func(ctx context.Context) error {
			pings++
			if _, ok := ctx.Deadline(); !ok {
				t.Error("store ping without a deadline")
			}
			return pingErr
		}}
	h.SetServingStatus("", healthpb.HealthCheckResponse_SERVING)
	check := func() healthpb.HealthCheckResponse_ServingStatus {
		t.Helper()
		r, err := h.Check(context.Background(), &healthpb.HealthCheckRequest{})
		if err != nil {
			t.Fatal(err)
		}
		return r.GetStatus()
	}
	if s := check(); s != healthpb.HealthCheckResponse_SERVING || pings != 1 {
		t.Errorf("healthy store: %v after %d pings; want SERVING after 1", s, pings)
	}
	pingErr = errors.New("connection refused")
	now = now.Add(readinessCache / 2)
	if s := check(); s != healthpb.HealthCheckResponse_SERVING || pings != 1 {
		t.Errorf("within the cache: %v after %d pings; want the cached SERVING, 1 ping", s, pings)
	}
	now = now.Add(readinessCache)
	if s := check(); s != healthpb.HealthCheckResponse_NOT_SERVING || pings != 2 {
		t.Errorf("store down: %v after %d pings; want NOT_SERVING after 2", s, pings)
	}
	pingErr = nil
	h.SetServingStatus("", healthpb.HealthCheckResponse_NOT_SERVING)
	now = now.Add(2 * readinessCache)
	if s := check(); s != healthpb.HealthCheckResponse_NOT_SERVING || pings != 2 {
		t.Errorf("shutting down: %v after %d pings; want NOT_SERVING without pinging", s, pings)
	}
}
