// Package pgtest gives tests a PostgreSQL server and a fresh schema on it, for the
// store's own tests (service/store/postgres) and the service's: VOLTCAST_TEST_POSTGRES_DSN names
// the server (CI sets postgres://root@127.0.0.1:5432/test?sslmode=disable); without
// it, or when the server does not answer, tests skip with a message, unless
// VOLTCAST_REQUIRE_POSTGRES=1 makes that a failure.
package pgtest

import (
	"context"
	"crypto/rand"
	"database/sql"
	"encoding/hex"
	"os"
	"sync"
	"testing"
	"time"

	_ "github.com/jackc/pgx/v5/stdlib" // the "pgx" database/sql driver
)

// Environment variables that select and require the test server.
const (
	DSNEnv     = "VOLTCAST_TEST_POSTGRES_DSN"
	RequireEnv = "VOLTCAST_REQUIRE_POSTGRES"
)

var server struct {
	once  sync.Once
	admin *sql.DB
	dsn   string
	why   string // why the server is unavailable; "" when it is available
}

// Server returns the admin pool and DSN of the test server, or skips (or fails) t.
func Server(t testing.TB) (*sql.DB, string) {
	t.Helper()
	server.once.Do(func() {
		server.dsn = os.Getenv(DSNEnv)
		if server.dsn == "" {
			server.why = DSNEnv + " is not set"
			return
		}
		db, err := sql.Open("pgx", server.dsn)
		if err != nil {
			server.why = "cannot parse " + DSNEnv + ": " + err.Error()
			return
		}
		ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		if err := db.PingContext(ctx); err != nil {
			db.Close()
			server.why = "server at " + DSNEnv + " does not answer: " + err.Error()
			return
		}
		db.SetMaxOpenConns(4)
		server.admin = db
	})
	if server.why != "" {
		if os.Getenv(RequireEnv) == "1" {
			t.Fatalf("PostgreSQL is required (%s=1) but %s", RequireEnv, server.why)
		}
		t.Skipf("skipping PostgreSQL tests: %s (e.g. %s=postgres://root@127.0.0.1:5432/test?sslmode=disable)", server.why, DSNEnv)
	}
	return server.admin, server.dsn
}

// Schema creates an empty schema with a random name, dropped at cleanup, and returns
// its name and the server's DSN.
func Schema(t testing.TB) (name, dsn string) {
	t.Helper()
	admin, dsn := Server(t)
	var b [8]byte
	rand.Read(b[:])
	name = "voltcast_test_" + hex.EncodeToString(b[:])
	if _, err := admin.ExecContext(context.Background(), "CREATE SCHEMA "+name); err != nil {
		t.Fatalf("create schema %s: %v", name, err)
	}
	t.Cleanup(func() {
		if _, err := admin.ExecContext(context.Background(), "DROP SCHEMA "+name+" CASCADE"); err != nil {
			t.Errorf("drop schema %s: %v", name, err)
		}
	})
	return name, dsn
}
