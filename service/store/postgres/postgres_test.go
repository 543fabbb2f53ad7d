package postgres

import (
	"context"
	"crypto/rand"
	"database/sql"
	"encoding/hex"
	"os"
	"sync"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/storetest"
)

// The tests need a PostgreSQL server. VOLTCAST_TEST_POSTGRES_DSN names it (CI sets
// postgres://root@127.0.0.1:5432/test?sslmode=disable); without it, or when the
// server does not answer, the tests skip, unless VOLTCAST_REQUIRE_POSTGRES=1 (set by
// .ci/run) makes that a failure. Every store a test opens lives in a fresh schema with
// a random name, dropped at cleanup.
const (
	dsnEnv     = "VOLTCAST_TEST_POSTGRES_DSN"
	requireEnv = "VOLTCAST_REQUIRE_POSTGRES"
)

var server struct {
	once  sync.Once
	admin *sql.DB
	dsn   string
	why   string // why the server is unavailable; "" when it is available
}

// requireServer returns the admin pool and DSN, or skips (or fails) the test.
func requireServer(t testing.TB) (*sql.DB, string) {
	t.Helper()
	server.once.Do(func() {
		server.dsn = os.Getenv(dsnEnv)
		if server.dsn == "" {
			server.why = dsnEnv + " is not set"
			return
		}
		db, err := sql.Open("pgx", server.dsn)
		if err != nil {
			server.why = "cannot parse " + dsnEnv + ": " + err.Error()
			return
		}
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		if err := db.PingContext(ctx); err != nil {
			db.Close()
			server.why = "server at " + dsnEnv + " does not answer: " + err.Error()
			return
		}
		db.SetMaxOpenConns(4)
		server.admin = db
	})
	if server.why != "" {
		if os.Getenv(requireEnv) == "1" {
			t.Fatalf("PostgreSQL is required (%s=1) but %s", requireEnv, server.why)
		}
		t.Skipf("skipping PostgreSQL tests: %s (e.g. %s=postgres://root@127.0.0.1:5432/test?sslmode=disable)", server.why, dsnEnv)
	}
	return server.admin, server.dsn
}

// freshSchema creates an empty schema with a random name and drops it at cleanup.
func freshSchema(t testing.TB) string {
	t.Helper()
	admin, _ := requireServer(t)
	var b [8]byte
	rand.Read(b[:])
	name := "voltcast_test_" + hex.EncodeToString(b[:])
	if _, err := admin.ExecContext(context.Background(), "CREATE SCHEMA "+name); err != nil {
		t.Fatalf("create schema %s: %v", name, err)
	}
	t.Cleanup(func() {
		if _, err := admin.ExecContext(context.Background(), "DROP SCHEMA "+name+" CASCADE"); err != nil {
			t.Errorf("drop schema %s: %v", name, err)
		}
	})
	return name
}

// openFresh opens a store in a fresh schema.
func openFresh(t testing.TB) store.Store {
	t.Helper()
	_, dsn := requireServer(t)
	return openSchema(t, dsn, freshSchema(t))
}

// openSchema opens a store in schema and closes it at cleanup.
func openSchema(t testing.TB, dsn, schema string) store.Store {
	t.Helper()
	s, err := Open(t.Context(), dsn, &Options{Schema: schema, MaxConns: 8})
	if err != nil {
		t.Fatalf("Open: %v", err)
	}
	t.Cleanup(func() {
		if err := s.Close(); err != nil {
			t.Errorf("Close: %v", err)
		}
	})
	return s
}

func TestContract(t *testing.T) {
	requireServer(t)
	storetest.Run(t, openFresh)
}

// TestReplicas runs two stores on one schema, as two replicas would.
func TestReplicas(t *testing.T) {
	storetest.ReplicasTest(t, func(t testing.TB) (store.Store, store.Store) {
		_, dsn := requireServer(t)
		schema := freshSchema(t)
		return openSchema(t, dsn, schema), openSchema(t, dsn, schema)
	})
}

func BenchmarkPutState(b *testing.B) {
	requireServer(b)
	storetest.PutStateBench(b, openFresh)
}
