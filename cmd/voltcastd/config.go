package main

import (
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/url"
	"strconv"
	"strings"
	"time"
)

// Config is the whole configuration of voltcastd. Every field comes from a flag that
// falls back to an environment variable (flag > env > default); the defaults sit beside
// the flag definitions in [parseConfig].
type Config struct {
	GRPCAddress string // --grpc-address, VOLTCAST_GRPC_ADDRESS
	HTTPAddress string // --http-address, VOLTCAST_HTTP_ADDRESS; "" disables the gateway
	DataDir     string // --data-dir, VOLTCAST_DATA_DIR: the embedded store's directory
	Store       string // --store, VOLTCAST_STORE: "embedded" or "postgres"
	StoreDSN    string // --store-dsn, VOLTCAST_STORE_DSN: PostgreSQL DSN (secret)
	Demo        bool   // --demo, VOLTCAST_DEMO

	LogLevel  string // --log-level, VOLTCAST_LOG_LEVEL: debug, info, warn, error
	LogFormat string // --log-format, VOLTCAST_LOG_FORMAT: text or json

	OTLPEndpoint string  // --otlp-endpoint, VOLTCAST_OTLP_ENDPOINT: gRPC OTLP trace collector; "" = no export
	TraceSample  float64 // --trace-sample-ratio, VOLTCAST_TRACE_SAMPLE_RATIO
	MetricsPath  string  // --metrics, VOLTCAST_METRICS: Prometheus scrape path on the HTTP address; "" = off

	PersistInterval     time.Duration // --persist-interval, VOLTCAST_PERSIST_INTERVAL
	PersistEverySamples int           // --persist-every-samples, VOLTCAST_PERSIST_EVERY_SAMPLES

	MaxRequestBytes int // --max-request-bytes, VOLTCAST_MAX_REQUEST_BYTES: gRPC message and HTTP body
	MaxBatchBlocks  int // --max-batch-blocks, VOLTCAST_MAX_BATCH_BLOCKS
	MaxBatchSamples int // --max-batch-samples, VOLTCAST_MAX_BATCH_SAMPLES

	MaxCalibrationSamples int           // --max-calibration-samples, VOLTCAST_MAX_CALIBRATION_SAMPLES
	CalibrationWorkers    int           // --calibration-workers, VOLTCAST_CALIBRATION_WORKERS
	CalibrationQueue      int           // --calibration-queue, VOLTCAST_CALIBRATION_QUEUE
	CalibrationLease      time.Duration // --calibration-lease, VOLTCAST_CALIBRATION_LEASE

	ShutdownTimeout time.Duration // --shutdown-timeout, VOLTCAST_SHUTDOWN_TIMEOUT
}

// LogValue prints the configuration for the log with secrets redacted.
func (c Config) LogValue() slog.Value {
	return slog.GroupValue(
		slog.String("grpc_address", c.GRPCAddress),
		slog.String("http_address", c.HTTPAddress),
		slog.String("data_dir", c.DataDir),
		slog.String("store", c.Store),
		slog.String("store_dsn", redactDSN(c.StoreDSN)),
		slog.Bool("demo", c.Demo),
		slog.String("log_level", c.LogLevel),
		slog.String("log_format", c.LogFormat),
		slog.String("otlp_endpoint", c.OTLPEndpoint),
		slog.Float64("trace_sample_ratio", c.TraceSample),
		slog.String("metrics", c.MetricsPath),
		slog.Duration("persist_interval", c.PersistInterval),
		slog.Int("persist_every_samples", c.PersistEverySamples),
		slog.Int("max_request_bytes", c.MaxRequestBytes),
		slog.Int("max_batch_blocks", c.MaxBatchBlocks),
		slog.Int("max_batch_samples", c.MaxBatchSamples),
		slog.Int("max_calibration_samples", c.MaxCalibrationSamples),
		slog.Int("calibration_workers", c.CalibrationWorkers),
		slog.Int("calibration_queue", c.CalibrationQueue),
		slog.Duration("calibration_lease", c.CalibrationLease),
		slog.Duration("shutdown_timeout", c.ShutdownTimeout),
	)
}

// redactDSN hides the password of a URL-form DSN, and all of any other form.
func redactDSN(dsn string) string {
	if dsn == "" {
		return ""
	}
	u, err := url.Parse(dsn)
	if err != nil || u.Scheme == "" {
		return "REDACTED"
	}
	if _, ok := u.User.Password(); ok {
		u.User = url.UserPassword(u.User.Username(), "REDACTED")
	}
	q := u.Query()
	if q.Has("password") {
		q.Set("password", "REDACTED")
		u.RawQuery = q.Encode()
	}
	return u.String()
}

// parseConfig fills a Config from args, falling back to lookup for environment
// variables (injectable for tests).
func parseConfig(args []string, lookup func(string) (string, bool), stderr io.Writer) (Config, error) {
	var c Config
	fs := flag.NewFlagSet("voltcastd", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var errs []error
	env := func(name string) (string, bool) {
		if lookup == nil {
			return "", false
		}
		return lookup(name)
	}
	str := func(p *string, name, envName, def, usage string) {
		if v, ok := env(envName); ok {
			def = v
		}
		fs.StringVar(p, name, def, usage+" (env "+envName+")")
	}
	boolean := func(p *bool, name, envName string, def bool, usage string) {
		if v, ok := env(envName); ok {
			b, err := strconv.ParseBool(v)
			if err != nil {
				errs = append(errs, fmt.Errorf("%s=%q: not a boolean", envName, v))
			}
			def = b
		}
		fs.BoolVar(p, name, def, usage+" (env "+envName+")")
	}
	integer := func(p *int, name, envName string, def int, usage string) {
		if v, ok := env(envName); ok {
			n, err := strconv.Atoi(v)
			if err != nil {
				errs = append(errs, fmt.Errorf("%s=%q: not an integer", envName, v))
			}
			def = n
		}
		fs.IntVar(p, name, def, usage+" (env "+envName+")")
	}
	float := func(p *float64, name, envName string, def float64, usage string) {
		if v, ok := env(envName); ok {
			f, err := strconv.ParseFloat(v, 64)
			if err != nil {
				errs = append(errs, fmt.Errorf("%s=%q: not a number", envName, v))
			}
			def = f
		}
		fs.Float64Var(p, name, def, usage+" (env "+envName+")")
	}
	duration := func(p *time.Duration, name, envName string, def time.Duration, usage string) {
		if v, ok := env(envName); ok {
			d, err := time.ParseDuration(v)
			if err != nil {
				errs = append(errs, fmt.Errorf("%s=%q: not a duration", envName, v))
			}
			def = d
		}
		fs.DurationVar(p, name, def, usage+" (env "+envName+")")
	}

	str(&c.GRPCAddress, "grpc-address", "VOLTCAST_GRPC_ADDRESS", "127.0.0.1:8081", "gRPC listen address")
	str(&c.HTTPAddress, "http-address", "VOLTCAST_HTTP_ADDRESS", "127.0.0.1:8080", "REST gateway listen address; empty disables it")
	str(&c.DataDir, "data-dir", "VOLTCAST_DATA_DIR", "data", "directory of the embedded store (SQLite file voltcast.db)")
	str(&c.Store, "store", "VOLTCAST_STORE", "embedded", "store: embedded (SQLite in --data-dir) or postgres (--store-dsn)")
	str(&c.StoreDSN, "store-dsn", "VOLTCAST_STORE_DSN", "", "PostgreSQL connection string for --store=postgres")
	boolean(&c.Demo, "demo", "VOLTCAST_DEMO", false, "load the demo fleet and replay its telemetry")
	str(&c.LogLevel, "log-level", "VOLTCAST_LOG_LEVEL", "info", "log level: debug, info, warn or error")
	str(&c.LogFormat, "log-format", "VOLTCAST_LOG_FORMAT", "text", "log format: text or json")
	str(&c.OTLPEndpoint, "otlp-endpoint", "VOLTCAST_OTLP_ENDPOINT", "", "OTLP/gRPC endpoint (host:port) to export traces to; empty disables export")
	float(&c.TraceSample, "trace-sample-ratio", "VOLTCAST_TRACE_SAMPLE_RATIO", 1, "fraction of new traces to sample, 0 to 1")
	str(&c.MetricsPath, "metrics", "VOLTCAST_METRICS", "/metrics", "Prometheus scrape path on the HTTP address; empty disables it")
	duration(&c.PersistInterval, "persist-interval", "VOLTCAST_PERSIST_INTERVAL", 10*time.Second, "longest time applied telemetry stays only in memory")
	integer(&c.PersistEverySamples, "persist-every-samples", "VOLTCAST_PERSIST_EVERY_SAMPLES", 1000, "persist a battery's state after this many applied samples")
	integer(&c.MaxRequestBytes, "max-request-bytes", "VOLTCAST_MAX_REQUEST_BYTES", 16<<20, "largest gRPC request message and HTTP request body, bytes")
	integer(&c.MaxBatchBlocks, "max-batch-blocks", "VOLTCAST_MAX_BATCH_BLOCKS", 1000, "most blocks in one telemetry batch")
	integer(&c.MaxBatchSamples, "max-batch-samples", "VOLTCAST_MAX_BATCH_SAMPLES", 100000, "most samples in one telemetry batch or stream message")
	integer(&c.MaxCalibrationSamples, "max-calibration-samples", "VOLTCAST_MAX_CALIBRATION_SAMPLES", 200000, "most samples in one calibration request, all tests together")
	integer(&c.CalibrationWorkers, "calibration-workers", "VOLTCAST_CALIBRATION_WORKERS", 1, "calibration fits run at once (each keeps a CPU busy)")
	integer(&c.CalibrationQueue, "calibration-queue", "VOLTCAST_CALIBRATION_QUEUE", 8, "calibrations that may wait for a worker; more are refused (RESOURCE_EXHAUSTED)")
	duration(&c.CalibrationLease, "calibration-lease", "VOLTCAST_CALIBRATION_LEASE", 2*time.Minute, "a pending or running calibration not written for this long counts as lost (its server died)")
	duration(&c.ShutdownTimeout, "shutdown-timeout", "VOLTCAST_SHUTDOWN_TIMEOUT", 15*time.Second, "how long graceful shutdown may take")

	if err := fs.Parse(args); err != nil {
		return Config{}, err
	}
	if fs.NArg() > 0 {
		return Config{}, fmt.Errorf("unexpected arguments: %s", strings.Join(fs.Args(), " "))
	}
	if len(errs) > 0 {
		return Config{}, errors.Join(errs...)
	}
	return c, nil
}

// Validate checks the configuration before anything starts and reports every problem.
func (c Config) Validate() error {
	var errs []error
	bad := func(format string, args ...any) { errs = append(errs, fmt.Errorf(format, args...)) }
	if _, _, err := net.SplitHostPort(c.GRPCAddress); err != nil {
		bad("--grpc-address %q: want host:port", c.GRPCAddress)
	}
	if c.HTTPAddress != "" {
		if _, _, err := net.SplitHostPort(c.HTTPAddress); err != nil {
			bad("--http-address %q: want host:port", c.HTTPAddress)
		}
	}
	switch c.Store {
	case "embedded":
		if c.DataDir == "" {
			bad("--data-dir is required with --store=embedded")
		}
	case "postgres":
		if c.StoreDSN == "" {
			bad("--store-dsn is required with --store=postgres")
		}
	default:
		bad("--store %q: want embedded or postgres", c.Store)
	}
	if _, err := parseLevel(c.LogLevel); err != nil {
		bad("--log-level: %v", err)
	}
	if c.LogFormat != "text" && c.LogFormat != "json" {
		bad("--log-format %q: want text or json", c.LogFormat)
	}
	if !(c.TraceSample >= 0 && c.TraceSample <= 1) {
		bad("--trace-sample-ratio %g: want 0 to 1", c.TraceSample)
	}
	if c.MetricsPath != "" && (!strings.HasPrefix(c.MetricsPath, "/") || c.MetricsPath == "/" ||
		strings.ContainsAny(c.MetricsPath, " {}") || c.MetricsPath == "/openapi.json" || c.MetricsPath == "/healthz" || strings.HasPrefix(c.MetricsPath, "/v1/")) {
		bad("--metrics %q: want a path such as /metrics that the API does not use", c.MetricsPath)
	}
	if c.MetricsPath != "" && c.HTTPAddress == "" {
		bad("--metrics needs --http-address (set --metrics= to disable it)")
	}
	if c.PersistInterval < 100*time.Millisecond || c.PersistInterval > time.Hour {
		bad("--persist-interval %s: want 100ms to 1h", c.PersistInterval)
	}
	if c.PersistEverySamples < 1 || c.PersistEverySamples > 10_000_000 {
		bad("--persist-every-samples %d: want 1 to 10000000", c.PersistEverySamples)
	}
	if c.MaxRequestBytes < 1<<10 || c.MaxRequestBytes > 1<<30 {
		bad("--max-request-bytes %d: want 1 KiB to 1 GiB", c.MaxRequestBytes)
	}
	if c.MaxBatchBlocks < 1 || c.MaxBatchBlocks > 1000 {
		bad("--max-batch-blocks %d: want 1 to 1000 (the API's limit)", c.MaxBatchBlocks)
	}
	if c.MaxBatchSamples < 1 || c.MaxBatchSamples > 100000 {
		bad("--max-batch-samples %d: want 1 to 100000 (the API's limit)", c.MaxBatchSamples)
	}
	if c.MaxCalibrationSamples < 1 || c.MaxCalibrationSamples > 200000 {
		bad("--max-calibration-samples %d: want 1 to 200000 (the API's limit)", c.MaxCalibrationSamples)
	}
	if c.CalibrationWorkers < 1 || c.CalibrationWorkers > 256 {
		bad("--calibration-workers %d: want 1 to 256", c.CalibrationWorkers)
	}
	if c.CalibrationQueue < 1 || c.CalibrationQueue > 10000 {
		bad("--calibration-queue %d: want 1 to 10000", c.CalibrationQueue)
	}
	if c.CalibrationLease < 4*time.Second || c.CalibrationLease > time.Hour {
		bad("--calibration-lease %s: want 4s to 1h", c.CalibrationLease)
	}
	if c.ShutdownTimeout <= 0 {
		bad("--shutdown-timeout %s: want a positive duration", c.ShutdownTimeout)
	}
	return errors.Join(errs...)
}

func parseLevel(s string) (slog.Level, error) {
	var l slog.Level
	if err := l.UnmarshalText([]byte(s)); err != nil {
		return 0, fmt.Errorf("%q: want debug, info, warn or error", s)
	}
	return l, nil
}
