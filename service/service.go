// Package service implements the voltcast gRPC API (proto/voltcast/v1): it validates
// requests, converts between the API's messages and the model's types, calls the model
// and the store, and maps every error to a gRPC status in one place ([toStatus]).
//
// # Conventions
//
// Requests are validated completely before any model code runs, so that no request can
// reach a model panic; the recover interceptor ([NewGRPCServer]) is only the backstop.
// Invalid input is INVALID_ARGUMENT with a google.rpc.BadRequest naming each offending
// field by its proto path (e.g. "battery.series_count"); every error carries a
// google.rpc.ErrorInfo with domain [ErrorDomain] and one of the Reason constants.
//
// Units follow the API: SI in field names, °C for temperatures, current positive on
// discharge. The model works in kelvin; conversion happens here.
//
// # Tenancy
//
// Every store call carries a tenant id. Until authentication exists, all calls use
// [store.DefaultTenant].
package service

import (
	"context"
	"errors"
	"log/slog"
	"time"

	"go.opentelemetry.io/otel/metric"
	"go.opentelemetry.io/otel/metric/noop"
	"google.golang.org/grpc"

	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service/store"
)

// Limits bound the size of requests and the persistence cadence. A zero field takes the
// default written beside it.
type Limits struct {
	// MaxBatchBlocks is the most blocks in one IngestTelemetry call (default 1000).
	MaxBatchBlocks int
	// MaxBatchSamples is the most samples in one IngestTelemetry call or stream
	// message, all blocks together (default 100000).
	MaxBatchSamples int
	// MaxCalibrationSamples is the most samples of calibration data (default 200000).
	MaxCalibrationSamples int
	// PersistInterval is the longest time a battery's applied state stays only in
	// memory (default 10 s).
	PersistInterval time.Duration
	// PersistEverySamples persists a battery's state after this many applied samples
	// (default 1000).
	PersistEverySamples int
	// CalibrationWorkers is the most calibration fits that run at once (default 1;
	// each fit keeps one CPU busy).
	CalibrationWorkers int
	// CalibrationQueue is the most calibrations that wait for a worker (default 8);
	// beyond it CreateCalibration is RESOURCE_EXHAUSTED.
	CalibrationQueue int
	// CalibrationLease is how long a PENDING or RUNNING calibration may go without a
	// write before it counts as lost (its server died); running fits renew it every
	// quarter of it (default 2 min). See calrunner.go.
	CalibrationLease time.Duration
}

func (l Limits) withDefaults() Limits {
	def := func(v *int, d int) {
		if *v <= 0 {
			*v = d
		}
	}
	def(&l.MaxBatchBlocks, 1000)
	def(&l.MaxBatchSamples, 100000)
	def(&l.MaxCalibrationSamples, 200000)
	def(&l.PersistEverySamples, 1000)
	def(&l.CalibrationWorkers, 1)
	def(&l.CalibrationQueue, 8)
	if l.PersistInterval <= 0 {
		l.PersistInterval = 10 * time.Second
	}
	if l.CalibrationLease <= 0 {
		l.CalibrationLease = 2 * time.Minute
	}
	return l
}

// Options configure a [Service]. Store and Logger are required.
type Options struct {
	Store  store.Store
	Logger *slog.Logger
	// MeterProvider receives the domain metrics; nil means no metrics.
	MeterProvider metric.MeterProvider
	Limits        Limits
	// Now returns the current time; nil means time.Now. Tests inject a clock.
	Now func() time.Time
}

// Service holds the handlers of every voltcast gRPC service. Register them on a
// server with [Service.Register]. It is safe for concurrent use.
type Service struct {
	store   store.Store
	log     *slog.Logger
	limits  Limits
	now     func() time.Time
	metrics *metrics
	tr      tracker
	cal     *calRunner
	// calHook, when set (tests only), runs after a calibration is marked RUNNING.
	calHook func(id string)
}

// New returns a Service.
func New(opts Options) (*Service, error) {
	if opts.Store == nil {
		return nil, errors.New("service: a store is required")
	}
	if opts.Logger == nil {
		return nil, errors.New("service: a logger is required")
	}
	mp := opts.MeterProvider
	if mp == nil {
		mp = noop.NewMeterProvider()
	}
	m, err := newMetrics(mp)
	if err != nil {
		return nil, err
	}
	s := &Service{
		store:   opts.Store,
		log:     opts.Logger,
		limits:  opts.Limits.withDefaults(),
		now:     opts.Now,
		metrics: m,
		tr:      tracker{entries: map[string]*entry{}},
	}
	s.cal = newCalRunner(s.limits)
	if s.now == nil {
		s.now = time.Now
	}
	return s, nil
}

// Register registers every voltcast service on r.
func (s *Service) Register(r grpc.ServiceRegistrar) {
	pb.RegisterBatteryTypeServiceServer(r, &batteryTypeServer{s: s})
	pb.RegisterBatteryServiceServer(r, &batteryServer{s: s})
	pb.RegisterTelemetryServiceServer(r, &telemetryServer{s: s})
	pb.RegisterForecastServiceServer(r, &forecastServer{s: s})
	pb.RegisterCalibrationServiceServer(r, &calibrationServer{s: s})
}

// status maps err to a gRPC status; see [toStatus].
func (s *Service) status(ctx context.Context, err error) error {
	return toStatus(ctx, s.log, err, "")
}

// tenant returns the tenant of a request. Until authentication exists it is always the
// default tenant.
func tenant(context.Context) string { return store.DefaultTenant }
