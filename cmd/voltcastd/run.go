package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"sync"
	"time"

	"google.golang.org/grpc"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"

	"github.com/voltcast/voltcast/gateway"
	"github.com/voltcast/voltcast/service"
	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/postgres"
	"github.com/voltcast/voltcast/service/store/sqlite"
)

// listening receives the bound addresses once the server serves; tests use it to find
// ports chosen by the kernel (":0").
type listening func(grpcAddr, httpAddr string)

// run is the whole server: it parses and validates the configuration, opens the store,
// serves gRPC and HTTP until ctx ends, and shuts down in order. lookup reads
// environment variables.
func run(ctx context.Context, args []string, stdout, stderr io.Writer, lookup func(string) (string, bool), ready listening) error {
	cfg, err := parseConfig(args, lookup, stderr)
	if err != nil {
		return err
	}
	if err := cfg.Validate(); err != nil {
		return fmt.Errorf("invalid configuration:\n%w", err)
	}
	level, _ := parseLevel(cfg.LogLevel)
	var lv slog.LevelVar
	lv.Set(level)
	hopts := &slog.HandlerOptions{Level: &lv}
	var log *slog.Logger
	if cfg.LogFormat == "json" {
		log = slog.New(slog.NewJSONHandler(stderr, hopts))
	} else {
		log = slog.New(slog.NewTextHandler(stderr, hopts))
	}
	log.Info("starting voltcastd", "version", version, "config", cfg)

	tel, err := newTelemetry(ctx, cfg)
	if err != nil {
		return err
	}
	st, err := openStore(ctx, cfg)
	if err != nil {
		return errors.Join(err, tel.shutdown(context.WithoutCancel(ctx)))
	}
	svc, err := service.New(service.Options{
		Store:         st,
		Logger:        log,
		MeterProvider: tel.meter,
		Limits: service.Limits{
			MaxBatchBlocks:        cfg.MaxBatchBlocks,
			MaxBatchSamples:       cfg.MaxBatchSamples,
			MaxCalibrationSamples: cfg.MaxCalibrationSamples,
			PersistInterval:       cfg.PersistInterval,
			PersistEverySamples:   cfg.PersistEverySamples,
			CalibrationWorkers:    cfg.CalibrationWorkers,
			CalibrationQueue:      cfg.CalibrationQueue,
			CalibrationLease:      cfg.CalibrationLease,
		},
	})
	if err != nil {
		return errors.Join(err, st.Close(), tel.shutdown(context.WithoutCancel(ctx)))
	}
	// Calibrations do not survive their server (service/calrunner.go). The embedded
	// store belongs to this process alone, so every calibration the previous process
	// left unfinished has lost its worker; with PostgreSQL other replicas may still be
	// running theirs, so only those whose lease lapsed are.
	before := time.Now()
	if cfg.Store == "postgres" {
		before = before.Add(-cfg.CalibrationLease)
	}
	if n, err := svc.RecoverCalibrations(ctx, before); err != nil {
		log.Warn("marking lost calibrations failed", "error", err.Error())
	} else if n > 0 {
		log.Info("marked calibrations of a stopped server failed", "count", n)
	}
	return serve(ctx, cfg, log, tel, st, svc, ready)
}

// openStore opens the configured store.
func openStore(ctx context.Context, cfg Config) (store.Store, error) {
	switch cfg.Store {
	case "embedded":
		if err := os.MkdirAll(cfg.DataDir, 0o750); err != nil {
			return nil, fmt.Errorf("creating the data directory: %w", err)
		}
		st, err := sqlite.Open(ctx, filepath.Join(cfg.DataDir, "voltcast.db"), nil)
		if err != nil {
			return nil, fmt.Errorf("opening the embedded store: %w", err)
		}
		return st, nil
	case "postgres":
		// The DSN may hold a password: postgres.Open's errors never repeat it.
		st, err := postgres.Open(ctx, cfg.StoreDSN, nil)
		if err != nil {
			return nil, fmt.Errorf("opening the PostgreSQL store: %w", err)
		}
		return st, nil
	}
	return nil, fmt.Errorf("unknown store %q", cfg.Store)
}

// serve runs the listeners until ctx ends, then shuts down. The order matters and is
// fixed here (STYLE.md §4):
//
//  0. stop the demo replay (--demo), which calls this server like any client;
//  1. health NOT_SERVING, so load balancers stop sending new work;
//  2. http.Server.Shutdown with the deadline: the gateway stops taking requests and
//     finishes those in flight (they still need the gRPC server);
//  3. gRPC GracefulStop, then Stop when the deadline passes (streams that do not end);
//  4. close the gateway's client connection;
//  5. shut down the tracer and meter providers (flushes spans);
//  6. stop the persistence loop and flush estimator state (after every request is
//     done, so no sample is applied after its state was saved), and stop the
//     calibration fits, each writing its FAILED (INTERRUPTED) state;
//  7. close the store, last, because step 6 writes to it.
func serve(ctx context.Context, cfg Config, log *slog.Logger, tel *telemetry, st store.Store, svc *service.Service, ready listening) (err error) {
	grpcLis, err := net.Listen("tcp", cfg.GRPCAddress)
	if err != nil {
		return errors.Join(fmt.Errorf("listening for gRPC: %w", err), st.Close(), tel.shutdown(context.WithoutCancel(ctx)))
	}
	gs, hs := service.NewGRPCServer(svc, service.ServerOptions{
		Logger: log, TracerProvider: tel.tracer, MeterProvider: tel.meter, MaxRecvBytes: cfg.MaxRequestBytes,
	})

	var wg sync.WaitGroup
	errc := make(chan error, 2)
	wg.Go(func() {
		if err := gs.Serve(grpcLis); err != nil && !errors.Is(err, grpc.ErrServerStopped) {
			errc <- fmt.Errorf("serving gRPC: %w", err)
		}
	})

	var (
		gw      *gateway.Gateway
		httpSrv *http.Server
		httpLis net.Listener
	)
	if cfg.HTTPAddress != "" {
		routes := map[string]http.Handler{}
		if cfg.MetricsPath != "" {
			routes["GET "+cfg.MetricsPath] = tel.metrics
		}
		gw, err = gateway.New(ctx, gateway.Options{
			GRPCAddress:    grpcLis.Addr().String(),
			MaxBodyBytes:   int64(cfg.MaxRequestBytes),
			TracerProvider: tel.tracer,
			MeterProvider:  tel.meter,
			Routes:         routes,
		})
		if err == nil {
			httpLis, err = net.Listen("tcp", cfg.HTTPAddress)
		}
		if err != nil {
			gs.Stop()
			wg.Wait()
			if gw != nil {
				gw.Close()
			}
			return errors.Join(fmt.Errorf("starting the gateway: %w", err), st.Close(), tel.shutdown(context.WithoutCancel(ctx)))
		}
		httpSrv = &http.Server{
			Handler:           gw.Handler(),
			ReadHeaderTimeout: 10 * time.Second,
			ErrorLog:          slog.NewLogLogger(log.Handler(), slog.LevelWarn),
		}
		wg.Go(func() {
			if err := httpSrv.Serve(httpLis); err != nil && !errors.Is(err, http.ErrServerClosed) {
				errc <- fmt.Errorf("serving HTTP: %w", err)
			}
		})
	}

	persistCtx, stopPersist := context.WithCancel(context.WithoutCancel(ctx))
	var persistDone sync.WaitGroup
	persistDone.Go(func() { svc.Run(persistCtx) })

	httpAddr := ""
	if httpLis != nil {
		httpAddr = httpLis.Addr().String()
	}
	log.Info("serving", "grpc_address", grpcLis.Addr().String(), "http_address", httpAddr)
	demoCtx, stopDemo := context.WithCancel(ctx)
	defer stopDemo()
	var demoDone sync.WaitGroup
	if cfg.Demo {
		demoDone.Go(func() { runDemo(demoCtx, log, cfg, grpcLis.Addr().String(), httpAddr) })
	}
	if ready != nil {
		ready(grpcLis.Addr().String(), httpAddr)
	}

	var serveErr error
	select {
	case <-ctx.Done():
		log.Info("shutting down", "cause", context.Cause(ctx))
	case serveErr = <-errc:
		log.Error("server failed; shutting down", "error", serveErr.Error())
	}

	stopDemo() // 0. the demo replay, a client of this server, stops first
	demoDone.Wait()
	// The shutdown order is documented above; keep the two in step.
	sctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), cfg.ShutdownTimeout)
	defer cancel()
	errs := []error{serveErr}
	hs.SetServingStatus("", healthpb.HealthCheckResponse_NOT_SERVING) // 1
	if httpSrv != nil {
		if err := httpSrv.Shutdown(sctx); err != nil { // 2
			errs = append(errs, fmt.Errorf("shutting down HTTP: %w", err))
		}
	}
	stopped := make(chan struct{})
	go func() { gs.GracefulStop(); close(stopped) }() // 3
	select {
	case <-stopped:
	case <-sctx.Done():
		log.Warn("graceful gRPC stop timed out; stopping")
		gs.Stop()
		<-stopped
	}
	wg.Wait()
	if gw != nil {
		if err := gw.Close(); err != nil { // 4
			errs = append(errs, fmt.Errorf("closing the gateway connection: %w", err))
		}
	}
	if err := tel.shutdown(sctx); err != nil { // 5
		errs = append(errs, fmt.Errorf("shutting down telemetry: %w", err))
	}
	stopPersist() // 6
	persistDone.Wait()
	// The flush must finish even when a slow client used up the shutdown deadline in
	// step 3: it gets a deadline of its own, so estimator state is not dropped.
	fctx, fcancel := context.WithTimeout(context.WithoutCancel(ctx), cfg.ShutdownTimeout)
	defer fcancel()
	if err := svc.Flush(fctx); err != nil {
		errs = append(errs, fmt.Errorf("flushing estimator state: %w", err))
	}
	if err := svc.Close(fctx); err != nil {
		errs = append(errs, fmt.Errorf("stopping calibrations: %w", err))
	}
	if err := st.Close(); err != nil { // 7
		errs = append(errs, fmt.Errorf("closing the store: %w", err))
	}
	err = errors.Join(errs...)
	if err == nil {
		log.Info("stopped")
	}
	return err
}
