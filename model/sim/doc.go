// Package sim runs a battery pack forward in time under a load and records what its
// terminal shows: state of charge, terminal voltage, current, power and the voltages of
// the equivalent circuit's RC branches.
//
// # Loads
//
// A [Load] is a sequence of [Segment]s, each holding one demand for a duration: a
// constant current (A), a constant terminal power (W) or a constant external resistance
// (Ω). A load may repeat its segments (a duty cycle), and the last segment of a load that
// does not repeat may last forever, which is how a constant load is written
// ([ConstantCurrent], [ConstantPower], [ConstantResistance]).
//
// Within a step the pack is a Thevenin source: terminal voltage v = E − R·i, where E is
// the pack's open-circuit voltage less its RC branch voltages (plus hysteresis) and R its
// series resistance (the charge-side one when a demand charges a type that has one), both
// taken from the state. The current a demand draws is then exact
// for that state: the value itself for a current; i = E/(R + Rₗ) for a resistance Rₗ;
// and for a power P the smaller root of R·i² − E·i + P = 0, the one that joins i = 0 at
// P = 0 (the other root is the far side of the maximum-power point). A power above
// E²/(4R), the most the source can deliver into any load, has no solution and is
// reported as [ErrPowerLimit].
//
// # Stepping
//
// [Circuit.Advance] advances the state with the current held over the step
// (zero-order hold) through [cell.Pack.Step], whose RC and hysteresis updates are the
// exact solutions for a held current. Two refinements make long steps accurate when the
// parameters depend on state of charge and when the current follows a power or
// resistance law:
//
//   - the RC parameters are read at the state of charge half-way through the step (the
//     state of charge itself still follows exact coulomb counting), which makes the
//     parameter error second order in the step instead of first;
//   - for power and resistance demands the held current is the one the demand draws at
//     the state half-way through the step (explicit midpoint rule), so the power or
//     resistance law holds to second order over the step as well.
//
// For a constant current and parameters that do not depend on state of charge, a step
// of any length is exact. Steps never straddle a segment boundary.
//
// # Conventions
//
// SI units: seconds, amperes, volts, ohms, watts; temperatures are °C in [Problem] and
// kelvin in [Circuit]. Current is positive when it leaves the pack (discharge) and
// negative when it enters it (charge); power follows the current's sign. State of charge
// is a fraction from 0 to 1. Voltages of a [Sample] are pack voltages except the RC
// branch voltages, which are per cell, like [cell.State].
//
// # Errors and panics
//
// Invalid problems, loads and settings are reported as [*cell.FieldError] (matching
// [cell.ErrInvalid]). A power the pack cannot deliver is [ErrPowerLimit] from
// [Circuit.Current] and [Circuit.Advance], and ends a [Run] with [StatusPowerLimit].
// Nothing in this package logs, allocates in its stepping loop, or keeps global state.
//
// This is a model: for how deep a real pack may be discharged, and at which
// temperatures, the cell maker's datasheet governs.
package sim
