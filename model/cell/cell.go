package cell

import (
	"errors"
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/table"
)

// CelsiusOffset converts °C to K (SI definition).
const CelsiusOffset = table.CelsiusOffset

// RefKelvin is the reference temperature of Arrhenius-scaled parameters, 25 °C.
const RefKelvin = 298.15

// GasConstant is the molar gas constant in J/(mol·K) (CODATA 2018, exact).
const GasConstant = 8.314462618

// MaxBranches is the largest number of RC branches a type may have.
const MaxBranches = 3

// Chemistry names a cell chemistry family.
type Chemistry string

// The chemistry families the model knows. The set is open: a fitted type may carry any
// of these.
const (
	ChemistryNMC        Chemistry = "nmc"            // lithium nickel-manganese-cobalt oxide / graphite
	ChemistryNCA        Chemistry = "nca"            // lithium nickel-cobalt-aluminium oxide / graphite
	ChemistryLCO        Chemistry = "lco"            // lithium cobalt oxide / graphite
	ChemistryLMO        Chemistry = "lmo"            // lithium manganese oxide (blends) / graphite
	ChemistryLFP        Chemistry = "lfp"            // lithium iron phosphate / graphite
	ChemistryLTO        Chemistry = "lto"            // lithium titanate anode
	ChemistryNiMH       Chemistry = "nimh"           // nickel-metal hydride
	ChemistryNiCd       Chemistry = "nicd"           // nickel-cadmium
	ChemistryLeadAcid   Chemistry = "lead-acid"      // flooded lead-acid
	ChemistryVRLA       Chemistry = "lead-acid-vrla" // valve-regulated lead-acid (AGM, gel)
	ChemistryAlkaline   Chemistry = "alkaline"       // primary zinc–manganese dioxide
	ChemistryLiMnO2     Chemistry = "li-mno2"        // primary lithium–manganese dioxide
	ChemistryLiSOCl2    Chemistry = "li-socl2"       // primary lithium–thionyl chloride
	ChemistryZincCarbon Chemistry = "zinc-carbon"    // primary Leclanché cell
)

// Primary reports whether c is a primary (non-rechargeable) chemistry of the set above,
// one that must never be charged whatever a parameter file says.
func (c Chemistry) Primary() bool {
	switch c {
	case ChemistryAlkaline, ChemistryLiMnO2, ChemistryLiSOCl2, ChemistryZincCarbon:
		return true
	}
	return false
}

// ChargeMethod names how a chemistry is charged.
type ChargeMethod string

// Charge methods. ChargeNone marks a primary cell, which must never be charged.
const (
	ChargeNone       ChargeMethod = "none"        // primary cell: never charge
	ChargeCCCV       ChargeMethod = "cc-cv"       // constant current, then constant voltage with taper termination
	ChargeThreeStage ChargeMethod = "three-stage" // lead-acid bulk, absorption, float
	ChargeNickel     ChargeMethod = "nickel"      // constant current with −ΔV / temperature / timer termination
)

// Param is a model parameter (a resistance in Ω or a capacitance in F, per cell) that
// depends on state of charge and temperature. If Table is set it is used; otherwise the
// parameter is Value at 25 °C scaled with temperature by the Arrhenius law
//
//	p(T) = Value·exp[(Ea/R)·(1/T − 1/Tref)]
//
// (Arrhenius 1889; see ../shared/REFERENCE.md §2.6). For resistances Ea > 0 makes the
// value grow in the cold; Ea = 0 makes it constant.
type Param struct {
	Value            float64        `json:"value,omitempty"`
	ActivationEnergy float64        `json:"activation_energy_joules_per_mole,omitempty"`
	Table            *table.Surface `json:"table,omitempty"`
}

// At returns the parameter at state of charge z and temperature tk (K).
func (p *Param) At(z, tk float64) float64 {
	if p.Table != nil {
		return p.Table.At(z, tk)
	}
	if p.ActivationEnergy == 0 {
		return p.Value
	}
	return p.Value * math.Exp(p.ActivationEnergy/GasConstant*(1/tk-1/RefKelvin))
}

// Branch is one parallel RC pair of the equivalent circuit, per cell.
//
// ExchangeCurrent, when set, makes the branch a charge-transfer branch whose resistor
// follows the Butler–Volmer relation instead of Ohm's law. With a symmetric energy
// barrier (transfer coefficient ½) the current–overpotential relation of an electrode
// reaction is i = 2·i₀·sinh(F·η/(2·R·T)), so η = (2RT/F)·asinh(i/(2·i₀)) and the
// small-signal (charge-transfer) resistance is RT/(F·i₀) (Butler–Volmer equation, e.g.
// A. J. Bard and L. R. Faulkner, Electrochemical Methods, 2nd ed., Wiley 2001, §3.4
// [from memory]). The branch keeps R as its small-signal resistance and i₀ =
// ExchangeCurrent (A per cell) as a separate parameter, so that its steady-state voltage
// under a constant current i is
//
//	R·u(i),  u(i) = 2·i₀·asinh(i/(2·i₀)),
//
// which is the Butler–Volmer overpotential when R = RT/(F·i₀) and a lumped form of it
// (an apparent transfer coefficient) otherwise. The resistance per ampere falls as the
// current grows, as measured on cold lithium-ion cells, and u(i) → i as i₀ → ∞. The
// branch is the static nonlinearity u followed by the linear RC dynamics (a Hammerstein
// structure), so the exact zero-order-hold update of [Pack.Step] still holds with i
// replaced by u(i). Nil (the default, and what older parameter files load as) means
// Ohm's law.
type Branch struct {
	R               Param  `json:"resistance_ohms"`
	C               Param  `json:"capacitance_farads"`
	ExchangeCurrent *Param `json:"exchange_current_amps,omitempty"` // i₀ per cell, A; see above
}

// Drive returns the branch's effective current u(ic) (A) for cell current ic at state of
// charge z and temperature tk (K), and its derivative du/di: ic and 1 for an ohmic
// branch, u = 2·i₀·asinh(ic/(2·i₀)) and 1/√(1 + (ic/(2·i₀))²) for a charge-transfer
// branch (see [Branch]). The branch voltage settles at R·u under a constant current.
// It does not allocate.
func (b *Branch) Drive(ic, z, tk float64) (u, dudi float64) {
	if b.ExchangeCurrent == nil {
		return ic, 1
	}
	i2 := 2 * b.ExchangeCurrent.At(z, tk)
	if !(i2 > 0) {
		return ic, 1
	}
	x := ic / i2
	return i2 * math.Asinh(x), 1 / math.Sqrt(1+x*x)
}

// Hysteresis is Plett's one-state dynamic hysteresis (J. Power Sources 134(2):262–276,
// 2004, Part 2 eq. 9): h relaxes towards −Max·sign(i) at a rate proportional to the
// charge passed, dh/dt = −|η·i·Gamma/(3600·Q)|·(h + Max·sign(i)). The zero value
// disables it.
type Hysteresis struct {
	Max   float64 `json:"max_volts,omitempty"` // V per cell, ≥ 0
	Gamma float64 `json:"rate,omitempty"`      // dimensionless rate constant, ≥ 0
}

// Limits are the operating limits of one cell. Temperatures are in °C, voltages are per
// cell, currents are C-rates (multiples of the rated capacity in Ah, per hour).
type Limits struct {
	ChargeVolts         float64 `json:"charge_voltage_volts"`                                // CV set point / lead-acid absorption; 0 for primaries
	FloatVolts          float64 `json:"float_voltage_volts,omitempty"`                       // lead-acid float; 0 if not used
	CutoffVolts         float64 `json:"cutoff_voltage_volts"`                                // end of discharge, typical
	FloorVolts          float64 `json:"floor_voltage_volts"`                                 // absolute minimum; never go below
	MaxChargeRate       float64 `json:"max_charge_c_rate"`                                   // largest charge current in C; 0 for primaries
	StandardChargeRate  float64 `json:"standard_charge_c_rate"`                              // usual charge current in C
	MaxDischargeRate    float64 `json:"max_discharge_c_rate"`                                // largest continuous discharge in C
	TerminationRate     float64 `json:"termination_c_rate,omitempty"`                        // CV / absorption taper end in C
	ChargeMinCelsius    float64 `json:"charge_min_celsius"`                                  // lowest temperature to charge at
	ChargeMaxCelsius    float64 `json:"charge_max_celsius"`                                  // highest temperature to charge at
	DischargeMinCelsius float64 `json:"discharge_min_celsius"`                               // lowest temperature to discharge at
	DischargeMaxCelsius float64 `json:"discharge_max_celsius"`                               // highest temperature to discharge at
	TempCompVoltsPerK   float64 `json:"temperature_compensation_volts_per_kelvin,omitempty"` // charge voltage slope per cell (lead-acid, negative)
	NickelDeltaVolts    float64 `json:"nickel_delta_volts,omitempty"`                        // −ΔV termination per cell (nickel), positive number
	TimerFactor         float64 `json:"timer_factor,omitempty"`                              // backup timer as a multiple of the rated charge (nickel), e.g. 1.5
}

// Type is the parameter set of one cell design: its chemistry, capacity, open-circuit
// voltage, equivalent circuit and limits, all per cell. A Type is a value; once
// validated, it must not be changed while packs use it. The JSON form is the parameter
// file that the command-line tool reads and writes and the service stores.
//
// ChargeR0, when set, replaces R0 while the cell is charging (a direction-dependent
// series resistance, common practice in equivalent-circuit fits). Lead-acid needs it: its
// discharge resistance carries the rate effect and rises towards empty, while on charge
// the resistance is small until the acceptance overpotential (gassing) rises towards
// full. Nil means R0 in both directions.
type Type struct {
	Name                string         `json:"name"`
	Description         string         `json:"description,omitempty"`
	Chemistry           Chemistry      `json:"chemistry"`
	ChargeMethod        ChargeMethod   `json:"charge_method"`
	CapacityAh          float64        `json:"capacity_amp_hours"`    // rated capacity, Ah
	NominalVolts        float64        `json:"nominal_voltage_volts"` // nominal voltage, V
	OCV                 *table.Surface `json:"ocv"`                   // OCV(z, T) in V
	R0                  Param          `json:"series_resistance_ohms"`
	ChargeR0            *Param         `json:"charge_series_resistance_ohms,omitempty"` // R0 on charge if set, see above
	Branches            []Branch       `json:"rc_branches,omitempty"`
	CoulombicEfficiency float64        `json:"coulombic_efficiency,omitempty"` // on charge, (0, 1]; 0 means 1
	Hysteresis          Hysteresis     `json:"hysteresis,omitempty"`
	Limits              Limits         `json:"limits"`
	Sources             []string       `json:"sources,omitempty"` // where the values come from
}

// Rechargeable reports whether the type may be charged at all.
func (t *Type) Rechargeable() bool { return t.ChargeMethod != ChargeNone && t.ChargeMethod != "" }

// Efficiency returns the coulombic efficiency on charge (1 when unset).
func (t *Type) Efficiency() float64 {
	if t.CoulombicEfficiency == 0 {
		return 1
	}
	return t.CoulombicEfficiency
}

// FieldError is a validation failure of one field of a type, pack, state or request.
type FieldError struct {
	Field  string // dotted JSON path, e.g. "limits.cutoff_voltage_volts"
	Reason string // what is wrong, lowercase, no final punctuation
}

// Error returns "field: reason".
func (e *FieldError) Error() string { return e.Field + ": " + e.Reason }

// Is makes every FieldError match [ErrInvalid].
func (e *FieldError) Is(target error) bool { return target == ErrInvalid }

// ErrInvalid is matched (errors.Is) by every validation error of this package and of the
// packages that build on it.
var ErrInvalid = errors.New("invalid argument")

// Invalid returns a [*FieldError].
func Invalid(field, format string, args ...any) error {
	return &FieldError{Field: field, Reason: fmt.Sprintf(format, args...)}
}

// Finite reports whether v is neither NaN nor infinite.
func Finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// CheckCelsius validates a temperature in °C against the range the model accepts,
// −60 to 100 °C.
func CheckCelsius(field string, c float64) error {
	if !Finite(c) {
		return Invalid(field, "temperature must be finite, got %g", c)
	}
	if c < -60 || c > 100 {
		return Invalid(field, "temperature %g °C is outside the modelled range -60 to 100 °C", c)
	}
	return nil
}

// CheckSOC validates a state of charge fraction.
func CheckSOC(field string, z float64) error {
	if !Finite(z) || z < 0 || z > 1 {
		return Invalid(field, "state of charge must be a fraction in [0, 1], got %g", z)
	}
	return nil
}

func checkParam(field string, p *Param, positive bool) error {
	if p.Table != nil {
		for j := range p.Table.NumTemps() {
			c := p.Table.Curve(j)
			for i := range c.Len() {
				_, v := c.Knot(i)
				if v < 0 || (positive && v == 0) {
					return Invalid(field+".table", "values must be %s, got %g", sign(positive), v)
				}
			}
		}
		return nil
	}
	if !Finite(p.Value) || p.Value < 0 || (positive && p.Value == 0) {
		return Invalid(field+".value", "must be finite and %s, got %g", sign(positive), p.Value)
	}
	if !Finite(p.ActivationEnergy) || p.ActivationEnergy < 0 || p.ActivationEnergy > 200e3 {
		return Invalid(field+".activation_energy_joules_per_mole", "must be in [0, 200000] J/mol, got %g", p.ActivationEnergy)
	}
	return nil
}

// branchErr prefixes the field of a branch parameter's error with the branch; the
// index is formatted only on failure, so a valid type validates without allocating.
func branchErr(k int, err error) error {
	var fe *FieldError
	if errors.As(err, &fe) {
		return &FieldError{Field: fmt.Sprintf("rc_branches[%d].%s", k, fe.Field), Reason: fe.Reason}
	}
	return err
}

func sign(positive bool) string {
	if positive {
		return "positive"
	}
	return "non-negative"
}

// Validate checks that the type is complete and physically possible. It returns the
// first problem found as a [*FieldError].
func (t *Type) Validate() error {
	if t.Name == "" {
		return Invalid("name", "must not be empty")
	}
	switch t.ChargeMethod {
	case ChargeNone, ChargeCCCV, ChargeThreeStage, ChargeNickel:
	default:
		return Invalid("charge_method", "unknown charge method %q (want none, cc-cv, three-stage or nickel)", t.ChargeMethod)
	}
	if t.Chemistry.Primary() && t.Rechargeable() {
		return Invalid("charge_method", "%s is a primary (non-rechargeable) chemistry, which must never be charged; want none, got %s",
			t.Chemistry, t.ChargeMethod)
	}
	if !Finite(t.CapacityAh) || t.CapacityAh <= 0 {
		return Invalid("capacity_amp_hours", "must be positive and finite, got %g", t.CapacityAh)
	}
	if !Finite(t.NominalVolts) || t.NominalVolts <= 0 {
		return Invalid("nominal_voltage_volts", "must be positive and finite, got %g", t.NominalVolts)
	}
	if t.OCV == nil {
		return Invalid("ocv", "table is required")
	}
	if err := t.OCV.NonDecreasing(); err != nil {
		return Invalid("ocv", "%v", err)
	}
	if lo, hi := t.OCV.Curve(0).Domain(); lo < 0 || hi > 1 {
		return Invalid("ocv.soc", "state of charge knots must lie in [0, 1], got %g to %g", lo, hi)
	}
	if err := checkParam("series_resistance_ohms", &t.R0, false); err != nil {
		return err
	}
	if t.ChargeR0 != nil {
		if err := checkParam("charge_series_resistance_ohms", t.ChargeR0, false); err != nil {
			return err
		}
	}
	if len(t.Branches) > MaxBranches {
		return Invalid("rc_branches", "at most %d RC branches, got %d", MaxBranches, len(t.Branches))
	}
	for k := range t.Branches {
		if err := checkParam("resistance_ohms", &t.Branches[k].R, true); err != nil {
			return branchErr(k, err)
		}
		if err := checkParam("capacitance_farads", &t.Branches[k].C, true); err != nil {
			return branchErr(k, err)
		}
		if x := t.Branches[k].ExchangeCurrent; x != nil {
			if err := checkParam("exchange_current_amps", x, true); err != nil {
				return branchErr(k, err)
			}
		}
	}
	if e := t.CoulombicEfficiency; !Finite(e) || e < 0 || e > 1 {
		return Invalid("coulombic_efficiency", "must be in (0, 1], got %g", e)
	}
	if h := t.Hysteresis; !Finite(h.Max) || !Finite(h.Gamma) || h.Max < 0 || h.Gamma < 0 || h.Max > 0.5 {
		return Invalid("hysteresis", "max_volts must be in [0, 0.5] and rate non-negative, got %g and %g", h.Max, h.Gamma)
	}
	return t.Limits.validate(t.Rechargeable())
}

func (l *Limits) validate(rechargeable bool) error {
	for _, f := range []struct {
		name string
		v    float64
	}{
		{"charge_voltage_volts", l.ChargeVolts}, {"float_voltage_volts", l.FloatVolts},
		{"cutoff_voltage_volts", l.CutoffVolts}, {"floor_voltage_volts", l.FloorVolts},
		{"max_charge_c_rate", l.MaxChargeRate}, {"standard_charge_c_rate", l.StandardChargeRate},
		{"max_discharge_c_rate", l.MaxDischargeRate}, {"termination_c_rate", l.TerminationRate},
		{"nickel_delta_volts", l.NickelDeltaVolts}, {"timer_factor", l.TimerFactor},
	} {
		if !Finite(f.v) || f.v < 0 {
			return Invalid("limits."+f.name, "must be finite and non-negative, got %g", f.v)
		}
	}
	if !Finite(l.TempCompVoltsPerK) || math.Abs(l.TempCompVoltsPerK) > 0.05 {
		return Invalid("limits.temperature_compensation_volts_per_kelvin", "must be finite and within ±0.05 V/K, got %g", l.TempCompVoltsPerK)
	}
	if l.CutoffVolts <= 0 {
		return Invalid("limits.cutoff_voltage_volts", "must be positive, got %g", l.CutoffVolts)
	}
	if l.FloorVolts > l.CutoffVolts {
		return Invalid("limits.floor_voltage_volts", "floor %g V is above the cut-off %g V", l.FloorVolts, l.CutoffVolts)
	}
	if l.MaxDischargeRate <= 0 {
		return Invalid("limits.max_discharge_c_rate", "must be positive, got %g", l.MaxDischargeRate)
	}
	// Whole field names are constants, so a valid type validates without allocating
	// (a forecast validates its pack on every call).
	for _, f := range [...]struct {
		name string
		v    float64
	}{
		{"limits.charge_min_celsius", l.ChargeMinCelsius}, {"limits.charge_max_celsius", l.ChargeMaxCelsius},
		{"limits.discharge_min_celsius", l.DischargeMinCelsius}, {"limits.discharge_max_celsius", l.DischargeMaxCelsius},
	} {
		if err := CheckCelsius(f.name, f.v); err != nil {
			return err
		}
	}
	if l.DischargeMinCelsius >= l.DischargeMaxCelsius {
		return Invalid("limits.discharge_min_celsius", "discharge window %g to %g °C is empty", l.DischargeMinCelsius, l.DischargeMaxCelsius)
	}
	if !rechargeable {
		return nil
	}
	if l.ChargeVolts <= l.CutoffVolts {
		return Invalid("limits.charge_voltage_volts", "charge voltage %g V must be above the cut-off %g V", l.ChargeVolts, l.CutoffVolts)
	}
	if l.MaxChargeRate <= 0 {
		return Invalid("limits.max_charge_c_rate", "must be positive for a rechargeable type, got %g", l.MaxChargeRate)
	}
	if l.StandardChargeRate > l.MaxChargeRate {
		return Invalid("limits.standard_charge_c_rate", "standard rate %g C exceeds the maximum %g C", l.StandardChargeRate, l.MaxChargeRate)
	}
	if l.ChargeMinCelsius >= l.ChargeMaxCelsius {
		return Invalid("limits.charge_min_celsius", "charge window %g to %g °C is empty", l.ChargeMinCelsius, l.ChargeMaxCelsius)
	}
	return nil
}
