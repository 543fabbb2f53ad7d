package sqlite

import (
	"database/sql"
	"path/filepath"
	"slices"
	"sync"
	"testing"

	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/internal/sqlstore"
)

// tables lists the tables of the SQLite file (without SQLite's own).
func tables(t *testing.T, db *sql.DB) []string {
	t.Helper()
	rows, err := db.QueryContext(t.Context(), `SELECT name FROM sqlite_schema WHERE type = 'table' AND name NOT LIKE 'sqlite_%' ORDER BY name`)
	if err != nil {
		t.Fatalf("list tables: %v", err)
	}
	defer rows.Close()
	var names []string
	for rows.Next() {
		var n string
		if err := rows.Scan(&n); err != nil {
			t.Fatalf("list tables: %v", err)
		}
		names = append(names, n)
	}
	return names
}

func TestMigrations(t *testing.T) {
	ms, err := sqlstore.LoadMigrations(migrations)
	if err != nil {
		t.Fatalf("LoadMigrations: %v", err)
	}
	if len(ms) != 3 {
		t.Errorf("LoadMigrations: %d migrations; want 3", len(ms))
	}
	path := filepath.Join(t.TempDir(), "m.db")
	s, err := Open(t.Context(), path, nil)
	if err != nil {
		t.Fatalf("Open: %v", err)
	}
	if err := s.Close(); err != nil {
		t.Fatalf("Close: %v", err)
	}

	db, err := sql.Open("sqlite", path+"?_pragma=foreign_keys(1)&_txlock=immediate")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	all := []string{"batteries", "battery_labels", "battery_states", "battery_types", "calibrations",
		"health_records", "schema_migrations", "store_meta", "store_versions"}
	if got := tables(t, db); !slices.Equal(got, all) {
		t.Errorf("tables after Open = %v; want %v", got, all)
	}
	var versions []int
	rows, err := db.Query(`SELECT version FROM schema_migrations ORDER BY version`)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var v int
		rows.Scan(&v)
		versions = append(versions, v)
	}
	rows.Close()
	if !slices.Equal(versions, []int{1, 2, 3}) {
		t.Errorf("schema_migrations = %v; want [1 2 3]", versions)
	}

	// Down to nothing and up again: the down files undo the up files exactly.
	if err := sqlstore.Migrate(t.Context(), db, dialect, migrations, 1); err != nil {
		t.Fatalf("Migrate(1): %v", err)
	}
	if got, want := tables(t, db), []string{"batteries", "battery_labels", "battery_types", "schema_migrations", "store_meta", "store_versions"}; !slices.Equal(got, want) {
		t.Errorf("tables at version 1 = %v; want %v", got, want)
	}
	if err := sqlstore.Migrate(t.Context(), db, dialect, migrations, 0); err != nil {
		t.Fatalf("Migrate(0): %v", err)
	}
	if got := tables(t, db); !slices.Equal(got, []string{"schema_migrations"}) {
		t.Errorf("tables at version 0 = %v; want [schema_migrations]", got)
	}
	if err := sqlstore.Migrate(t.Context(), db, dialect, migrations, sqlstore.Latest); err != nil {
		t.Fatalf("Migrate(latest): %v", err)
	}
	if got := tables(t, db); !slices.Equal(got, all) {
		t.Errorf("tables after down and up = %v; want %v", got, all)
	}
	if err := sqlstore.Migrate(t.Context(), db, dialect, migrations, 4); err == nil {
		t.Errorf("Migrate(4) of 3 migrations: no error")
	}

	// A newer binary's migration is left alone by this one, but cannot be undone by it.
	if _, err := db.Exec(`INSERT INTO schema_migrations (version, name, applied_time) VALUES (4, 'future', 'x')`); err != nil {
		t.Fatal(err)
	}
	s, err = Open(t.Context(), path, nil)
	if err != nil {
		t.Fatalf("Open(database at a newer version): %v", err)
	}
	s.Close()
	if err := sqlstore.Migrate(t.Context(), db, dialect, migrations, 2); err == nil {
		t.Errorf("Migrate(2) from unknown version 4: no error")
	}
}

// TestConcurrentOpen starts several stores on one new file at once, as processes
// starting together would: the migration runs once and every store works.
func TestConcurrentOpen(t *testing.T) {
	path := filepath.Join(t.TempDir(), "c.db")
	const n = 4
	var (
		wg     sync.WaitGroup
		stores [n]store.Store
		errs   [n]error
	)
	for i := range n {
		wg.Go(func() { stores[i], errs[i] = Open(t.Context(), path, nil) })
	}
	wg.Wait()
	for i := range n {
		if errs[i] != nil {
			t.Fatalf("Open %d: %v", i, errs[i])
		}
		defer stores[i].Close()
	}
	for i := range n {
		if err := stores[i].Ping(t.Context()); err != nil {
			t.Errorf("Ping %d: %v", i, err)
		}
	}
}
