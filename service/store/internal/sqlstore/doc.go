// Package sqlstore implements [store.Store] once, over database/sql, for every SQL
// backend. A [Dialect] holds the few things that differ (how a new version is drawn,
// how times are bound, how constraint violations look); the sqlite and postgres
// packages supply one each, together with their connection setup and migrations.
//
// # Queries
//
// Queries use $1, $2, … placeholders, which PostgreSQL takes natively and SQLite
// takes as numbered parameters. Every compare-and-swap is one statement: an UPDATE
// whose WHERE clause checks the expected version (and, for states, that the watermark
// does not move backwards), with RETURNING giving the new version. When it matches no
// row a second read says why (missing, version moved, watermark behind); that read
// races with other writers only in which of those errors it reports.
package sqlstore
