// Package charge plans how to charge a pack: which phases the charger goes through for
// the chemistry, how long each takes, what current and voltage it uses, the charge and
// energy that go in, and the warnings and cautions that apply.
//
// Charge advice can hurt people and property when it is wrong. A plan is a model
// estimate: the cell maker's datasheet, local codes and licensed practice always take
// precedence, and every [Result] carries the cautions for its chemistry.
//
// # Methods
//
// [Plan] simulates the charge phase by phase with the pack's equivalent circuit
// ([cell.Pack.Step]), at a constant cell temperature (the request's temperature; the
// planner has no thermal model):
//
//   - Lithium (cc-cv): an optional precharge at ≤ 0.1 C while the cell is below its
//     cut-off voltage, constant current (or constant power, when the charger's power
//     limit binds) up to the charge voltage, then constant voltage until the current
//     tapers to the termination rate (default C/20) [REFERENCE.md §1a, BU-205; common
//     practice]. No float or trickle phase: lithium-ion must not be trickle-charged.
//   - Lead-acid (three-stage): bulk at constant current, absorption at constant voltage
//     until the current tapers to the termination rate or the absorption timer runs out,
//     then float. Absorption and float voltages are compensated for temperature from
//     25 °C by the type's coefficient (−3 mV/°C/cell, BU-LA).
//   - Nickel (nickel): constant current with a backup timer. At the standard rate
//     (≤ 0.1 C) the charge is timed: 0.1 C for 16 h, i.e. 160 % of capacity (IEC 61951-2
//     via REFERENCE.md). Faster charges stop on −ΔV. Simplification: the model has no
//     voltage peak, so −ΔV is modelled as reaching full (SOC 1) and then a small
//     overcharge ([Settings].NickelOvercharge, default 5 % of capacity) while the
//     charger waits for the voltage to fall; the backup timer ([cell.Limits].TimerFactor
//     × capacity) ends the charge if that comes first.
//   - Primary cells (charge method none) are refused with [ErrPrimaryCell].
//
// A constant-current step holds the current over the step (zero-order hold), so the
// state of charge is linear in time within it and crossings of the target SOC are
// exact; the crossing of the charge voltage is found by bisection on the step length.
// In a constant-voltage phase, each step's current is the one that makes the terminal
// voltage averaged over the step (trapezoid of its start and end values, with the RC
// branches advanced exactly) equal to the set point; this scalar equation is solved to
// 1e-9 V by a safeguarded secant iteration. For an R0-only cell with a linear OCV the
// step map is the (1,1) Padé approximant of the exact exponential decay, so the error
// in the current after time t is about (t/τ)·(Δt/τ)²/12; steps are sized to change the
// current by about 1 % each. Within a step the model's terminal voltage ripples about
// the set point by about half a percent of the overpotential (terminal voltage minus
// OCV), a numerical artefact; phases report the set point, which is what the charger
// holds.
//
// With a deadline, [Plan] bisects on the charge current for the lowest current (within
// the charger's and the cell's limits) that reaches the target SOC in time, which is
// gentler on the pack, and warns when even the largest allowed current is too slow.
//
// # Conventions
//
// Currents in phases follow the project's sign: positive leaves the pack, so charge
// currents are negative. Charger limits in the [Request] are magnitudes (positive).
// Voltages are pack terminal voltages; SOC is a fraction 0–1. Reported SOC is clamped
// to [0, 1]: the state of charge in the model can pass 1 slightly when a table's top
// OCV is below the charge voltage. Times are seconds from the start of the charge.
//
// # Errors
//
// Invalid requests give a [*cell.FieldError] (matching [cell.ErrInvalid]); refusals
// wrap [ErrPrimaryCell] or [ErrTemperature]. Conditions that leave a usable plan
// (cold derating, a weak charger, a deadline that cannot be met) are [Warning]s.
package charge
