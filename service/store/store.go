package store

import (
	"context"
	"time"
)

// DefaultTenant is the tenant used until authentication assigns real ones.
const DefaultTenant = "default"

// AnyVersion as an expected version skips the compare-and-swap check in the methods
// that allow it ([Batteries.UpdateBattery], [Batteries.DeleteBattery],
// [BatteryTypes.DeleteBatteryType], [Calibrations.UpdateCalibration],
// [Calibrations.DeleteCalibration]). For
// [States.PutState] it means "no state stored yet".
const AnyVersion int64 = 0

// Store is everything the service keeps. Implementations are safe for concurrent use.
type Store interface {
	BatteryTypes
	Batteries
	States
	Health
	Calibrations

	// Ping reports whether the backend answers; readiness checks call it with a short
	// timeout.
	Ping(ctx context.Context) error
	// Close releases the backend's connections. Calls after Close fail.
	Close() error
}

// BatteryTypes keeps the battery types users register.
type BatteryTypes interface {
	// CreateBatteryType stores t under t.Name and returns it with its output-only fields
	// set. A non-empty requestID makes the call idempotent (AIP-155): repeating it
	// returns the type the first call created instead of failing with
	// [ErrAlreadyExists].
	CreateBatteryType(ctx context.Context, tenant string, t BatteryType, requestID string) (BatteryType, error)
	// GetBatteryType returns the type with that name, or [ErrNotFound].
	GetBatteryType(ctx context.Context, tenant, name string) (BatteryType, error)
	// ListBatteryTypes returns one page of types ordered by name, and the token of the
	// next page ("" after the last page).
	ListBatteryTypes(ctx context.Context, tenant string, page PageRequest) ([]BatteryType, string, error)
	// DeleteBatteryType deletes the type if its version equals expectedVersion (or
	// expectedVersion is [AnyVersion]). It fails with [ErrInUse] while batteries of the
	// tenant refer to the type.
	DeleteBatteryType(ctx context.Context, tenant, name string, expectedVersion int64) error
}

// Batteries keeps the packs in the field.
type Batteries interface {
	// CreateBattery stores b under b.ID and returns it with its output-only fields set.
	// requestID works as in [BatteryTypes.CreateBatteryType].
	CreateBattery(ctx context.Context, tenant string, b Battery, requestID string) (Battery, error)
	// GetBattery returns the battery with that id, or [ErrNotFound].
	GetBattery(ctx context.Context, tenant, id string) (Battery, error)
	// ListBatteries returns one page of the batteries that match filter, ordered by id,
	// and the token of the next page ("" after the last page).
	ListBatteries(ctx context.Context, tenant string, filter BatteryFilter, page PageRequest) ([]Battery, string, error)
	// UpdateBattery replaces the mutable fields of the battery b.ID (everything but the
	// id and the output-only fields) if its version equals expectedVersion (or
	// expectedVersion is [AnyVersion]), and returns the stored result.
	UpdateBattery(ctx context.Context, tenant string, b Battery, expectedVersion int64) (Battery, error)
	// DeleteBattery deletes the battery, its state and its health history, if its
	// version equals expectedVersion (or expectedVersion is [AnyVersion]).
	DeleteBattery(ctx context.Context, tenant, id string, expectedVersion int64) error
}

// States keeps each battery's tracked estimator state.
type States interface {
	// GetState returns the battery's stored state, or [ErrNotFound] when the battery
	// does not exist or has no state yet.
	GetState(ctx context.Context, tenant, batteryID string) (State, error)
	// PutState writes s as the battery's state by compare-and-swap and returns the new
	// version. expectedVersion is the version the caller read, or [AnyVersion] when it
	// found no state. It fails with [ErrConflict] when the stored version differs (the
	// caller must re-read and redo its work), with [ErrNotFound] when the battery does
	// not exist, and with [ErrInvalidArgument] when s.Watermark is behind the stored
	// watermark. s.Version and s.UpdateTime are ignored.
	PutState(ctx context.Context, tenant, batteryID string, expectedVersion int64, s State) (int64, error)
	// PutStates writes several batteries' states in one transaction, so that a flush
	// of many costs one disk sync instead of one each. Every write is its own
	// compare-and-swap: results[i] holds the new version of writes[i], or the error
	// PutState would have returned for it, and one write failing does not hold back
	// the others. The error is for the call as a whole (the context ended, the backend
	// failed); some writes may have happened even then, so re-read before retrying.
	// At most [MaxStateBatch] writes per call.
	PutStates(ctx context.Context, tenant string, writes []StateWrite) (results []StateResult, err error)
}

// StateWrite is one write of [States.PutStates].
type StateWrite struct {
	// BatteryID names the battery.
	BatteryID string
	// ExpectedVersion is as in [States.PutState].
	ExpectedVersion int64
	// State is the state to write.
	State State
}

// StateResult is the outcome of one write of [States.PutStates].
type StateResult struct {
	// Version is the new version when Err is nil.
	Version int64
	// Err is the error PutState would have returned for this write.
	Err error
}

// Health keeps each battery's compact health history.
type Health interface {
	// AppendHealth stores records for the battery. A record at a time that is already
	// stored replaces it, so replaying records is harmless. It fails with
	// [ErrNotFound] when the battery does not exist. At most [MaxHealthAppend] records
	// per call.
	AppendHealth(ctx context.Context, tenant, batteryID string, records []HealthRecord) error
	// ListHealth returns the battery's records in the range, oldest first, at most
	// q.Limit of them. It fails with [ErrNotFound] when the battery does not exist.
	ListHealth(ctx context.Context, tenant, batteryID string, q HealthQuery) ([]HealthRecord, error)
}

// Calibrations keeps calibration runs, the long-running fits of a battery type to lab
// data.
type Calibrations interface {
	// CreateCalibration stores c under c.ID and returns it with its output-only fields
	// set. requestID works as in [BatteryTypes.CreateBatteryType].
	CreateCalibration(ctx context.Context, tenant string, c Calibration, requestID string) (Calibration, error)
	// GetCalibration returns the run with that id, or [ErrNotFound].
	GetCalibration(ctx context.Context, tenant, id string) (Calibration, error)
	// ListCalibrations returns one page of runs, newest first (by creation time, then
	// id), and the token of the next page ("" after the last page). Listed runs leave
	// Input nil, since it can be large; GetCalibration returns it.
	ListCalibrations(ctx context.Context, tenant string, page PageRequest) ([]Calibration, string, error)
	// UpdateCalibration replaces the mutable fields of the run c.ID (display name,
	// status, report, type name, error; the input is kept) if its version equals expectedVersion (or
	// expectedVersion is [AnyVersion]), and returns the stored result.
	UpdateCalibration(ctx context.Context, tenant string, c Calibration, expectedVersion int64) (Calibration, error)
	// DeleteCalibration deletes the run if its version equals expectedVersion (or
	// expectedVersion is [AnyVersion]). Stopping a worker is the service's job.
	DeleteCalibration(ctx context.Context, tenant, id string, expectedVersion int64) error
}

// BatteryType is a battery type a user registered.
type BatteryType struct {
	// Name is the type's id, unique per tenant; see [ValidID].
	Name string
	// DisplayName is free text for people, at most [MaxDisplayNameBytes] bytes.
	DisplayName string
	// Chemistry names the cell chemistry (for example "lfp"), at most
	// [MaxChemistryBytes] bytes. The store keeps it as a column for listing; the
	// service decides which values are valid.
	Chemistry string
	// Parameters is the model parameter set as JSON, opaque to the store; required,
	// at most [MaxBlobBytes] bytes.
	Parameters []byte
	// CalibrationID names the calibration run the type was fitted by, if any; see
	// [ValidID]. It is a plain reference: deleting the run leaves it in place.
	CalibrationID string

	// CreateTime and UpdateTime are output only.
	CreateTime, UpdateTime time.Time
	// Version is output only; see the package doc.
	Version int64
}

// Battery is a pack in the field: a number of cells of one type in series and parallel.
type Battery struct {
	// ID is the battery's id, unique per tenant; see [ValidID].
	ID string
	// TypeName names the battery's type: a type registered in this store or a built-in
	// one (the store does not know the built-in catalogue). While it names a
	// registered type, that type cannot be deleted.
	TypeName string
	// Series and Parallel are the numbers of cells in series and in parallel, each
	// 1 to [MaxCellCount].
	Series, Parallel int
	// DisplayName is free text for people, at most [MaxDisplayNameBytes] bytes.
	DisplayName string
	// Labels are key/value pairs for grouping and filtering; see [ValidLabels]. Stored
	// batteries without labels come back with a nil map.
	Labels map[string]string

	// CreateTime and UpdateTime are output only.
	CreateTime, UpdateTime time.Time
	// Version is output only; see the package doc.
	Version int64
}

// BatteryFilter selects batteries in [Batteries.ListBatteries]. The zero value
// selects all.
type BatteryFilter struct {
	// TypeName, when not empty, selects batteries of that type.
	TypeName string
	// Labels selects batteries that carry every one of these key/value pairs.
	Labels map[string]string
}

// State is a battery's tracked estimator state.
type State struct {
	// Estimator is the estimator's own state as JSON, opaque to the store; required,
	// at most [MaxBlobBytes] bytes.
	Estimator []byte
	// Summary repeats the values that are listed and queried without decoding
	// Estimator.
	Summary Summary
	// Watermark marks the last sample folded into Estimator.
	Watermark Watermark

	// UpdateTime is output only: when the state was last written.
	UpdateTime time.Time
	// Version is output only; pass it to [States.PutState] as the expected version.
	Version int64
}

// Summary holds the readable parts of an estimator state. All values must be finite.
type Summary struct {
	// SOC is the state of charge, a fraction (0 empty, 1 full).
	SOC float64
	// SOCSigma is the standard deviation of SOC, a fraction, not negative.
	SOCSigma float64
	// CapacityFactor is the capacity relative to new, positive (1 = as new).
	CapacityFactor float64
	// ResistanceFactor is the resistance relative to new, positive (1 = as new).
	ResistanceFactor float64
	// EquivalentCycles counts equivalent full cycles, not negative.
	EquivalentCycles float64
	// TemperatureCelsius is the temperature of the last applied sample, in °C.
	TemperatureCelsius float64
	// VoltageVolts is the pack terminal voltage of the last applied sample, in volts.
	VoltageVolts float64
	// CurrentAmps is the pack current of the last applied sample, in amperes; positive
	// on discharge (leaving the pack), negative on charge.
	CurrentAmps float64
}

// Watermark marks the last telemetry sample applied to a state. Both parts are
// non-decreasing from one stored state to the next.
type Watermark struct {
	// Sequence is the battery's sequence number of the last applied sample, not
	// negative; 0 when the pipeline numbers no samples.
	Sequence int64
	// Time is the sample time of the last applied sample (the last sample time);
	// zero when no sample was applied yet.
	Time time.Time
}

// HealthRecord is one point of a battery's health history.
type HealthRecord struct {
	// Time is when the estimate holds; required. Records are keyed by it.
	Time time.Time
	// CapacityFactor is the capacity relative to new, positive.
	CapacityFactor float64
	// ResistanceFactor is the resistance relative to new, positive.
	ResistanceFactor float64
	// SOC is the state of charge (a fraction) at Time, finite.
	SOC float64
	// EquivalentCycles counts equivalent full cycles up to Time, not negative.
	EquivalentCycles float64
}

// HealthQuery selects health records in [Health.ListHealth]. Start and End are
// truncated to microseconds like stored times, so a record appended at time T is
// found from Start = T and excluded by End = T.
type HealthQuery struct {
	// Start is the first instant included; zero means from the beginning.
	Start time.Time
	// End is the first instant excluded; zero means to the end.
	End time.Time
	// Limit caps the number of records: 0 means [DefaultHealthLimit], larger than
	// [MaxHealthLimit] is clamped, negative is invalid.
	Limit int
}

// CalibrationStatus is the state of a calibration run.
type CalibrationStatus string

// Calibration run states. A run starts pending, runs, and ends in one of the last three.
const (
	CalibrationPending   CalibrationStatus = "pending"
	CalibrationRunning   CalibrationStatus = "running"
	CalibrationSucceeded CalibrationStatus = "succeeded"
	CalibrationFailed    CalibrationStatus = "failed"
	CalibrationCancelled CalibrationStatus = "cancelled"
)

// Valid reports whether s is one of the defined states.
func (s CalibrationStatus) Valid() bool {
	switch s {
	case CalibrationPending, CalibrationRunning, CalibrationSucceeded, CalibrationFailed, CalibrationCancelled:
		return true
	}
	return false
}

// Calibration is a calibration run: fitting a battery type to submitted lab data.
type Calibration struct {
	// ID is the run's id, unique per tenant; see [ValidID].
	ID string
	// DisplayName is free text for people, at most [MaxDisplayNameBytes] bytes.
	DisplayName string
	// Status is where the run is.
	Status CalibrationStatus
	// Input is the submitted request (data and settings) as JSON, opaque to the store;
	// optional, at most [MaxBlobBytes] bytes. It is set at creation and kept, so
	// another replica can resume or fail a run whose worker died.
	Input []byte
	// Report is the fit report as JSON, opaque to the store; optional, at most
	// [MaxBlobBytes] bytes.
	Report []byte
	// TypeName names the battery type the run produced, if any.
	TypeName string
	// Error says why the run failed, at most [MaxErrorBytes] bytes.
	Error string

	// CreateTime and UpdateTime are output only.
	CreateTime, UpdateTime time.Time
	// Version is output only; see the package doc.
	Version int64
}

// PageRequest asks for one page of a list.
type PageRequest struct {
	// Size is the maximum number of items: 0 means [DefaultPageSize], larger than
	// [MaxPageSize] is clamped, negative is invalid.
	Size int
	// Token is the next-page token a previous call returned, or "" for the first page.
	// The other arguments must be the same as in that call.
	Token string
}
