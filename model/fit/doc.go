// Package fit calibrates the equivalent-circuit cell model of package cell from lab
// test records: the open-circuit voltage curve and capacity from a low-rate test, the
// series resistance and RC branches from HPPC-style pulse tests, and optionally scale
// factors refined over drive cycles. It reports the fitted type's voltage error on every
// record.
//
// # Conventions
//
// Inputs are [Record] values holding plain slices in SI units: seconds, amperes, volts,
// kelvin. Current is positive on discharge (leaving the cell) and negative on charge;
// convert other conventions before calling. State of charge is a fraction 0–1.
// Parameters are per cell. A current sample i[k] is taken as held over
// (t[k−1], t[k]] (backward zero-order hold), which is how the lab counters of the
// shared datasets relate to their samples.
//
// # Problem, Settings, Result
//
// [Fit] takes a [Problem] (the records and an optional base type for limits) and
// [Settings] whose zero value selects the defaults, and returns a [Result] with the
// fitted [cell.Type], the pieces it came from and a [Report]. The pieces are exported
// for callers who need only one step: [OCV], [Pulses], [Refine], [Simulate].
//
// # Determinism, cost, errors
//
// Fits are deterministic: there is no randomness, and the nonlinear least-squares
// solver (Levenberg–Marquardt with QR-solved steps) starts from a grid search. Inputs
// are never modified. Data problems (too few samples, NaN, time not increasing,
// currents implausible for the cell, no pulses found) are returned as errors wrapping
// [ErrData]; nothing panics on user data. The context is checked once per major
// iteration.
//
// The fitted type only describes the cell it came from, within the range of the tests.
// Limits come from the base type or generic lithium-ion values: the cell maker's
// datasheet always takes precedence.
package fit
