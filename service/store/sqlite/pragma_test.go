package sqlite

import (
	"database/sql"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestConnectionSettings checks that the connections Open makes run with the settings
// the package doc promises.
func TestConnectionSettings(t *testing.T) {
	path := filepath.Join(t.TempDir(), "p.db")
	openPath(t, path)
	o := (*Options)(nil).withDefaults()
	for _, tc := range []struct {
		write bool
		want  map[string]string
	}{
		// synchronous 2 = FULL; query_only only on readers.
		{true, map[string]string{"journal_mode": "wal", "synchronous": "2", "foreign_keys": "1", "busy_timeout": "5000", "query_only": "0"}},
		{false, map[string]string{"journal_mode": "wal", "synchronous": "2", "foreign_keys": "1", "busy_timeout": "5000", "query_only": "1"}},
	} {
		db, err := sql.Open("sqlite", dsn(path, o, tc.write))
		if err != nil {
			t.Fatal(err)
		}
		for pragma, want := range tc.want {
			var got string
			if err := db.QueryRow("PRAGMA " + pragma).Scan(&got); err != nil {
				t.Fatalf("PRAGMA %s: %v", pragma, err)
			}
			if strings.ToLower(got) != want {
				t.Errorf("write %v: PRAGMA %s = %s; want %s", tc.write, pragma, got, want)
			}
		}
		if _, err := db.Exec(`INSERT INTO store_meta (key, value) VALUES ('probe', x'00')`); (err == nil) != tc.write {
			t.Errorf("write %v: insert error %v", tc.write, err)
		}
		db.Close()
	}
}

func TestOpenBadPaths(t *testing.T) {
	for _, p := range []string{"", ":memory:", "file:x.db", "x.db?mode=ro", filepath.Join(t.TempDir(), "missing-dir", "x.db")} {
		if s, err := Open(t.Context(), p, nil); err == nil {
			s.Close()
			t.Errorf("Open(%q): no error", p)
		}
	}
	// A file that is not a database.
	junk := filepath.Join(t.TempDir(), "junk.db")
	if err := os.WriteFile(junk, []byte(strings.Repeat("not a database ", 100)), 0o600); err != nil {
		t.Fatal(err)
	}
	if s, err := Open(t.Context(), junk, nil); err == nil {
		s.Close()
		t.Errorf("Open(junk file): no error")
	}
}
