// Command voltcastd is the voltcast server: the gRPC API, the REST gateway with its
// OpenAPI document, health, metrics and traces, on the embedded (SQLite) or PostgreSQL
// store.
//
//	voltcastd --grpc-address 127.0.0.1:8081 --http-address 127.0.0.1:8080 --data-dir data
//
// Every flag falls back to an environment variable (see [Config]); run voltcastd -h
// for the list. main stays thin: it builds the signal context, calls run and turns
// its error into an exit status, so that run can be tested in-process.
package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"os"
	"os/signal"
	"syscall"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	err := run(ctx, os.Args[1:], os.Stdout, os.Stderr, os.LookupEnv, nil)
	stop()
	switch {
	case err == nil:
	case errors.Is(err, flag.ErrHelp):
	default:
		fmt.Fprintln(os.Stderr, "voltcastd:", err)
		os.Exit(1)
	}
}
