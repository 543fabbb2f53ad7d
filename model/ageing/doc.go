// Package ageing measures how hard a battery has been used and projects when it wears
// out: charge throughput and equivalent full cycles, rainflow counting of a state of
// charge history, and a capacity-fade trend fitted to a capacity history that projects
// the cycle (and day) at which the capacity reaches end of life, with an interval.
//
// # Conventions
//
// Units are SI except where a battery datasheet always uses another unit: time in
// seconds, current in amperes, charge in ampere-hours (1 Ah = 3600 C). Current is
// positive when it leaves the battery (discharge) and negative when it enters it
// (charge). State of charge is a fraction from 0 (empty) to 1 (full).
//
// An equivalent full cycle (EFC) is the total charge discharged divided by the rated
// capacity, so one full discharge and one full charge make one EFC, and two half
// discharges make one too (common practice; some authors average the charged and
// discharged Ah instead, which agrees whenever the history starts and ends at the same
// state of charge).
//
// # Rainflow counting
//
// [Rainflow] follows the three-point rule of ASTM E1049-85, "Standard Practices for
// Cycle Counting in Fatigue Analysis", §5.4.4: the history is first reduced to its
// turning points ([TurningPoints]); each closed range is counted as a full cycle, a range
// that holds the start point as a half cycle, and the ranges left at the end as half
// cycles. Run on a state of charge history it gives the depth-of-discharge spectrum that
// cycle-ageing laws take as input (common practice).
//
// # End-of-life projection
//
// [Project] fits candidate trend laws (linear, square root of cycles, power law and
// exponential; see [Model]) to a capacity history by weighted least squares solved with a
// QR factorisation, and solves for the cycle at which the trend reaches a fraction of a
// reference capacity (80 % by default; common practice, see ../shared/REFERENCE.md §2.9).
//
// Robustness: capacity histories hold dropouts (an interrupted discharge, a zero), spikes
// and the short capacity regeneration that follows a long rest. A Hampel filter first
// drops isolated points far from their neighbours' median; Tukey's biweight then
// down-weights the remaining large residuals by iteratively reweighted least squares, so a
// minority of bad points cannot pull the trend. The reference capacity, unless given, is
// the median of the first few points the filter keeps.
//
// Choice of law: an information criterion (AICc by default) computed on the fitted data
// only; nothing beyond the fitted points is used.
//
// Interval: each law's parameter covariance σ²·(JᵀWJ)⁻¹, inflated for serially
// correlated residuals, gives a pointwise confidence band of its trend; a law's interval
// runs from where its lower band reaches the threshold to where its upper band does (an
// inverse-prediction interval, asymmetric as it should be). The reported interval is the
// envelope of every fitted law's interval, because the laws agree on the fitted data and
// part only in extrapolation: which law holds is the largest uncertainty, and the data
// cannot settle it. [Settings.ParameterInterval] narrows it to the chosen law's own band.
//
// Limits: an extrapolation assumes the future fades like the past. A fade "knee" that
// has not begun in the fitted data cannot be seen by any of these laws, and a history
// that rises (early capacity gain) projects no end of life at all.
//
// # Errors and panics
//
// Bad data (NaN or infinite values, slices of different lengths, a time or cycle index
// that does not increase, too few points, an end-of-life fraction outside (0, 1)) is
// reported as a [*cell.FieldError], which matches [cell.ErrInvalid] under errors.Is, so
// that a service can pass user data straight through. A fit that cannot be solved (a
// rank-deficient design) is reported as an error too; nothing here panics on data.
//
// Nothing in this package logs, reads files or keeps global state; every function is
// safe for concurrent use on distinct arguments. Inputs are never modified.
package ageing
