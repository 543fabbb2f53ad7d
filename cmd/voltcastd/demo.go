package main

import (
	"context"
	"log/slog"

	"github.com/voltcast/voltcast/service/demo"
)

// runDemo loads the invented demo fleet (--demo) and replays its telemetry through
// the server's own gRPC API until ctx ends. A failure is logged, never fatal: the
// server keeps serving without the demo.
func runDemo(ctx context.Context, log *slog.Logger, cfg Config, grpcAddr, httpAddr string) {
	err := demo.Run(ctx, demo.Options{
		Address: grpcAddr, HTTPAddress: httpAddr, Logger: log,
		MaxBatchBlocks: cfg.MaxBatchBlocks, MaxBatchSamples: cfg.MaxBatchSamples,
	})
	if err != nil {
		log.Error("demo stopped", "error", err.Error())
	}
}
