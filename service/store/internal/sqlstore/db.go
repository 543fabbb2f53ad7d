package sqlstore

import (
	"context"
	"database/sql"
)

// db is a pool whose queries go through the dialect's Rebind.
type db struct {
	*sql.DB
	rebind func(string) string
}

// QueryRowContext is [sql.DB.QueryRowContext] on the rebound query.
func (d db) QueryRowContext(ctx context.Context, query string, args ...any) *sql.Row {
	return d.DB.QueryRowContext(ctx, d.rebind(query), args...)
}

// QueryContext is [sql.DB.QueryContext] on the rebound query.
func (d db) QueryContext(ctx context.Context, query string, args ...any) (*sql.Rows, error) {
	return d.DB.QueryContext(ctx, d.rebind(query), args...)
}

// ExecContext is [sql.DB.ExecContext] on the rebound query.
func (d db) ExecContext(ctx context.Context, query string, args ...any) (sql.Result, error) {
	return d.DB.ExecContext(ctx, d.rebind(query), args...)
}

// BeginTx is [sql.DB.BeginTx], returning a transaction that rebinds too.
func (d db) BeginTx(ctx context.Context, opts *sql.TxOptions) (tx, error) {
	t, err := d.DB.BeginTx(ctx, opts)
	return tx{t, d.rebind}, err
}

// tx is a transaction whose queries go through the dialect's Rebind.
type tx struct {
	*sql.Tx
	rebind func(string) string
}

// QueryRowContext is [sql.Tx.QueryRowContext] on the rebound query.
func (t tx) QueryRowContext(ctx context.Context, query string, args ...any) *sql.Row {
	return t.Tx.QueryRowContext(ctx, t.rebind(query), args...)
}

// QueryContext is [sql.Tx.QueryContext] on the rebound query.
func (t tx) QueryContext(ctx context.Context, query string, args ...any) (*sql.Rows, error) {
	return t.Tx.QueryContext(ctx, t.rebind(query), args...)
}

// ExecContext is [sql.Tx.ExecContext] on the rebound query.
func (t tx) ExecContext(ctx context.Context, query string, args ...any) (sql.Result, error) {
	return t.Tx.ExecContext(ctx, t.rebind(query), args...)
}

func identity(s string) string { return s }

// QuestionNumbered rewrites the placeholders $1, $2, … as ?1, ?2, … It is the Rebind
// for SQLite, which looks up "$NNN" parameters by name (a linear search each, so a
// statement with thousands of them takes quadratic time) but takes "?NNN" as plain
// numbers. The queries of this package contain no '$' in literals.
func QuestionNumbered(q string) string {
	b := []byte(q)
	for i := 0; i+1 < len(b); i++ {
		if b[i] == '$' && '0' <= b[i+1] && b[i+1] <= '9' {
			b[i] = '?'
		}
	}
	return string(b)
}
