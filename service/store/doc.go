// Package store defines what the voltcast service keeps between requests and the
// interface its storage backends implement.
//
// Two implementations exist: [github.com/voltcast/voltcast/service/store/sqlite] (the
// embedded default: one file, no server) and
// [github.com/voltcast/voltcast/service/store/postgres] (shared by several replicas).
// Both pass the same contract suite in
// [github.com/voltcast/voltcast/service/store/storetest].
//
// # What is stored
//
//   - Battery types that users register: a name, a chemistry and an opaque JSON
//     parameter set. The built-in catalogue is not stored; a battery may name a
//     built-in type that this store has never seen.
//   - Batteries (packs in the field): type, series/parallel counts, display name, labels.
//   - One tracked estimator state per battery: an opaque JSON blob written by the
//     estimator, summary columns for listing, and the ingest watermark.
//   - A compact health history per battery (capacity and resistance factors over time).
//     This is not a time-series database: raw telemetry samples are never stored.
//   - Calibration runs: the submitted input, status, report and resulting type.
//
// The store never interprets the JSON blobs beyond checking that they are valid JSON;
// their schema belongs to the model packages. It imports no protobuf.
//
// # Tenants
//
// Every method takes a tenant id and every row carries it in its primary key, so a
// tenant can neither read nor change another tenant's rows: a row of another tenant is
// reported as [ErrNotFound], exactly like a row that does not exist. Until
// authentication lands the service uses [DefaultTenant].
//
// # Versions and compare-and-swap
//
// Every stored resource carries a Version. Versions are opaque positive integers drawn
// from one store-wide counter: strictly increasing, never reused, not even after a
// resource is deleted and re-created with the same id, so a version held by a stale
// writer can never match by accident. Writes that take an expected version succeed only
// when the stored version still equals it and fail with [ErrConflict] otherwise; an
// expected version of [AnyVersion] skips the check where a method allows it.
// [States.PutState] always checks: two replicas holding the same battery can never
// silently overwrite each other, and the loser re-reads and retries.
//
// # Watermarks and idempotent ingest
//
// A stored [State] carries a [Watermark]: the sequence number and sample time of the
// last telemetry sample folded into it. The watermark is written in the same row, in
// the same statement, as the estimator blob, so the two can never disagree. The
// watermark never moves backwards ([States.PutState] rejects such a write with
// [ErrInvalidArgument]). An ingest pipeline skips every sample at or below the durable
// watermark as a duplicate, so a batch that is resent after a failure is applied once.
//
// # What a crash can lose
//
// The service keeps each active battery's estimator in memory and writes it here
// write-behind (on stream close, on shutdown, and every configured interval or number
// of samples), one battery with [States.PutState] or many in one transaction with
// [States.PutStates]. A successful write is durable: SQLite commits with synchronous=FULL in
// WAL mode and PostgreSQL with its commit guarantee, so it survives a process crash and,
// given honest disks, a power loss. A crash of the service therefore loses at most the
// samples applied in memory after the last successful PutState, i.e. those above the
// durable watermark. The service reports that watermark to clients, and a client that
// resends everything above it loses nothing. Health records are keyed by battery and
// time, so records written again during such a replay replace themselves instead of
// piling up.
//
// # Times, pages and limits
//
// Stored times are UTC with microsecond resolution; finer parts are truncated on the
// way in, and the zero time means "not set". List methods return pages in a stable
// order (by id) with an opaque page token; tokens are bound to the tenant, the list and
// its filter, and are authenticated with a key kept in the database, so a forged,
// altered or misapplied token fails with [ErrInvalidPageToken]. Limits on sizes are the
// exported constants of this package; arguments outside them fail with
// [ErrInvalidArgument] and nothing is stored.
//
// # Errors
//
// Errors wrap one of the sentinels below where one applies (inspect them with
// [errors.Is]), and wrap the context's error when the context ended. Anything else is a
// backend failure. A write cut short by its context or a lost connection may or may
// not have taken effect (the commit can race the cancellation), but never in part;
// re-read before retrying. The store does not log.
package store
