// Package estimate tracks the state of charge (SOC) of a battery pack, with an honest
// uncertainty, from telemetry: time, current, terminal voltage and temperature.
//
// Two estimators implement [Estimator]:
//
//   - [EKF], an extended Kalman filter over the Thevenin model of package cell
//     (Plett, "Extended Kalman filtering for battery management systems of LiPB-based
//     HEV battery packs", J. Power Sources 134(2), 2004; Part 3, State and parameter
//     estimation, pp. 277–292). Its state is the SOC, the RC branch voltages, the
//     hysteresis voltage when the type has one, and optionally two slow state-of-health
//     states, the capacity factor and the resistance factor (a joint EKF with
//     random-walk parameters, Plett 2004 Part 3 §4).
//   - [Counter], plain coulomb counting (../shared/REFERENCE.md §2.2), the baseline that
//     every accuracy table compares against.
//
// [Run] feeds a slice of samples to an estimator, for batch work and validation.
//
// # Conventions
//
// Units are SI: seconds, amperes, volts, kelvin. A [Sample] carries the pack current
// (POSITIVE = DISCHARGE, current leaving the pack; negative = charge), the pack terminal
// voltage and the cell temperature in kelvin (convert °C at the edge with
// [cell.Kelvin]). State of charge is a fraction, 0 empty to 1 full. Noise settings are
// stated per cell and scaled to the pack (voltages × series count).
//
// # Model and discretisation
//
// The prediction is [cell.Pack.Step] itself, the simulator's exact zero-order-hold
// discretisation, so the filter and the simulator cannot disagree. The Jacobians are
// derived from the same equations (see ekf.go): for the dynamic states
// A = diag(1, a₁ … aₙ, b) with aₖ = exp(−Δt/(Rₖ·Cₖ)) and b the hysteresis decay, plus
// the cross terms through the state-of-charge dependence of tabulated parameters and
// through the health states; the measurement row is
// H = S·[dOCV/dz − dR0/dz·i, −1 … −1, +1, 0, −R0·i].
//
// Timing of the current: by default ([IntervalAverage]) a sample's current is the mean
// current over the interval since the previous sample, as lab testers and most battery
// management systems log it; [SampleAndHold] holds each sample's current until the
// next sample instead. Either way a current is never held for longer than
// [Settings.MaxHold] (default 60 s): the rest of a longer interval is a gap in the log
// and is treated as a rest at zero current, across which the RC branches relax exactly
// (the step is exact for any length, so a gap of hours is a rest, not a jump). Because
// the pack may nevertheless have been used or charged while nothing was logged, the SOC
// uncertainty grows across a gap ([Settings.GapSOCDrift]), so the first voltage after
// it can correct the SOC.
//
// # Noise model
//
// The measurement noise is the voltage sensor's noise plus the model's error, scaled to
// the pack. The model error has a floor ([Settings.ModelSigma]) and a part that grows
// with the load ([Settings.ParameterError] times the ohmic and polarisation drop),
// because an equivalent circuit identified at one current errs at others. It is not
// white: it follows the operating point and stays
// correlated for minutes, so the model part is scaled by ModelCorrelationTime/Δt for
// samples closer than that ([Settings.ModelCorrelationTime]); without this a filter fed
// at 1 Hz would treat one slowly varying model error as thousands of independent
// observations and become overconfident. The process noise is the current sensor's
// noise through the input column of the Jacobian, an SOC random walk (current-sensor
// offset), a charge-gain error proportional to the charge passed, a small random walk on
// the RC and hysteresis voltages, and, for the health states, their slow drifts.
// SOCSigma is the filter's uncertainty given that model: a type whose voltage error is
// larger than Settings.ModelSigma says (an unfitted type, or the voltage knee at the end
// of a discharge, which few equivalent circuits capture) gives larger SOC errors than
// SOCSigma suggests. Set ModelSigma to the fit's voltage RMSE when it is known.
//
// # Robustness
//
// A measurement that would move the SOC by more than 0.01 is applied by the iterated
// extended Kalman filter (Gauss–Newton relinearisation), so a first rested voltage far
// from the prior on a curved OCV is met without overshoot. The covariance update uses
// the Joseph form; prediction and update compute the upper triangle and mirror it, so
// the covariance stays exactly symmetric, and it is checked for positive definiteness
// by a Cholesky factorisation; a failing covariance is repaired and the sample flagged. A measurement whose normalised innovation squared
// exceeds a chi-square gate is rejected as an outlier (the prediction is kept, the
// voltage is not used) and counted. After [Settings.MaxRejections] consecutive
// implausible innovations (rejected, or beyond 3σ), or when the normalised innovation
// averages beyond 1.5 over ten model-error correlation times (10 min), the filter
// concludes that its own state is wrong rather than the sensor, inflates the covariance
// of its dynamic states (the SOC standard deviation to at most 0.2) and accepts the
// sample, so it can neither lock itself out nor crawl towards the truth with a tiny
// gain. While the pack rests (|i| small for [Settings.RestDuration]) the
// voltage is close to the OCV and the measurement is trusted more.
//
// # Errors and bad input
//
// Time that does not increase and a current implausibly large for the type (for example
// milliamperes passed as amperes) return an error for that sample and leave the state
// unchanged. NaN, infinite or saturated readings are counted, flagged [FlagInvalid]
// and ignored, again leaving the state unchanged; the next valid sample then spans the
// interval. Misuse by the programmer (nil pack type, unvalidated settings) panics with
// an "estimate: " prefix.
//
// # Concurrency and allocation
//
// An estimator is not safe for concurrent use. [EKF.Update] and [Counter.Update] do not
// allocate. [State] is a plain value the caller may persist and give back to
// [EKF.Restore] to continue exactly where the filter stopped.
//
// Estimates are advisory. Decisions about charging or deep discharge follow the cell
// maker's datasheet, local codes and licensed practice.
package estimate
