package sqlstore

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io/fs"
	"regexp"
	"slices"
	"strconv"
	"time"
)

// Latest as a migration target means the newest migration there is.
const Latest = -1

// Migration is one numbered schema change with its inverse.
type Migration struct {
	Version  int
	Name     string
	Up, Down string
}

var migrationFile = regexp.MustCompile(`^(\d{4})_([a-z0-9_]+)\.(up|down)\.sql$`)

// LoadMigrations reads the migrations at the root of fsys: files named
// NNNN_name.up.sql and NNNN_name.down.sql, numbered 1, 2, 3, … without gaps, each
// with both directions.
func LoadMigrations(fsys fs.FS) ([]Migration, error) {
	entries, err := fs.ReadDir(fsys, ".")
	if err != nil {
		return nil, fmt.Errorf("read migrations: %w", err)
	}
	byVersion := map[int]*Migration{}
	for _, e := range entries {
		m := migrationFile.FindStringSubmatch(e.Name())
		if m == nil {
			return nil, fmt.Errorf("read migrations: unexpected file %q", e.Name())
		}
		v, _ := strconv.Atoi(m[1])
		body, err := fs.ReadFile(fsys, e.Name())
		if err != nil {
			return nil, fmt.Errorf("read migrations: %w", err)
		}
		mg := byVersion[v]
		if mg == nil {
			mg = &Migration{Version: v, Name: m[2]}
			byVersion[v] = mg
		}
		if mg.Name != m[2] {
			return nil, fmt.Errorf("read migrations: version %d has two names, %q and %q", v, mg.Name, m[2])
		}
		if m[3] == "up" {
			mg.Up = string(body)
		} else {
			mg.Down = string(body)
		}
	}
	out := make([]Migration, 0, len(byVersion))
	for v := 1; v <= len(byVersion); v++ {
		mg := byVersion[v]
		switch {
		case mg == nil:
			return nil, fmt.Errorf("read migrations: version %d missing", v)
		case mg.Up == "" || mg.Down == "":
			return nil, fmt.Errorf("read migrations: version %d needs both an up and a down file", v)
		}
		out = append(out, *mg)
	}
	return out, nil
}

// Migrate brings the schema of db to version target ([Latest] for the newest) in one
// transaction, applying up or down migrations from fsys in order and recording each in
// the table schema_migrations. A database already migrated further by a newer binary is
// left alone when going up; going down below such a version is refused.
func Migrate(ctx context.Context, pool *sql.DB, d Dialect, fsys fs.FS, target int) (err error) {
	ms, err := LoadMigrations(fsys)
	if err != nil {
		return err
	}
	toLatest := target == Latest
	if toLatest {
		target = len(ms)
	}
	if target < 0 || target > len(ms) {
		return fmt.Errorf("migrate: target version %d outside 0 to %d", target, len(ms))
	}
	rebind := d.Rebind
	if rebind == nil {
		rebind = identity
	}
	tx, err := db{pool, rebind}.BeginTx(ctx, nil)
	if err != nil {
		return fmt.Errorf("migrate: begin: %w", err)
	}
	defer func() {
		if err != nil {
			err = errors.Join(err, ignoreDone(tx.Rollback()))
		}
	}()
	if d.MigrationLock != "" {
		if _, err := tx.ExecContext(ctx, d.MigrationLock); err != nil {
			return fmt.Errorf("migrate: lock: %w", err)
		}
	}
	if _, err := tx.ExecContext(ctx, `CREATE TABLE IF NOT EXISTS schema_migrations (
		version      BIGINT PRIMARY KEY,
		name         TEXT NOT NULL,
		applied_time TEXT NOT NULL
	)`); err != nil {
		return fmt.Errorf("migrate: create schema_migrations: %w", err)
	}
	applied, err := appliedVersions(ctx, tx)
	if err != nil {
		return err
	}
	current := 0
	if len(applied) > 0 {
		current = applied[len(applied)-1]
	}
	for i, v := range applied {
		if v != i+1 {
			return fmt.Errorf("migrate: applied versions %v are not 1 to %d", applied, len(applied))
		}
	}
	if current > len(ms) && toLatest {
		target = current // a newer binary migrated further: leave its schema alone
	}
	if current > len(ms) && target < current {
		return fmt.Errorf("migrate: database is at version %d, newer than this binary's %d", current, len(ms))
	}
	for v := current + 1; v <= target; v++ {
		m := ms[v-1]
		if _, err := tx.ExecContext(ctx, m.Up); err != nil {
			return fmt.Errorf("migrate: up %04d_%s: %w", v, m.Name, err)
		}
		if _, err := tx.ExecContext(ctx,
			`INSERT INTO schema_migrations (version, name, applied_time) VALUES ($1, $2, $3)`,
			v, m.Name, time.Now().UTC().Format(time.RFC3339Nano)); err != nil {
			return fmt.Errorf("migrate: record %04d_%s: %w", v, m.Name, err)
		}
	}
	for v := current; v > target; v-- {
		m := ms[v-1]
		if _, err := tx.ExecContext(ctx, m.Down); err != nil {
			return fmt.Errorf("migrate: down %04d_%s: %w", v, m.Name, err)
		}
		if _, err := tx.ExecContext(ctx, `DELETE FROM schema_migrations WHERE version = $1`, v); err != nil {
			return fmt.Errorf("migrate: unrecord %04d_%s: %w", v, m.Name, err)
		}
	}
	if err := tx.Commit(); err != nil {
		return fmt.Errorf("migrate: commit: %w", err)
	}
	return nil
}

func appliedVersions(ctx context.Context, tx tx) ([]int, error) {
	rows, err := tx.QueryContext(ctx, `SELECT version FROM schema_migrations ORDER BY version`)
	if err != nil {
		return nil, fmt.Errorf("migrate: read schema_migrations: %w", err)
	}
	defer rows.Close()
	var vs []int
	for rows.Next() {
		var v int
		if err := rows.Scan(&v); err != nil {
			return nil, fmt.Errorf("migrate: read schema_migrations: %w", err)
		}
		vs = append(vs, v)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("migrate: read schema_migrations: %w", err)
	}
	return slices.Clip(vs), nil
}

// ignoreDone drops the error a rollback returns after the transaction already ended.
func ignoreDone(err error) error {
	if errors.Is(err, sql.ErrTxDone) {
		return nil
	}
	return err
}
