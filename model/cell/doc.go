// Package cell describes a battery cell type and a pack built from it, and advances the
// equivalent-circuit state of a pack through time.
//
// # Model
//
// The cell is a Thevenin equivalent circuit (Chen and Rincón-Mora, IEEE Trans. Energy
// Conversion 21(2):504–511, 2006; Plett, J. Power Sources 134(2):262–276, 2004): an
// open-circuit voltage source OCV(z, T) that depends on state of charge z and
// temperature T, a series resistance R0, and zero to three parallel RC branches, plus an
// optional one-state hysteresis voltage h for chemistries with a flat OCV (Plett 2004,
// Part 2, §3.3). The terminal voltage of one cell carrying current i is
//
//	v = OCV(z, T) + h − R0·i − Σ vₖ
//
// A branch may be a charge-transfer branch ([Branch].ExchangeCurrent): its resistor
// follows the Butler–Volmer relation, so its voltage grows less than linearly with
// current, as the overpotential of cold lithium-ion cells does.
//
// # Conventions
//
// Units are SI: seconds, amperes, volts, ohms, farads, kelvin. Capacity is stored in
// ampere-hours because every datasheet gives it so; the conversion 1 Ah = 3600 C happens
// in one place ([Pack.Step]). Temperatures are kelvin inside this package; the JSON form
// of a [Type] uses °C.
//
// Current is positive when it leaves the pack (discharge) and negative when it enters it
// (charge). State of charge is a fraction from 0 (empty) to 1 (full).
//
// # Discretisation
//
// [Pack.Step] holds the current constant over the step (zero-order hold) and advances
// each RC branch by its exact solution, vₖ ← a·vₖ + Rₖ·(1−a)·u with a = exp(−Δt/(RₖCₖ))
// and u = i (or the Butler–Volmer effective current of a charge-transfer branch),
// so the result is exact for any step length, from milliseconds to hours, while the
// parameters stay constant over the step. State of charge follows coulomb counting,
// z ← z − η·i·Δt/(3600·Q), with coulombic efficiency η applied on charge only.
//
// # Packs
//
// A [Pack] of S cells in series and P in parallel is a scaled cell: voltages × S,
// capacity × P, resistances × S/P (capacitances × P/S). All limits are stated per cell
// in a [Type] and are checked per cell, because a pack voltage can hide one overcharged
// cell (common practice).
//
// # Errors and panics
//
// [Type.Validate] reports every data problem as a [*FieldError] naming the offending
// field. Stepping a pack whose type was not validated is a programmer error.
package cell
