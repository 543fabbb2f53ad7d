package sqlstore

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// Config is what [Open] needs.
type Config struct {
	// Dialect describes the backend.
	Dialect Dialect
	// Read serves reads outside transactions; Write serves writes and transactions.
	// They may be the same pool. Store.Close closes both.
	Read, Write *sql.DB
	// Migrations holds the backend's migration files (see [LoadMigrations]).
	Migrations fs.FS
}

// Store implements [store.Store] over database/sql. It is safe for concurrent use.
type Store struct {
	d           Dialect
	read, write db
	tokenKey    []byte
}

var _ store.Store = (*Store)(nil)

// Open migrates the database to the newest schema and returns a Store on it. On
// error the caller still owns the pools and must close them.
func Open(ctx context.Context, cfg Config) (*Store, error) {
	rebind := cfg.Dialect.Rebind
	if rebind == nil {
		rebind = identity
	}
	s := &Store{d: cfg.Dialect, read: db{cfg.Read, rebind}, write: db{cfg.Write, rebind}}
	if err := Migrate(ctx, cfg.Write, cfg.Dialect, cfg.Migrations, Latest); err != nil {
		return nil, fmt.Errorf("%s: open: %w", cfg.Dialect.Name, err)
	}
	key, err := loadTokenKey(ctx, s.write)
	if err != nil {
		return nil, fmt.Errorf("%s: open: %w", cfg.Dialect.Name, err)
	}
	s.tokenKey = key
	return s, nil
}

// Ping implements [store.Store].
func (s *Store) Ping(ctx context.Context) error {
	for _, db := range s.pools() {
		if err := db.PingContext(ctx); err != nil {
			return s.fail(ctx, "ping", err)
		}
	}
	return nil
}

// Close implements [store.Store].
func (s *Store) Close() error {
	var errs []error
	for _, db := range s.pools() {
		errs = append(errs, db.Close())
	}
	if err := errors.Join(errs...); err != nil {
		return fmt.Errorf("%s: close: %w", s.d.Name, err)
	}
	return nil
}

func (s *Store) pools() []*sql.DB {
	if s.read.DB == s.write.DB {
		return []*sql.DB{s.write.DB}
	}
	return []*sql.DB{s.write.DB, s.read.DB}
}

// fail wraps err with the backend name and the operation, and with the context's
// error when the context has ended (drivers do not all wrap it themselves).
func (s *Store) fail(ctx context.Context, op string, err error) error {
	if cerr := ctx.Err(); cerr != nil && !errors.Is(err, cerr) {
		err = fmt.Errorf("%w: %w", cerr, err)
	}
	return fmt.Errorf("%s: %s: %w", s.d.Name, op, err)
}

// MustSub returns the subdirectory dir of an embedded file system; it panics if dir
// is not a valid path, which is a programming error.
func MustSub(fsys fs.FS, dir string) fs.FS {
	sub, err := fs.Sub(fsys, dir)
	if err != nil {
		panic("sqlstore: " + err.Error())
	}
	return sub
}

// now returns the current time as the store keeps it.
func now() time.Time { return normTime(time.Now()) }

// queryer is a pool or a transaction.
type queryer interface {
	QueryRowContext(ctx context.Context, query string, args ...any) *sql.Row
}

// inTx runs fn in a write transaction and commits it, or rolls it back when fn fails.
func (s *Store) inTx(ctx context.Context, fn func(tx tx) error) (err error) {
	tx, err := s.write.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("begin: %w", err)
	}
	defer func() {
		if err != nil {
			err = errors.Join(err, ignoreDone(tx.Rollback()))
		}
	}()
	if err := fn(tx); err != nil {
		return err
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("commit: %w", err)
	}
	return nil
}

// missingOrMoved says why a versioned write matched no row: the row is missing
// ([store.ErrNotFound]) or its version moved ([store.ErrConflict]).
func missingOrMoved(ctx context.Context, q queryer, query string, args ...any) error {
	ok, err := exists(ctx, q, query, args...)
	switch {
	case err != nil:
		return err
	case !ok:
		return store.ErrNotFound
	}
	return store.ErrConflict
}

// exists reports whether query returns a row.
func exists(ctx context.Context, q queryer, query string, args ...any) (bool, error) {
	var v any
	switch err := q.QueryRowContext(ctx, query, args...).Scan(&v); {
	case errors.Is(err, sql.ErrNoRows):
		return false, nil
	case err != nil:
		return false, err
	}
	return true, nil
}

// versionCond returns the condition on the version column for an expected version
// passed as argument number n, or "" for [store.AnyVersion].
func versionCond(expected int64, n int) string {
	if expected == store.AnyVersion {
		return ""
	}
	return fmt.Sprintf(" AND version = $%d", n)
}

// precheck returns the context's error, or else the first error of checking the
// tenant and of errs.
func precheck(ctx context.Context, tenant string, errs ...error) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if err := checkTenant(tenant); err != nil {
		return err
	}
	for _, err := range errs {
		if err != nil {
			return err
		}
	}
	return nil
}

// deleteRow deletes the row of table whose column keyCol is key, if its version is
// expected (or expected is [store.AnyVersion]).
func (s *Store) deleteRow(ctx context.Context, table, keyCol, tenant, key string, expected int64) error {
	args := []any{tenant, key}
	if expected != store.AnyVersion {
		args = append(args, expected)
	}
	where := ` WHERE tenant = $1 AND ` + keyCol + ` = $2`
	res, err := s.write.ExecContext(ctx, `DELETE FROM `+table+where+versionCond(expected, 3), args...)
	if err != nil {
		return err
	}
	n, err := res.RowsAffected()
	switch {
	case err != nil:
		return err
	case n == 0:
		return missingOrMoved(ctx, s.write, `SELECT version FROM `+table+where, tenant, key)
	}
	return nil
}

// replayOrExists completes a create whose INSERT … ON CONFLICT DO NOTHING RETURNING
// ended with insertErr. It returns nil, nil when the row was inserted. When nothing
// was inserted it returns the row of table (read with cols and scan) that an earlier
// call with the same requestID created (AIP-155), or else [store.ErrAlreadyExists].
func replayOrExists[T any](ctx context.Context, q queryer, insertErr error, table, cols, tenant, requestID string,
	scan func(scanner) (T, error)) (*T, error) {
	switch {
	case insertErr == nil:
		return nil, nil
	case !errors.Is(insertErr, sql.ErrNoRows):
		return nil, insertErr
	}
	if requestID != "" {
		prev, err := scan(q.QueryRowContext(ctx, `SELECT `+cols+` FROM `+table+` WHERE tenant = $1 AND request_id = $2`, tenant, requestID))
		switch {
		case err == nil:
			return &prev, nil
		case !errors.Is(err, sql.ErrNoRows):
			return nil, fmt.Errorf("look up request id: %w", err)
		}
	}
	return nil, store.ErrAlreadyExists
}

func checkExpected(v int64) error {
	if v < 0 {
		return invalidf("expected version %d is negative", v)
	}
	return nil
}
