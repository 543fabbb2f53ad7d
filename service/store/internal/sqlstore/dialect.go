package sqlstore

import (
	"fmt"
	"time"
)

// Dialect is what differs between SQL backends.
type Dialect struct {
	// Name prefixes error messages, e.g. "sqlite".
	Name string
	// NextVersion is an SQL expression that yields a fresh store-wide version, larger
	// than every version handed out before.
	NextVersion string
	// TimeArg converts a non-zero UTC time with microsecond resolution into a query
	// argument for a time column.
	TimeArg func(time.Time) any
	// IsUniqueViolation reports whether err is a unique or primary-key violation.
	IsUniqueViolation func(err error) bool
	// IsForeignKeyViolation reports whether err is a foreign-key violation.
	IsForeignKeyViolation func(err error) bool
	// Rebind, when not nil, rewrites every query before it is sent (queries are
	// written with $1, $2, … placeholders).
	Rebind func(query string) string
	// Param returns the placeholder of argument n (from 1) in a statement that uses
	// each argument once, in order. Bulk statements use it: SQLite binds anonymous "?"
	// in constant time each, but looks up a numbered parameter's name by a linear
	// search, which makes binding thousands of them quadratic.
	Param func(n int) string
	// MigrationLock, when not empty, is executed first in the migration transaction to
	// keep concurrent starters from migrating at the same time.
	MigrationLock string
}

// timeCol scans a time column stored either as microseconds since the Unix epoch
// (an integer) or as a native timestamp; NULL scans as the zero time.
type timeCol struct{ dst *time.Time }

// Scan implements [database/sql.Scanner].
func (c timeCol) Scan(v any) error {
	switch x := v.(type) {
	case nil:
		*c.dst = time.Time{}
	case int64:
		*c.dst = time.UnixMicro(x).UTC()
	case time.Time:
		*c.dst = x.UTC()
	default:
		return fmt.Errorf("sqlstore: cannot scan %T into a time", v)
	}
	return nil
}

// timeArg returns the argument for t: NULL for the zero time.
func (s *Store) timeArg(t time.Time) any {
	if t.IsZero() {
		return nil
	}
	return s.d.TimeArg(t)
}

// nullString returns NULL for "" and s otherwise (for optional unique columns).
func nullString(s string) any {
	if s == "" {
		return nil
	}
	return s
}

// nullBlob returns NULL for an empty blob.
func nullBlob(b []byte) any {
	if len(b) == 0 {
		return nil
	}
	return b
}
