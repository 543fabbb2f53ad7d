// Package servicetest starts a real voltcast gRPC server in-process for tests: the
// server's own constructor and interceptors on a loopback port chosen by the kernel,
// over a store the test provides (or the embedded SQLite store in a temporary
// directory), with a client connection to it. Everything stops at the test's cleanup,
// in the order voltcastd uses: connection, gRPC server, estimator flush, calibration
// workers, store.
package servicetest

import (
	"context"
	"log/slog"
	"net"
	"path/filepath"
	"testing"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"

	"github.com/voltcast/voltcast/service"
	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/sqlite"
)

// Server is a running in-process server and a client connection to it.
type Server struct {
	Addr    string           // the gRPC listen address, host:port
	Conn    *grpc.ClientConn // a plaintext client connection to Addr
	Service *service.Service
	Store   store.Store
}

// SQLite opens the embedded store in a temporary directory of t.
func SQLite(t testing.TB) store.Store {
	t.Helper()
	st, err := sqlite.Open(context.Background(), filepath.Join(t.TempDir(), "voltcast.db"), nil)
	if err != nil {
		t.Fatalf("sqlite.Open: %v", err)
	}
	return st
}

// Start runs the gRPC server over st (opts.Store is set to st; a nil opts.Logger logs
// warnings and errors to t's output) and returns it with a client connection. The
// server, the service and st are closed at t's cleanup.
func Start(t testing.TB, st store.Store, opts service.Options) *Server {
	t.Helper()
	opts.Store = st
	if opts.Logger == nil {
		opts.Logger = slog.New(slog.NewTextHandler(t.Output(), &slog.HandlerOptions{Level: slog.LevelWarn}))
	}
	svc, err := service.New(opts)
	if err != nil {
		st.Close()
		t.Fatalf("service.New: %v", err)
	}
	gs, _ := service.NewGRPCServer(svc, service.ServerOptions{Logger: opts.Logger})
	lis, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		st.Close()
		t.Fatal(err)
	}
	go gs.Serve(lis)
	conn, err := grpc.NewClient(lis.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		gs.Stop()
		st.Close()
		t.Fatal(err)
	}
	t.Cleanup(func() {
		conn.Close()
		gs.Stop()
		if err := svc.Flush(context.Background()); err != nil {
			t.Errorf("Flush: %v", err)
		}
		if err := svc.Close(context.Background()); err != nil {
			t.Errorf("Close: %v", err)
		}
		st.Close()
	})
	return &Server{Addr: lis.Addr().String(), Conn: conn, Service: svc, Store: st}
}
