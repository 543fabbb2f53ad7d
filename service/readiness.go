package service

import (
	"context"
	"sync"
	"time"

	"google.golang.org/grpc/health"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
)

// Readiness probe settings (STYLE.md §4: ping the store with a short timeout, cache the
// answer for about a second so that probes cannot load the store).
const (
	readinessTimeout = 500 * time.Millisecond
	readinessCache   = time.Second
)

// Health is the grpc.health.v1 service of voltcastd. Check answers SERVING only while
// the server serves (shutdown sets NOT_SERVING first, through the embedded
// health.Server's SetServingStatus) and the store answers a ping; the ping has a
// 500 ms timeout and its result is cached for a second. Watch streams the serving
// status set by SetServingStatus only (it does not ping). The REST gateway's /healthz
// calls Check, so REST and gRPC give the same answer.
type Health struct {
	*health.Server
	ping func(context.Context) error
	now  func() time.Time

	mu      sync.Mutex
	checked time.Time
	err     error
}

// NewHealth returns a Health that pings the service's store. It starts SERVING.
func NewHealth(svc *Service) *Health {
	h := &Health{Server: health.NewServer(), ping: svc.store.Ping, now: time.Now}
	h.SetServingStatus("", healthpb.HealthCheckResponse_SERVING)
	return h
}

// Check implements grpc.health.v1.Health.Check.
func (h *Health) Check(ctx context.Context, req *healthpb.HealthCheckRequest) (*healthpb.HealthCheckResponse, error) {
	resp, err := h.Server.Check(ctx, req)
	if err != nil || resp.GetStatus() != healthpb.HealthCheckResponse_SERVING {
		return resp, err
	}
	if h.storeErr(ctx) != nil {
		return &healthpb.HealthCheckResponse{Status: healthpb.HealthCheckResponse_NOT_SERVING}, nil
	}
	return resp, nil
}

// storeErr returns the cached result of the last store ping, pinging again when it is
// older than readinessCache. Concurrent probes wait for one ping.
func (h *Health) storeErr(ctx context.Context) error {
	h.mu.Lock()
	defer h.mu.Unlock()
	if now := h.now(); h.checked.IsZero() || now.Sub(h.checked) >= readinessCache {
		pctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), readinessTimeout)
		h.err = h.ping(pctx)
		cancel()
		h.checked = h.now()
	}
	return h.err
}
