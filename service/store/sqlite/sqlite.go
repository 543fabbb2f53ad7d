// Package sqlite is the embedded [store.Store]: one SQLite file, no server, a pure-Go
// driver (modernc.org/sqlite).
//
// # Connections
//
// The file runs in WAL mode, so readers never block the writer nor the writer the
// readers. SQLite allows one writer at a time, so the store keeps exactly one write
// connection (writes queue for it in-process instead of failing with SQLITE_BUSY) and
// a small pool of read-only connections. Write transactions begin IMMEDIATE, so a
// transaction that reads before it writes can never deadlock against another process
// on the same file; busy_timeout makes such a process wait instead of failing. Foreign
// keys are enforced (they cascade a battery's deletion to its state and history).
//
// # Durability
//
// synchronous=FULL: a write is on disk when its call returns, so a power loss after a
// successful PutState keeps it (see the package doc of
// [github.com/voltcast/voltcast/service/store] for what a crash can lose).
//
// # Schema
//
// The numbered migrations in migrations/ are embedded in the binary and applied by
// [Open] inside one transaction; the table schema_migrations records them.
package sqlite

import (
	"context"
	"database/sql"
	"embed"
	"errors"
	"fmt"
	"net/url"
	"strings"
	"time"

	"modernc.org/sqlite"
	sqlite3 "modernc.org/sqlite/lib"

	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/internal/sqlstore"
)

//go:embed migrations/*.sql
var migrationFiles embed.FS

// migrations holds the embedded migration files: NNNN_name.up.sql and
// NNNN_name.down.sql.
var migrations = sqlstore.MustSub(migrationFiles, "migrations")

// Options tunes [Open]. The zero value (or nil) gives the defaults.
type Options struct {
	// BusyTimeout is how long a connection waits for a lock that another process
	// holds on the same file. Default 5 s.
	BusyTimeout time.Duration
	// Readers is the number of read-only connections. Default 4.
	Readers int
}

func (o *Options) withDefaults() Options {
	var d Options
	if o != nil {
		d = *o
	}
	if d.BusyTimeout <= 0 {
		d.BusyTimeout = 5 * time.Second
	}
	if d.Readers <= 0 {
		d.Readers = 4
	}
	return d
}

// dialect is the SQLite dialect of the shared implementation: times are stored as
// integer microseconds since the Unix epoch, and versions come from the
// store_versions row that triggers advance.
var dialect = sqlstore.Dialect{
	Name:        "sqlite",
	NextVersion: `(SELECT value + 1 FROM store_versions WHERE id = 1)`,
	TimeArg:     func(t time.Time) any { return t.UnixMicro() },
	Rebind:      sqlstore.QuestionNumbered,
	Param:       func(int) string { return "?" },
	IsUniqueViolation: func(err error) bool {
		return hasCode(err, sqlite3.SQLITE_CONSTRAINT_UNIQUE, sqlite3.SQLITE_CONSTRAINT_PRIMARYKEY)
	},
	IsForeignKeyViolation: func(err error) bool { return hasCode(err, sqlite3.SQLITE_CONSTRAINT_FOREIGNKEY) },
}

func hasCode(err error, codes ...int) bool {
	var e *sqlite.Error
	if !errors.As(err, &e) {
		return false
	}
	for _, c := range codes {
		if e.Code() == c {
			return true
		}
	}
	return false
}

// Open opens (creating if needed) the SQLite database file at path, migrates it to
// the newest schema and returns a store on it. The directory must exist. The store
// is safe for concurrent use; Close it when done.
func Open(ctx context.Context, path string, opts *Options) (store.Store, error) {
	o := opts.withDefaults()
	if path == "" || strings.ContainsRune(path, '?') || strings.HasPrefix(path, "file:") || path == ":memory:" {
		return nil, fmt.Errorf("sqlite: open %q: want a plain file path", path)
	}
	write, err := sql.Open("sqlite", dsn(path, o, true))
	if err != nil {
		return nil, fmt.Errorf("sqlite: open %q: %w", path, err)
	}
	// One writer: SQLite serialises writes anyway, and queueing in the pool waits with
	// the caller's context instead of spinning on SQLITE_BUSY.
	write.SetMaxOpenConns(1)
	write.SetMaxIdleConns(1)
	write.SetConnMaxLifetime(0)

	read, err := sql.Open("sqlite", dsn(path, o, false))
	if err != nil {
		return nil, errors.Join(fmt.Errorf("sqlite: open %q: %w", path, err), write.Close())
	}
	read.SetMaxOpenConns(o.Readers)
	read.SetMaxIdleConns(o.Readers)
	read.SetConnMaxLifetime(0)

	s, err := sqlstore.Open(ctx, sqlstore.Config{Dialect: dialect, Read: read, Write: write, Migrations: migrations})
	if err != nil {
		return nil, errors.Join(fmt.Errorf("%w (file %q)", err, path), write.Close(), read.Close())
	}
	return s, nil
}

// dsn returns the driver's data source name for the file at path: the write
// connection, or a read-only one.
func dsn(path string, o Options, write bool) string {
	q := url.Values{}
	q.Add("_pragma", fmt.Sprintf("busy_timeout(%d)", o.BusyTimeout.Milliseconds()))
	q.Add("_pragma", "foreign_keys(1)")
	q.Add("_pragma", "synchronous(FULL)")
	if write {
		q.Add("_pragma", "journal_mode(WAL)")
		q.Set("_txlock", "immediate")
	} else {
		q.Add("_pragma", "query_only(1)")
	}
	return path + "?" + q.Encode()
}
