// Package postgres is the [store.Store] for several replicas: PostgreSQL through pgx,
// selected by a DSN.
//
// # Driver
//
// The store runs pgx behind database/sql (package pgx/v5/stdlib) rather than
// pgxpool, so that one SQL implementation, shared with the SQLite store, serves both
// backends and the contract suite tests the same code twice. pgx still talks the
// binary protocol and keeps a prepared-statement cache per connection; database/sql
// pools the connections.
//
// # Concurrency
//
// Statements run at READ COMMITTED. Every compare-and-swap is a single UPDATE whose
// WHERE clause checks the version: a concurrent writer of the same row waits for the
// row lock, then re-checks the condition against the committed row, so exactly one of
// two racing writers wins and the other gets [store.ErrConflict]. Versions come from
// the sequence store_versions. Migrations run in one transaction under an advisory
// lock per schema, so replicas that start together migrate once.
//
// # Schema
//
// The numbered migrations in migrations/ are embedded in the binary and applied by
// [Open]; the table schema_migrations records them. The tables live in the first
// schema of the connection's search_path (set it in the DSN, or with
// [Options.Schema]).
package postgres

import (
	"context"
	"embed"
	"errors"
	"fmt"
	"strconv"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/stdlib"

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
	// Schema, when set, is the schema that holds the store's tables (it replaces the
	// DSN's search_path). It must exist.
	Schema string
	// MaxConns is the most open connections. Default 10.
	MaxConns int
	// ConnMaxLifetime closes connections older than this, so that they spread over
	// new server instances after a failover. Default 30 min.
	ConnMaxLifetime time.Duration
}

func (o *Options) withDefaults() Options {
	var d Options
	if o != nil {
		d = *o
	}
	if d.MaxConns <= 0 {
		d.MaxConns = 10
	}
	if d.ConnMaxLifetime <= 0 {
		d.ConnMaxLifetime = 30 * time.Minute
	}
	return d
}

// dialect is the PostgreSQL dialect of the shared implementation.
var dialect = sqlstore.Dialect{
	Name:                  "postgres",
	NextVersion:           `nextval('store_versions')`,
	TimeArg:               func(t time.Time) any { return t },
	Param:                 func(n int) string { return "$" + strconv.Itoa(n) },
	IsUniqueViolation:     func(err error) bool { return hasCode(err, "23505") },
	IsForeignKeyViolation: func(err error) bool { return hasCode(err, "23503") },
	MigrationLock:         `SELECT pg_advisory_xact_lock(hashtext('voltcast store migrations ' || coalesce(current_schema(), '')))`,
}

// hasCode reports whether err is a PostgreSQL error with that SQLSTATE.
func hasCode(err error, code string) bool {
	var e *pgconn.PgError
	return errors.As(err, &e) && e.Code == code
}

// Open connects to the PostgreSQL server that dsn names (a URL such as
// postgres://user@host:5432/db?sslmode=disable, or key=value pairs), migrates the
// schema to the newest version and returns a store on it. The store is safe for
// concurrent use; Close it when done. Errors never repeat the DSN, which may hold a
// password.
func Open(ctx context.Context, dsn string, opts *Options) (store.Store, error) {
	o := opts.withDefaults()
	cfg, err := pgx.ParseConfig(dsn)
	if err != nil {
		return nil, fmt.Errorf("postgres: parse DSN: %w", err)
	}
	if o.Schema != "" {
		if !validSchema(o.Schema) {
			return nil, fmt.Errorf("postgres: schema %q: want lowercase letters, digits and '_'", o.Schema)
		}
		cfg.RuntimeParams["search_path"] = o.Schema
	}
	db := stdlib.OpenDB(*cfg)
	db.SetMaxOpenConns(o.MaxConns)
	db.SetMaxIdleConns(o.MaxConns)
	db.SetConnMaxLifetime(o.ConnMaxLifetime)
	if err := db.PingContext(ctx); err != nil {
		return nil, errors.Join(fmt.Errorf("postgres: connect to %s:%d: %w", cfg.Host, cfg.Port, err), db.Close())
	}
	s, err := sqlstore.Open(ctx, sqlstore.Config{Dialect: dialect, Read: db, Write: db, Migrations: migrations})
	if err != nil {
		return nil, errors.Join(err, db.Close())
	}
	return s, nil
}

// validSchema reports whether name is a plain lowercase identifier, safe to use
// unquoted.
func validSchema(name string) bool {
	if name == "" || len(name) > 63 || name[0] < 'a' || name[0] > 'z' {
		return false
	}
	for i := 0; i < len(name); i++ {
		c := name[i]
		if !('a' <= c && c <= 'z' || '0' <= c && c <= '9' || c == '_') {
			return false
		}
	}
	return true
}
