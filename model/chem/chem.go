package chem

import (
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/table"
)

// ErrUnknownType is wrapped by [Lookup] when no built-in type has the given name.
var ErrUnknownType = errors.New("unknown cell type")

// builders maps each built-in name to the function that builds it. It is filled once,
// here, and never changed: catalogue data, not mutable state.
var builders = map[string]func() *cell.Type{
	"generic-nmc-18650":       nmc18650,
	"generic-nca-18650":       nca18650,
	"generic-lco-pouch":       lcoPouch,
	"generic-lfp-26650":       lfp26650,
	"generic-lto-prismatic":   ltoPrismatic,
	"generic-nimh-aa":         nimhAA,
	"generic-vrla-2v-cell":    vrlaCell,
	"generic-flooded-2v-cell": floodedCell,
	"generic-alkaline-aa":     alkalineAA,
	"generic-li-mno2-coin":    liMnO2Coin,
	"generic-li-socl2-aa":     liSOCl2AA,
}

// Names returns the names of the built-in types in sorted order.
func Names() []string {
	names := make([]string, 0, len(builders))
	for n := range builders {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

// Lookup returns a freshly built copy of the built-in type called name. An unknown name
// gives an error wrapping [ErrUnknownType] that lists the valid names.
func Lookup(name string) (*cell.Type, error) {
	b, ok := builders[name]
	if !ok {
		return nil, fmt.Errorf("%w %q (built-in types: %s)", ErrUnknownType, name, strings.Join(Names(), ", "))
	}
	return b(), nil
}

// All returns a freshly built copy of every built-in type, sorted by name.
func All() []*cell.Type {
	names := Names()
	out := make([]*cell.Type, len(names))
	for i, n := range names {
		out[i] = builders[n]()
	}
	return out
}

// ref25 is the single temperature (25 °C, in K) of tables given only at room temperature.
var ref25 = []float64{cell.RefKelvin}

// decile is the state-of-charge grid of REFERENCE.md §4: 0, 10, …, 100 %.
var decile = []float64{0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1}

// curve25 builds a room-temperature surface over the SOC knots soc. A failure is a
// mistake in this file, hence the panic.
func curve25(soc, v []float64) *table.Surface {
	s, err := table.NewSurface(soc, ref25, [][]float64{v})
	if err != nil {
		panic("chem: " + err.Error())
	}
	return s
}

// surface builds a surface over SOC and °C rows. A failure is a mistake in this file.
func surface(soc, celsius []float64, rows [][]float64) *table.Surface {
	tk := make([]float64, len(celsius))
	for j, c := range celsius {
		tk[j] = cell.Kelvin(c)
	}
	s, err := table.NewSurface(soc, tk, rows)
	if err != nil {
		panic("chem: " + err.Error())
	}
	return s
}

// rc returns an RC branch with resistance r (Ω) and time constant tau (s).
func rc(r, tau float64) cell.Branch {
	return cell.Branch{R: cell.Param{Value: r}, C: cell.Param{Value: tau / r}}
}

// refSources are the short keys of ../shared/REFERENCE.md that the catalogue draws on.
const refSources = "voltcast domain reference (REFERENCE.md): "

func nmc18650() *cell.Type {
	return &cell.Type{
		Name:         "generic-nmc-18650",
		Description:  "generic lithium NMC/graphite cylindrical cell, 18650 size, energy grade",
		Chemistry:    cell.ChemistryNMC,
		ChargeMethod: cell.ChargeCCCV, // CC then CV with taper termination [source: BU-205]
		CapacityAh:   3.0,             // 18650 energy cells 2.5–3.5 Ah [from memory]; 3.0 Ah as in REFERENCE.md E3/E7
		NominalVolts: 3.6,             // 3.6–3.7 V [source: BU-205]
		// OCV–SOC, rested, 25 °C: REFERENCE.md §4 NMC column [from memory; typical values, not a cited table].
		OCV: curve25(decile, []float64{3.30, 3.55, 3.62, 3.66, 3.70, 3.74, 3.80, 3.87, 3.95, 4.05, 4.18}),
		// DC resistance of a 2.5–3.5 Ah 18650 is 20–50 mΩ [from memory]; 35 mΩ ohmic part
		// with Arrhenius scaling, lumped Ea 20–50 kJ/mol typical [from memory, REFERENCE.md §2.6].
		R0: cell.Param{Value: 0.035, ActivationEnergy: 30e3},
		Branches: []cell.Branch{
			rc(0.015, 10),  // fast polarisation, τ 1–10 s [from memory]; R assumed, typical of the trade
			rc(0.020, 400), // slow (diffusion) polarisation, τ 100–1000 s [from memory]; R assumed, typical of the trade
		},
		CoulombicEfficiency: 0.995, // η ≈ 0.99–1.0 for Li-ion [from memory, REFERENCE.md §2.2]
		Limits: cell.Limits{
			ChargeVolts:         4.20, // [source: BU-205]
			CutoffVolts:         3.0,  // typical [source: BU-205]
			FloorVolts:          2.5,  // floor [source: BU-205]
			MaxChargeRate:       1.0,  // CC at 0.5–1 C [source: BU-205]
			StandardChargeRate:  0.5,  // [source: BU-205]
			MaxDischargeRate:    2.0,  // continuous, energy-grade cell [from memory]
			TerminationRate:     0.05, // CV until I ≤ C/20 [common practice]
			ChargeMinCelsius:    0,    // [source: BU-410]
			ChargeMaxCelsius:    45,   // [source: BU-410]
			DischargeMinCelsius: -20,  // [source: BU-410]
			DischargeMaxCelsius: 60,   // [source: BU-410]
		},
		Sources: []string{refSources + "BU-205, BU-410 (limits); §4 NMC OCV column (from memory); RC branches assumed"},
	}
}

func nca18650() *cell.Type {
	return &cell.Type{
		Name:         "generic-nca-18650",
		Description:  "generic lithium NCA/graphite cylindrical cell, 18650 size",
		Chemistry:    cell.ChemistryNCA,
		ChargeMethod: cell.ChargeCCCV, // same as NMC [common practice]
		CapacityAh:   3.2,             // 18650 NCA 2.9–3.5 Ah [from memory]
		NominalVolts: 3.6,             // [source: BU-205]
		// REFERENCE.md has no NCA OCV table: a curve a little below NMC at low SOC [assumed, typical of the trade].
		OCV:      curve25(decile, []float64{3.10, 3.45, 3.55, 3.62, 3.68, 3.74, 3.81, 3.89, 3.97, 4.06, 4.18}),
		R0:       cell.Param{Value: 0.030, ActivationEnergy: 30e3}, // 18650: 20–50 mΩ [from memory]; Ea [from memory, §2.6]
		Branches: []cell.Branch{rc(0.012, 10), rc(0.020, 400)},     // assumed, typical of the trade
		// η ≈ 0.99–1.0 [from memory, §2.2]
		CoulombicEfficiency: 0.995,
		Limits: cell.Limits{
			ChargeVolts:         4.20, // [source: BU-205]
			CutoffVolts:         3.0,  // [source: BU-205]
			FloorVolts:          2.5,  // [source: BU-205]
			MaxChargeRate:       1.0,  // as NMC [common practice]
			StandardChargeRate:  0.5,  // as NMC [common practice]
			MaxDischargeRate:    2.0,  // [from memory]
			TerminationRate:     0.05, // C/20 [common practice]
			ChargeMinCelsius:    0,    // [source: BU-410]
			ChargeMaxCelsius:    45,   // [source: BU-410]
			DischargeMinCelsius: -20,  // [source: BU-410]
			DischargeMaxCelsius: 60,   // [source: BU-410]
		},
		Sources: []string{refSources + "BU-205, BU-410 (limits); OCV and RC assumed"},
	}
}

func lcoPouch() *cell.Type {
	return &cell.Type{
		Name:         "generic-lco-pouch",
		Description:  "generic lithium cobalt oxide/graphite pouch cell of the kind used in handheld devices",
		Chemistry:    cell.ChemistryLCO,
		ChargeMethod: cell.ChargeCCCV, // same as NMC [source: BU-205]
		CapacityAh:   3.5,             // 3–4 Ah pouch [from memory, REFERENCE.md §1c]
		NominalVolts: 3.7,             // 3.6 V, 3.7–3.85 on some phone cells [source: BU-205; from memory]
		// No LCO OCV table in REFERENCE.md [assumed, typical of the trade].
		OCV:                 curve25(decile, []float64{3.40, 3.62, 3.70, 3.74, 3.77, 3.80, 3.85, 3.91, 3.99, 4.07, 4.18}),
		R0:                  cell.Param{Value: 0.080, ActivationEnergy: 30e3}, // 3–4 Ah pouch: 50–150 mΩ [from memory]
		Branches:            []cell.Branch{rc(0.025, 10), rc(0.030, 400)},     // assumed, typical of the trade
		CoulombicEfficiency: 0.995,                                            // [from memory, §2.2]
		Limits: cell.Limits{
			ChargeVolts:         4.20, // standard grade [source: BU-205]
			CutoffVolts:         3.0,  // [source: BU-205]
			FloorVolts:          2.5,  // [source: BU-205]
			MaxChargeRate:       1.0,  // 0.7–1 C [source: BU-205]
			StandardChargeRate:  0.7,  // [source: BU-205]
			MaxDischargeRate:    1.0,  // [from memory]
			TerminationRate:     0.05, // [common practice]
			ChargeMinCelsius:    0,    // [source: BU-410]
			ChargeMaxCelsius:    45,   // [source: BU-410]
			DischargeMinCelsius: -20,  // [source: BU-410]
			DischargeMaxCelsius: 60,   // [source: BU-410]
		},
		Sources: []string{refSources + "BU-205, BU-410 (limits); OCV and RC assumed"},
	}
}

func lfp26650() *cell.Type {
	return &cell.Type{
		Name:         "generic-lfp-26650",
		Description:  "generic lithium iron phosphate/graphite cylindrical cell, 26650 size",
		Chemistry:    cell.ChemistryLFP,
		ChargeMethod: cell.ChargeCCCV, // CC-CV at 3.65 V [source: LFP-DS]
		CapacityAh:   3.3,             // 3.3–3.4 Ah [source: LFP-DS]
		NominalVolts: 3.2,             // 3.2–3.3 V [source: BU-205]
		// REFERENCE.md §4 LFP column [from memory; typical values, not a cited table].
		OCV: curve25(decile, []float64{3.00, 3.20, 3.24, 3.26, 3.28, 3.29, 3.30, 3.31, 3.33, 3.34, 3.40}),
		// ≤20–30 mΩ at 1 kHz [source: LFP-DS]; the DC ohmic part is a little higher [common practice].
		R0:                  cell.Param{Value: 0.025, ActivationEnergy: 30e3}, // Ea [from memory, §2.6]
		Branches:            []cell.Branch{rc(0.008, 10), rc(0.012, 600)},     // assumed, typical of the trade
		CoulombicEfficiency: 0.998,                                            // [from memory, §2.2]
		// Hysteresis 10–30 mV for LFP [from memory, REFERENCE.md §4]; rate assumed.
		Hysteresis: cell.Hysteresis{Max: 0.015, Gamma: 30},
		Limits: cell.Limits{
			ChargeVolts:         3.65, // 3.60–3.65 V [source: BU-205; LFP-DS]
			CutoffVolts:         2.5,  // typical [source: BU-205; LFP-DS]
			FloorVolts:          2.0,  // floor [source: BU-205; LFP-DS]
			MaxChargeRate:       1.0,  // [from memory]
			StandardChargeRate:  0.5,  // [from memory]
			MaxDischargeRate:    3.0,  // [from memory]
			TerminationRate:     0.05, // 0.01–0.05 C [source: LFP-DS]
			ChargeMinCelsius:    0,    // [source: LFP-DS]
			ChargeMaxCelsius:    45,   // 0…45 (some datasheets 55) [source: LFP-DS; from memory]
			DischargeMinCelsius: -20,  // [source: LFP-DS]
			DischargeMaxCelsius: 60,   // [source: LFP-DS]
		},
		Sources: []string{refSources + "BU-205, LFP-DS (limits); §4 LFP OCV column (from memory); RC assumed"},
	}
}

func ltoPrismatic() *cell.Type {
	return &cell.Type{
		Name:         "generic-lto-prismatic",
		Description:  "generic lithium titanate-anode prismatic cell",
		Chemistry:    cell.ChemistryLTO,
		ChargeMethod: cell.ChargeCCCV, // CC-CV, C/20 termination [common practice]
		CapacityAh:   20,              // 20–40 Ah prismatic [from memory, REFERENCE.md §1c]
		NominalVolts: 2.4,             // 2.3–2.4 V [source: BU-205]
		// No LTO OCV table in REFERENCE.md [assumed, typical of the trade].
		OCV:                 curve25(decile, []float64{1.90, 2.15, 2.22, 2.26, 2.29, 2.32, 2.35, 2.38, 2.42, 2.48, 2.65}),
		R0:                  cell.Param{Value: 0.002, ActivationEnergy: 25e3}, // 1–3 mΩ [from memory]; Ea assumed
		Branches:            []cell.Branch{rc(0.0008, 10), rc(0.001, 300)},    // assumed, typical of the trade
		CoulombicEfficiency: 0.999,                                            // [from memory, §2.2]
		Limits: cell.Limits{
			ChargeVolts:         2.8,  // 2.7–2.85 V [source: BU-205]
			CutoffVolts:         1.8,  // typical [source: BU-205]
			FloorVolts:          1.5,  // floor [source: BU-205]
			MaxChargeRate:       4.0,  // tolerates high C-rates per datasheet [common practice]; value from memory
			StandardChargeRate:  1.0,  // [from memory]
			MaxDischargeRate:    4.0,  // [from memory]
			TerminationRate:     0.05, // near C/20 [common practice]
			ChargeMinCelsius:    -30,  // about −30…45 per datasheet [from memory]
			ChargeMaxCelsius:    45,   // [from memory]
			DischargeMinCelsius: -30,  // −30/−40…55/60 [from memory]
			DischargeMaxCelsius: 55,   // [from memory]
		},
		Sources: []string{refSources + "BU-205 (voltages); windows and OCV from memory or assumed"},
	}
}

func nimhAA() *cell.Type {
	return &cell.Type{
		Name:         "generic-nimh-aa",
		Description:  "generic nickel-metal hydride cylindrical cell, AA size, standard self-discharge",
		Chemistry:    cell.ChemistryNiMH,
		ChargeMethod: cell.ChargeNickel, // CC with −ΔV / zero-slope / timer termination [source: public charger design notes]
		CapacityAh:   2.4,               // AA 2–2.5 Ah [from memory]; 2.4 Ah as in REFERENCE.md E1/E3
		NominalVolts: 1.2,               // [common practice]
		// REFERENCE.md §4 NiMH column [from memory; typical values, not a cited table].
		OCV:                 curve25(decile, []float64{1.15, 1.22, 1.24, 1.25, 1.26, 1.27, 1.28, 1.29, 1.30, 1.32, 1.38}),
		R0:                  cell.Param{Value: 0.030, ActivationEnergy: 25e3}, // AA 2–2.5 Ah: 20–50 mΩ [from memory]; Ea assumed
		Branches:            []cell.Branch{rc(0.010, 20), rc(0.010, 600)},     // assumed, typical of the trade
		CoulombicEfficiency: 0.90,                                             // lower near top of charge for NiMH [from memory, §2.2]; 0.90 assumed
		// Hysteresis 20–50 mV for NiMH [from memory, REFERENCE.md §4]; rate assumed.
		Hysteresis: cell.Hysteresis{Max: 0.03, Gamma: 20},
		Limits: cell.Limits{
			// No fixed charge limit; the cell peaks at about 1.45–1.55 V at 1 C [from memory].
			// The planner treats this as a ceiling that ends the charge, never as a CV set point.
			ChargeVolts:         1.55,
			CutoffVolts:         1.0,   // [source: IEC 61951-2 via summaries]
			FloorVolts:          0.9,   // 0.9 at high rate [source: IEC 61951-2 via summaries]
			MaxChargeRate:       1.0,   // fast charge 0.5–1 C [source: public charger design notes]
			StandardChargeRate:  0.1,   // 0.1 C for 16 h [source: IEC 61951-2 via summaries]
			MaxDischargeRate:    2.0,   // [from memory]
			NickelDeltaVolts:    0.005, // −ΔV ≈ 5 mV/cell [source: public charger design notes]
			TimerFactor:         1.5,   // backup timer at 120–150 % input [source: public charger design notes]
			ChargeMinCelsius:    0,     // [source: BU-410]
			ChargeMaxCelsius:    45,    // [source: BU-410]
			DischargeMinCelsius: -20,   // [source: BU-410]
			DischargeMaxCelsius: 65,    // [source: BU-410]
		},
		Sources: []string{refSources + "IEC 61951-2 via summaries, public charger design notes, BU-410; §4 NiMH OCV column (from memory)"},
	}
}

// Lead-acid cells. The OCV column is the BCI 12 V table divided by 6 (REFERENCE.md §4,
// [source: BCI]). The rate effect that Peukert's law describes (REFERENCE.md §2.4) is
// carried by a series resistance that rises as the cell empties; see peukertR0.

// leadOCV is REFERENCE.md §4, lead-acid column (BCI ÷ 6) [source: BCI].
var leadOCV = []float64{1.982, 1.993, 2.004, 2.016, 2.028, 2.040, 2.054, 2.068, 2.082, 2.095, 2.108}

// leadRSOC are the SOC knots of the lead-acid resistance tables: dense near empty, where
// the resistance changes fastest.
var leadRSOC = []float64{0, 0.02, 0.05, 0.1, 0.15, 0.2, 0.25, 0.3, 0.4, 0.5, 0.6, 0.8, 1}

// leadRCelsius are the temperature rows of the lead-acid resistance tables.
var leadRCelsius = []float64{-20, 0, 25, 50}

// peukertR0 tabulates a series resistance R0(z, T) under which a constant-current
// discharge from full ends at the cut-off voltage after delivering what Peukert's law
// gives. Peukert (REFERENCE.md §2.4): at current I a battery rated C_H at the H-hour
// current I_H = C_H/H delivers C_H·(I_H/I)^(k−1). Starting full, it is empty at the
// state of charge z = 1 − (I_H/I)^(k−1); solving for the current that empties it at z,
// I(z) = I_H·(1 − z)^(−1/(k−1)). At the cut-off the steady-state drop across the whole
// circuit (R0 plus the RC branch resistance r1, which is fully charged after the
// minutes-long discharge) equals OCV(z) − Vcut, so R0(z) = (OCV(z) − Vcut)/I(z) − r1,
// but never below the measured ohmic resistance rmin. Below the rated current the law
// over-predicts (REFERENCE.md §2.4), and the table simply reaches z = 0 at I_H. The
// rows at other temperatures scale the 25 °C row by an Arrhenius factor with energy ea.
func peukertR0(ocv *table.Surface, vcut, capAh, hours, k, r1, rmin, ea float64) *table.Surface {
	ih := capAh / hours
	rows := make([][]float64, len(leadRCelsius))
	for j, c := range leadRCelsius {
		f := math.Exp(ea / cell.GasConstant * (1/cell.Kelvin(c) - 1/cell.RefKelvin))
		row := make([]float64, len(leadRSOC))
		for i, z := range leadRSOC {
			r := rmin
			if z < 1 {
				cur := ih * math.Pow(1-z, -1/(k-1))
				r = math.Max(rmin, (ocv.At(z, cell.RefKelvin)-vcut)/cur-r1)
			}
			row[i] = r * f
		}
		rows[j] = row
	}
	return surface(leadRSOC, leadRCelsius, rows)
}

// chargeR0 tabulates the lead-acid series resistance on charge ([cell.Type.ChargeR0]).
// On charge the rate effect of discharge is absent, and what limits the current is the
// acceptance (gassing) overpotential near full, which a plain equivalent circuit lacks.
// It is built from an acceptance curve: at the absorption voltage vabs the cell accepts
// I(z) = 0.2·C·10^(−(z − 0.82)/0.17), i.e. 0.2 C at 82 % SOC falling tenfold by 99 %,
// so that a bulk charge at 0.1–0.3 C meets the absorption voltage near 75–90 % SOC and
// the absorption taper to 0.02 C then takes about 3–4 h [assumed, typical of the trade;
// shaped to REFERENCE.md §1a: bulk at 0.1–0.3 C, absorption until I < 0.01–0.03 C or
// 2–4 h, from memory]. The resistance is what makes that current flow,
// R(z) = (vabs − OCV(z))/I(z) − r1, but never below the ohmic rmin. Rows at other
// temperatures scale by the same Arrhenius factor as the discharge resistance.
func chargeR0(ocv *table.Surface, vabs, capAh, r1, rmin, ea float64) *cell.Param {
	soc := []float64{0, 0.6, 0.7, 0.75, 0.8, 0.85, 0.9, 0.95, 1}
	rows := make([][]float64, len(leadRCelsius))
	for j, c := range leadRCelsius {
		f := math.Exp(ea / cell.GasConstant * (1/cell.Kelvin(c) - 1/cell.RefKelvin))
		row := make([]float64, len(soc))
		for i, z := range soc {
			cur := 0.2 * capAh * math.Pow(10, -(z-0.82)/0.17)
			row[i] = math.Max(rmin, (vabs-ocv.At(z, cell.RefKelvin))/cur-r1) * f
		}
		rows[j] = row
	}
	return &cell.Param{Table: surface(soc, leadRCelsius, rows)}
}

func vrlaCell() *cell.Type {
	ocv := curve25(decile, leadOCV)
	const (
		capAh = 7.0  // a 12 V 7 Ah block is a common small VRLA size [from memory]; 20-hour rating [common practice]
		vcut  = 1.75 // [common practice] (10.5 V per 12 V block)
		r1    = 0.003
		rmin  = 0.0040 // 12 V 7 Ah block: 20–25 mΩ, i.e. 3.3–4.2 mΩ per cell [source: maker figure quoted publicly]
		k     = 1.10   // VRLA/AGM Peukert k 1.05–1.15 [from memory]
		ea    = 15e3   // resistance growth in the cold [assumed, typical of the trade]
	)
	return &cell.Type{
		Name:         "generic-vrla-2v-cell",
		Description:  "one 2 V cell of a generic valve-regulated (AGM) lead-acid block; a 12 V block is 6 in series",
		Chemistry:    cell.ChemistryVRLA,
		ChargeMethod: cell.ChargeThreeStage, // bulk, absorption, float [source: BU-LA]
		CapacityAh:   capAh,
		NominalVolts: 2.0, // [common practice]
		OCV:          ocv, // [source: BCI] ÷ 6
		// Peukert-type rate effect through the resistance (k from memory), see peukertR0.
		R0:                  cell.Param{Table: peukertR0(ocv, vcut, capAh, 20, k, r1, rmin, ea)},
		ChargeR0:            chargeR0(ocv, 2.40, capAh, r1, rmin, ea), // on charge: acceptance, see chargeR0
		Branches:            []cell.Branch{rc(r1, 100)},               // polarisation [assumed, typical of the trade]
		CoulombicEfficiency: 0.92,                                     // lower near top of charge for lead-acid [from memory, §2.2]; value assumed
		Limits: cell.Limits{
			ChargeVolts:         2.40,   // absorption [source: BU-LA]; 2.40–2.45 [from memory]
			FloatVolts:          2.27,   // VRLA float 2.25–2.30 [2.30 example: source: BU-LA; range from memory]
			CutoffVolts:         vcut,   // 1.75 V [common practice]
			FloorVolts:          1.60,   // 1.60–1.70 at high rate [from memory]
			MaxChargeRate:       0.3,    // bulk CC at 0.1–0.3 C [from memory]
			StandardChargeRate:  0.1,    // [from memory]
			MaxDischargeRate:    3.0,    // [from memory]
			TerminationRate:     0.02,   // absorption until I < 0.01–0.03 C [from memory]
			TempCompVoltsPerK:   -0.003, // −3 mV/°C/cell from 25 °C [source: BU-LA]
			ChargeMinCelsius:    -20,    // [source: BU-410]
			ChargeMaxCelsius:    50,     // [source: BU-410]
			DischargeMinCelsius: -20,    // [source: BU-410]
			DischargeMaxCelsius: 50,     // [source: BU-410]
		},
		Sources: []string{refSources + "BCI (OCV), BU-LA (charge voltages, compensation), BU-410 (windows); Peukert k from memory"},
	}
}

func floodedCell() *cell.Type {
	ocv := curve25(decile, leadOCV)
	const (
		capAh = 100.0 // a 12 V 100 Ah deep-cycle block, as in REFERENCE.md E2 [common practice size]
		vcut  = 1.75  // at C/20–C/10 [from memory]
		r1    = 0.0002
		rmin  = 0.0007 // 12 V 100 Ah block: 3–6 mΩ, i.e. 0.5–1 mΩ per cell [from memory]
		k     = 1.20   // flooded 1.1–1.3 [source: WP-Peukert]; 1.2 as in REFERENCE.md E2
		ea    = 15e3   // [assumed, typical of the trade]
	)
	return &cell.Type{
		Name:         "generic-flooded-2v-cell",
		Description:  "one 2 V cell of a generic flooded deep-cycle lead-acid block; a 12 V block is 6 in series",
		Chemistry:    cell.ChemistryLeadAcid,
		ChargeMethod: cell.ChargeThreeStage, // [source: BU-LA]
		CapacityAh:   capAh,
		NominalVolts: 2.0, // [source: BCI]
		OCV:          ocv, // [source: BCI] ÷ 6
		R0:           cell.Param{Table: peukertR0(ocv, vcut, capAh, 20, k, r1, rmin, ea)},
		ChargeR0:     chargeR0(ocv, 2.40, capAh, r1, rmin, ea), // on charge: acceptance, see chargeR0
		Branches:     []cell.Branch{rc(r1, 100)},               // [assumed, typical of the trade]
		// Lower near top of charge [from memory, §2.2]; value assumed.
		CoulombicEfficiency: 0.90,
		Limits: cell.Limits{
			ChargeVolts:         2.40,   // [source: BU-LA]
			FloatVolts:          2.25,   // 2.20–2.27 [from memory]
			CutoffVolts:         vcut,   // [from memory]
			FloorVolts:          1.60,   // [from memory]
			MaxChargeRate:       0.3,    // [from memory]
			StandardChargeRate:  0.1,    // [from memory]
			MaxDischargeRate:    2.0,    // [from memory]
			TerminationRate:     0.02,   // [from memory]
			TempCompVoltsPerK:   -0.003, // [source: BU-LA]
			ChargeMinCelsius:    -20,    // [source: BU-410]
			ChargeMaxCelsius:    50,     // [source: BU-410]
			DischargeMinCelsius: -20,    // [source: BU-410]
			DischargeMaxCelsius: 50,     // [source: BU-410]
		},
		Sources: []string{refSources + "BCI (OCV), BU-LA (charge voltages, compensation), BU-410 (windows), WP-Peukert (k)"},
	}
}

func alkalineAA() *cell.Type {
	return &cell.Type{
		Name:         "generic-alkaline-aa",
		Description:  "generic alkaline zinc–manganese dioxide primary cell, AA size; never charge",
		Chemistry:    cell.ChemistryAlkaline,
		ChargeMethod: cell.ChargeNone, // never charge [common practice]
		CapacityAh:   2.5,             // alkaline AA 1.7–3.0 Ah at low drain [source: public AA summary page]
		NominalVolts: 1.5,             // [source: maker web page]
		// Fresh OCV about 1.58 V [source: maker web page]; the rest of the curve assumed, typical of the trade.
		OCV: curve25(decile, []float64{1.05, 1.20, 1.25, 1.30, 1.34, 1.38, 1.42, 1.46, 1.50, 1.54, 1.58}),
		// Fresh 0.1–0.3 Ω, rising as it discharges [source: public electronics page; from memory].
		R0: cell.Param{Table: surface(
			[]float64{0, 0.2, 0.5, 1},
			[]float64{-20, 0, 25, 50},
			[][]float64{
				{2.5, 1.2, 0.60, 0.35}, // cold rows assumed, typical of the trade
				{1.6, 0.8, 0.40, 0.22},
				{1.0, 0.5, 0.25, 0.15},
				{0.8, 0.4, 0.20, 0.12},
			})},
		Branches: []cell.Branch{rc(0.05, 60)}, // assumed, typical of the trade
		Limits: cell.Limits{
			CutoffVolts:         0.9, // 0.8–0.9, device-dependent [from memory]
			FloorVolts:          0.8, // [from memory]
			MaxDischargeRate:    0.4, // about 1 A continuous for an AA [from memory]
			DischargeMinCelsius: -20, // [source: maker spec quoted publicly]
			DischargeMaxCelsius: 54,  // [source: maker spec quoted publicly]
		},
		Sources: []string{refSources + "maker web page (OCV, nominal), public AA summary page (capacity); curve shape assumed"},
	}
}

func liMnO2Coin() *cell.Type {
	return &cell.Type{
		Name:         "generic-li-mno2-coin",
		Description:  "generic lithium–manganese dioxide primary coin cell, 20 mm × 3.2 mm class; never charge",
		Chemistry:    cell.ChemistryLiMnO2,
		ChargeMethod: cell.ChargeNone, // never charge [common practice]
		CapacityAh:   0.225,           // about 220–240 mAh [from memory]
		NominalVolts: 3.0,             // [source: CR2032]
		// Flat plateau near 2.9–3.0 V, fresh about 3.2–3.3 V [from memory]; curve assumed.
		OCV: curve25(
			[]float64{0, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1},
			[]float64{2.40, 2.70, 2.85, 2.93, 2.96, 2.98, 3.00, 3.02, 3.04, 3.06, 3.10, 3.25}),
		R0:       cell.Param{Value: 20, ActivationEnergy: 20e3}, // 10–40 Ω [source: public CR2032 page]; Ea assumed
		Branches: []cell.Branch{rc(10, 5)},                      // pulse recovery [assumed, typical of the trade]
		Limits: cell.Limits{
			CutoffVolts:         2.0,   // [source: CR2032]
			FloorVolts:          2.0,   // [source: CR2032]
			MaxDischargeRate:    0.015, // about 3 mA continuous [from memory]
			DischargeMinCelsius: -20,   // [source: CR2032]
			DischargeMaxCelsius: 70,    // [source: CR2032]
		},
		Sources: []string{refSources + "CR2032 (nominal, cut-off, window, resistance); OCV curve assumed"},
	}
}

func liSOCl2AA() *cell.Type {
	return &cell.Type{
		Name:         "generic-li-socl2-aa",
		Description:  "generic lithium–thionyl chloride primary bobbin cell, AA size; never charge",
		Chemistry:    cell.ChemistryLiSOCl2,
		ChargeMethod: cell.ChargeNone, // never charge [common practice]
		CapacityAh:   2.4,             // bobbin AA about 2.4–2.6 Ah at low rate [from memory]
		NominalVolts: 3.6,             // [from memory]
		// OCV about 3.67 V, very flat [from memory]; curve assumed.
		OCV: curve25(
			[]float64{0, 0.05, 0.1, 0.3, 0.5, 0.7, 0.9, 1},
			[]float64{3.00, 3.35, 3.55, 3.62, 3.64, 3.65, 3.66, 3.67}),
		R0:       cell.Param{Value: 8, ActivationEnergy: 25e3}, // a few Ω to tens of Ω [from memory]; Ea assumed
		Branches: []cell.Branch{rc(5, 30)},                     // passivation recovery [assumed, typical of the trade]
		Limits: cell.Limits{
			CutoffVolts:         2.0,  // 2.0 (up to 3.0, by design) [from memory]
			FloorVolts:          2.0,  // [from memory]
			MaxDischargeRate:    0.05, // poor pulse capability [from memory]; value assumed
			DischargeMinCelsius: -55,  // [source: maker pages]
			DischargeMaxCelsius: 85,   // [source: maker pages]
		},
		Sources: []string{refSources + "maker pages (window); other values from memory or assumed"},
	}
}
