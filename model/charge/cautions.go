package charge

import "github.com/voltcast/voltcast/model/cell"

// Standing cautions (REFERENCE.md §5). They are shown with every plan, and by the tools
// even when a plan is refused.
const (
	cautionAdvisory = "Advisory only: this plan is a model estimate. The cell maker's datasheet, local codes and standards, " +
		"and licensed practice govern."
	cautionWindow = "Charge only inside the chemistry's temperature window; stop and isolate the battery on swelling, " +
		"venting, smell or rapid heating."
	cautionPrimary = "Never charge primary (non-rechargeable) cells: they can leak, rupture, vent or burn."
	cautionLithium = "Lithium-ion: never exceed the per-cell charge voltage, enforce limits per cell and balance series " +
		"strings; no trickle or float charge. Charging cold, fast or near full plates lithium."
	cautionLead = "Lead-acid: ventilate, because charging releases hydrogen (flammable from about 4 % in air); no sparks " +
		"or flames, protect against acid; use temperature-compensated voltages and never charge a frozen battery."
	cautionNickel = "Nickel: back the −ΔV stop with a timer and a temperature cut-off; overcharge heats the cell."
)

// Cautions returns the standing safety notes for a chemistry and charge method, for
// display with a plan or a refusal. The slice is new on each call.
func Cautions(c cell.Chemistry, m cell.ChargeMethod) []string {
	out := []string{cautionAdvisory}
	switch {
	case m == cell.ChargeNone || m == "":
		return append(out, cautionPrimary)
	case m == cell.ChargeNickel:
		out = append(out, cautionNickel)
	case c == cell.ChemistryLeadAcid || c == cell.ChemistryVRLA || m == cell.ChargeThreeStage:
		out = append(out, cautionLead)
	default:
		out = append(out, cautionLithium)
	}
	return append(out, cautionWindow, cautionPrimary)
}
