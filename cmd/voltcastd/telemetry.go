package main

import (
	"context"
	"errors"
	"fmt"
	"net/http"

	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"
	"github.com/prometheus/client_golang/prometheus/promhttp"
	"go.opentelemetry.io/otel/attribute"
	"go.opentelemetry.io/otel/exporters/otlp/otlptrace/otlptracegrpc"
	otelprom "go.opentelemetry.io/otel/exporters/prometheus"
	sdkmetric "go.opentelemetry.io/otel/sdk/metric"
	"go.opentelemetry.io/otel/sdk/resource"
	sdktrace "go.opentelemetry.io/otel/sdk/trace"
)

// version is the server's version, set at build time with
// -ldflags "-X main.version=...".
var version = "dev"

// telemetry holds the OpenTelemetry providers of one server run.
type telemetry struct {
	tracer  *sdktrace.TracerProvider
	meter   *sdkmetric.MeterProvider
	metrics http.Handler // Prometheus scrape handler
}

// newTelemetry builds the providers: traces are sampled at cfg.TraceSample (parent
// based) and exported by OTLP/gRPC when an endpoint is configured (otherwise traces
// still give log lines their trace ids); metrics are exposed for Prometheus scraping
// on a registry of this run's own.
func newTelemetry(ctx context.Context, cfg Config) (*telemetry, error) {
	res := resource.NewSchemaless(
		attribute.String("service.name", "voltcastd"),
		attribute.String("service.version", version),
	)
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	exp, err := otelprom.New(otelprom.WithRegisterer(reg))
	if err != nil {
		return nil, fmt.Errorf("creating the Prometheus exporter: %w", err)
	}
	t := &telemetry{
		meter:   sdkmetric.NewMeterProvider(sdkmetric.WithReader(exp), sdkmetric.WithResource(res)),
		metrics: promhttp.HandlerFor(reg, promhttp.HandlerOpts{}),
	}
	topts := []sdktrace.TracerProviderOption{
		sdktrace.WithResource(res),
		sdktrace.WithSampler(sdktrace.ParentBased(sdktrace.TraceIDRatioBased(cfg.TraceSample))),
	}
	if cfg.OTLPEndpoint != "" {
		te, err := otlptracegrpc.New(ctx, otlptracegrpc.WithEndpoint(cfg.OTLPEndpoint), otlptracegrpc.WithInsecure())
		if err != nil {
			return nil, errors.Join(fmt.Errorf("creating the OTLP trace exporter: %w", err), t.meter.Shutdown(ctx))
		}
		topts = append(topts, sdktrace.WithBatcher(te))
	}
	t.tracer = sdktrace.NewTracerProvider(topts...)
	return t, nil
}

// shutdown flushes and stops both providers.
func (t *telemetry) shutdown(ctx context.Context) error {
	return errors.Join(t.tracer.Shutdown(ctx), t.meter.Shutdown(ctx))
}
