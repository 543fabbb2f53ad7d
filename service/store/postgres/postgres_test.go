package postgres

import (
	"database/sql"
	"testing"

	"github.com/voltcast/voltcast/service/internal/pgtest"
	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/storetest"
)

// The tests need a PostgreSQL server: service/internal/pgtest finds it, and skips (or,
// with VOLTCAST_REQUIRE_POSTGRES=1 as .ci/run sets, fails) when there is none. Every
// store a test opens lives in a fresh schema with a random name, dropped at cleanup.

// requireServer returns the admin pool and DSN, or skips (or fails) the test.
func requireServer(t testing.TB) (*sql.DB, string) { return pgtest.Server(t) }

// freshSchema creates an empty schema with a random name and drops it at cleanup.
func freshSchema(t testing.TB) string {
	name, _ := pgtest.Schema(t)
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
