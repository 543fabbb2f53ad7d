package service

import (
	"context"
	"fmt"
	"time"

	"go.opentelemetry.io/otel/attribute"
	"go.opentelemetry.io/otel/metric"
)

// metrics are the domain metrics of the service (the RPC and HTTP metrics come from the
// OpenTelemetry instrumentation in cmd/voltcastd).
type metrics struct {
	samplesApplied   metric.Int64Counter
	samplesDuplicate metric.Int64Counter
	samplesRejected  metric.Int64Counter
	samplesOutlier   metric.Int64Counter
	activeBatteries  metric.Int64UpDownCounter
	innovation       metric.Float64Histogram
	storeLatency     metric.Float64Histogram
}

func newMetrics(mp metric.MeterProvider) (*metrics, error) {
	m := mp.Meter("github.com/voltcast/voltcast/service")
	var ms metrics
	var err error
	try := func(f func() error) {
		if err == nil {
			err = f()
		}
	}
	try(func() (e error) {
		ms.samplesApplied, e = m.Int64Counter("voltcast.telemetry.samples.applied",
			metric.WithDescription("Telemetry samples applied to battery state estimates."), metric.WithUnit("{sample}"))
		return e
	})
	try(func() (e error) {
		ms.samplesDuplicate, e = m.Int64Counter("voltcast.telemetry.samples.duplicate",
			metric.WithDescription("Telemetry samples skipped because they were applied before (resent)."), metric.WithUnit("{sample}"))
		return e
	})
	try(func() (e error) {
		ms.samplesRejected, e = m.Int64Counter("voltcast.telemetry.samples.rejected",
			metric.WithDescription("Telemetry samples rejected, by reason."), metric.WithUnit("{sample}"))
		return e
	})
	try(func() (e error) {
		ms.samplesOutlier, e = m.Int64Counter("voltcast.telemetry.samples.outliers",
			metric.WithDescription("Telemetry samples applied whose voltage the estimator discarded as an outlier (innovation gate); they are also counted as applied."), metric.WithUnit("{sample}"))
		return e
	})
	try(func() (e error) {
		ms.activeBatteries, e = m.Int64UpDownCounter("voltcast.batteries.active",
			metric.WithDescription("Batteries whose estimator state is held in memory."), metric.WithUnit("{battery}"))
		return e
	})
	try(func() (e error) {
		ms.innovation, e = m.Float64Histogram("voltcast.estimator.innovation",
			metric.WithDescription("Normalised voltage innovation of the state estimator (innovation divided by its predicted standard deviation); about standard normal when the model fits."),
			metric.WithUnit("1"),
			metric.WithExplicitBucketBoundaries(-5, -3, -2, -1, -0.5, 0, 0.5, 1, 2, 3, 5))
		return e
	})
	try(func() (e error) {
		ms.storeLatency, e = m.Float64Histogram("voltcast.store.duration",
			metric.WithDescription("Duration of store operations, by operation."), metric.WithUnit("s"),
			metric.WithExplicitBucketBoundaries(0.0005, 0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5))
		return e
	})
	if err != nil {
		return nil, fmt.Errorf("service: creating metrics: %w", err)
	}
	return &ms, nil
}

// observeStore records the duration of one store operation started at start.
func (m *metrics) observeStore(ctx context.Context, op string, start time.Time) {
	m.storeLatency.Record(ctx, time.Since(start).Seconds(), metric.WithAttributes(attribute.String("operation", op)))
}
