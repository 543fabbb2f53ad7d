// Package forecast answers "how long will it last?": the time until a pack under a
// given load reaches its cut-off voltage (or a floor state of charge), with the charge
// and energy it delivers on the way, the charge it strands at that rate, and a time
// range from the uncertainty of the state of charge and the capacity.
//
// # Method
//
// [Run] steps the pack with [sim.Circuit.Advance] (exact zero-order-hold steps through
// [cell.Pack.Step]; see package sim) under constant-current, constant-power,
// constant-resistance or piecewise (optionally repeating) loads. Steps are adaptive:
// each is the longest that keeps
//
//   - the state of charge change within Settings.MaxSOCStep (5 % by default), and
//   - the predicted change of the cell terminal voltage within Settings.MaxVoltsStep
//     (20 mV by default), predicted from the OCV slope and the RC branches' rates
//     ((Rₖ·i − vₖ)/(RₖCₖ) at the start of a segment, then their mean rate over the
//     previous step), which keeps steps short while a branch is settling and long on
//     the flat of the discharge,
//
// and steps end at every segment boundary. A 10-hour constant-current discharge takes
// about 60 steps (TestSteps), not 36 000.
//
// The stop is located, not taken as "the first step below": after the step that ends at
// or below the cut-off (or floor), the crossing is found inside that step by the
// Illinois variant of regula falsi on the step length, re-stepping from the saved state
// at the start of the step each time (zero-order-hold steps of any length are as
// accurate as the step they replace). The search ends when the cell voltage is within
// Settings.VoltsTolerance of the cut-off (1 µV by default) or the bracket is shorter than
// Settings.TimeTolerance (1 µs by default). At a segment boundary where the new segment
// pulls the voltage below the cut-off at once, the stop is the boundary itself.
//
// A voltage that dips below the cut-off and recovers within a single step is not seen;
// the voltage-change limit keeps such steps short.
//
// # Uncertainty
//
// Given standard deviations of the initial state of charge and of the capacity
// (independent, each a fraction), Run forecasts again at ±1σ of each, one at a time
// (four extra runs: a sigma-point set on the two axes), and combines the one-sided
// deviations from the nominal time in quadrature:
//
//	low  = t₀ − √(Σⱼ max(0, t₀ − min(t₊ⱼ, t₋ⱼ))²)
//	high = t₀ + √(Σⱼ max(0, max(t₊ⱼ, t₋ⱼ) − t₀)²)
//
// This is a first-order ±1σ interval; it keeps asymmetry (the state of charge cannot
// exceed 1, so its +σ point is clamped there) but assumes the two errors are
// uncorrelated.
//
// # Termination
//
// Every run ends: at the cut-off, at the floor state of charge if one is given, empty
// (state of charge 0: the model does not extrapolate the OCV below its table),
// when a power demand exceeds what the pack can deliver, when a load that does not
// repeat ends, at the horizon (1000 h by default), or after Settings.MaxSteps steps. A
// load that pulls the pack below its cut-off at the start is reported as
// [StatusCannotStart] with a zero time.
//
// # Conventions
//
// SI units; temperature in °C; current positive on discharge; state of charge a
// fraction. Cut-off voltages are per cell unless the name says pack.
//
// # Caution
//
// A forecast is a model estimate. How deep a pack may be discharged, and at which
// temperatures, is for the cell maker's datasheet to say: running lithium cells below
// their cut-off can damage them permanently.
package forecast
