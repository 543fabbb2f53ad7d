// Package chem is the built-in catalogue of generic cell types: one parameter set per
// common chemistry (lithium NMC, NCA, LCO, LFP and LTO; NiMH; valve-regulated and
// flooded lead-acid; alkaline, lithium–manganese-dioxide and lithium–thionyl-chloride
// primaries), each a validated [cell.Type].
//
// # Sources
//
// Every number carries its source in a comment beside it, tagged as in the project's
// domain reference (../shared/REFERENCE.md): "[source: X]" for a value read in, or
// checked against, the named publication; "[common practice]" for a convention of the
// trade; "[from memory]" for a recalled value not checked here; and "[assumed, typical
// of the trade]" where the reference gives no value and we chose a plausible one (RC
// branches, Arrhenius energies, and the OCV curves of NCA, LCO, LTO and the primaries).
// The types are generic: they describe no particular maker's cell, and their names are
// ours. The cell maker's datasheet always overrides them.
//
// # Use
//
// [Lookup] returns a type by name, [Names] lists the names, [All] returns every type.
// Each call builds fresh values, so a caller may change what it gets back (for example
// to scale the capacity to a fitted value) without affecting anyone else; the OCV and
// parameter tables inside are immutable and shared.
//
// All values are per cell at 25 °C unless a table says otherwise. A 12 V lead-acid block
// is a 6-series pack of the 2 V cell type; an 8-cell NiMH stick is an 8-series pack.
package chem
