package service

import (
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/table"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

// Size limits of a battery type's tables, far above any real table and low enough that
// a request cannot make the server build enormous interpolants.
const (
	maxSurfaceKnots = 1000
	maxSurfaceTemps = 50
	maxSources      = 50
	maxSourceBytes  = 500
	maxDisplayName  = 200
	maxDescription  = 2000
)

// Plausibility ranges of a registered type's magnitudes, per cell. They are far
// outside any real cell (a coin cell holds about 0.01 Ah, a large stationary cell a
// few thousand; no single cell exceeds a few volts) and keep a value in the wrong unit
// (mAh as Ah, mV as V) or an absurd one such as 1e308 from reaching the estimator,
// where it overflowed the tracked state of charge to NaN.
const (
	minCellAmpHours = 1e-4
	maxCellAmpHours = 1e5
	maxCellVolts    = 100
	maxCellOhms     = 1e4
	maxCRate        = 1000
)

var chemistryToPB = map[cell.Chemistry]pb.Chemistry{
	cell.ChemistryNMC:        pb.Chemistry_CHEMISTRY_NMC,
	cell.ChemistryNCA:        pb.Chemistry_CHEMISTRY_NCA,
	cell.ChemistryLCO:        pb.Chemistry_CHEMISTRY_LCO,
	cell.ChemistryLMO:        pb.Chemistry_CHEMISTRY_LMO,
	cell.ChemistryLFP:        pb.Chemistry_CHEMISTRY_LFP,
	cell.ChemistryLTO:        pb.Chemistry_CHEMISTRY_LTO,
	cell.ChemistryNiMH:       pb.Chemistry_CHEMISTRY_NIMH,
	cell.ChemistryNiCd:       pb.Chemistry_CHEMISTRY_NICD,
	cell.ChemistryLeadAcid:   pb.Chemistry_CHEMISTRY_LEAD_ACID,
	cell.ChemistryVRLA:       pb.Chemistry_CHEMISTRY_LEAD_ACID_VRLA,
	cell.ChemistryAlkaline:   pb.Chemistry_CHEMISTRY_ALKALINE,
	cell.ChemistryLiMnO2:     pb.Chemistry_CHEMISTRY_LITHIUM_MANGANESE_DIOXIDE,
	cell.ChemistryLiSOCl2:    pb.Chemistry_CHEMISTRY_LITHIUM_THIONYL_CHLORIDE,
	cell.ChemistryZincCarbon: pb.Chemistry_CHEMISTRY_ZINC_CARBON,
}

var chemistryFromPB = invert(chemistryToPB)

var chargeMethodToPB = map[cell.ChargeMethod]pb.ChargeMethod{
	cell.ChargeNone:       pb.ChargeMethod_CHARGE_METHOD_NONE,
	cell.ChargeCCCV:       pb.ChargeMethod_CHARGE_METHOD_CONSTANT_CURRENT_CONSTANT_VOLTAGE,
	cell.ChargeThreeStage: pb.ChargeMethod_CHARGE_METHOD_THREE_STAGE,
	cell.ChargeNickel:     pb.ChargeMethod_CHARGE_METHOD_NICKEL,
}

var chargeMethodFromPB = invert(chargeMethodToPB)

func invert[K, V comparable](m map[K]V) map[V]K {
	out := make(map[V]K, len(m))
	for k, v := range m {
		out[v] = k
	}
	return out
}

// typeToPB converts a model type to its API form; name is the resource name. The
// display name and output-only fields are the caller's to set.
func typeToPB(t *cell.Type, name string) *pb.BatteryType {
	out := &pb.BatteryType{
		Name:                    name,
		Description:             t.Description,
		Chemistry:               chemistryToPB[t.Chemistry],
		ChargeMethod:            chargeMethodToPB[t.ChargeMethod],
		CapacityAmpHours:        t.CapacityAh,
		NominalVoltageVolts:     t.NominalVolts,
		OpenCircuitVoltageVolts: surfaceToPB(t.OCV),
		SeriesResistanceOhms:    paramToPB(&t.R0),
		CoulombicEfficiency:     t.CoulombicEfficiency,
		Sources:                 append([]string(nil), t.Sources...),
		Limits: &pb.CellLimits{
			ChargeVoltageVolts:                    t.Limits.ChargeVolts,
			FloatVoltageVolts:                     t.Limits.FloatVolts,
			CutoffVoltageVolts:                    t.Limits.CutoffVolts,
			FloorVoltageVolts:                     t.Limits.FloorVolts,
			MaxChargeCRate:                        t.Limits.MaxChargeRate,
			StandardChargeCRate:                   t.Limits.StandardChargeRate,
			MaxDischargeCRate:                     t.Limits.MaxDischargeRate,
			TerminationCRate:                      t.Limits.TerminationRate,
			ChargeMinCelsius:                      t.Limits.ChargeMinCelsius,
			ChargeMaxCelsius:                      t.Limits.ChargeMaxCelsius,
			DischargeMinCelsius:                   t.Limits.DischargeMinCelsius,
			DischargeMaxCelsius:                   t.Limits.DischargeMaxCelsius,
			TemperatureCompensationVoltsPerKelvin: t.Limits.TempCompVoltsPerK,
			NickelDeltaVolts:                      t.Limits.NickelDeltaVolts,
			TimerFactor:                           t.Limits.TimerFactor,
		},
	}
	if t.Hysteresis != (cell.Hysteresis{}) {
		out.Hysteresis = &pb.Hysteresis{MaxVolts: t.Hysteresis.Max, Rate: t.Hysteresis.Gamma}
	}
	for k := range t.Branches {
		out.RcBranches = append(out.RcBranches, &pb.RcBranch{
			ResistanceOhms:    paramToPB(&t.Branches[k].R),
			CapacitanceFarads: paramToPB(&t.Branches[k].C),
		})
	}
	return out
}

func paramToPB(p *cell.Param) *pb.TemperatureParameter {
	return &pb.TemperatureParameter{
		Value:                         p.Value,
		ActivationEnergyJoulesPerMole: p.ActivationEnergy,
		Table:                         surfaceToPB(p.Table),
	}
}

func surfaceToPB(s *table.Surface) *pb.Surface {
	if s == nil {
		return nil
	}
	temps := s.Temps()
	out := &pb.Surface{TemperaturesCelsius: make([]float64, len(temps)), Rows: make([]*pb.SurfaceRow, len(temps))}
	for j, tk := range temps {
		// Round the kelvin→°C conversion to 1e-9 °C so that 25 °C does not come back as
		// 24.999999999999996.
		out.TemperaturesCelsius[j] = math.Round((tk-table.CelsiusOffset)*1e9) / 1e9
		c := s.Curve(j)
		row := make([]float64, c.Len())
		for i := range c.Len() {
			x, y := c.Knot(i)
			if j == 0 {
				out.StateOfChargeKnots = append(out.StateOfChargeKnots, x)
			}
			row[i] = y
		}
		out.Rows[j] = &pb.SurfaceRow{Values: row}
	}
	return out
}

// typeFromPB converts and validates an API battery type. field is the request path of
// in (e.g. "battery_type"); every problem is reported under it. id becomes the model
// type's name. The model's own validation ([cell.Type.Validate]) runs last.
func typeFromPB(field string, in *pb.BatteryType, id string) (*cell.Type, error) {
	var v violations
	if in == nil {
		v.add(field, "is required")
		return nil, v.err()
	}
	f := func(s string) string { return field + "." + s }
	t := &cell.Type{
		Name:                id,
		Description:         in.GetDescription(),
		CapacityAh:          in.GetCapacityAmpHours(),
		NominalVolts:        in.GetNominalVoltageVolts(),
		CoulombicEfficiency: in.GetCoulombicEfficiency(),
	}
	if n := len(in.GetDisplayName()); n > maxDisplayName {
		v.add(f("display_name"), "at most %d bytes, got %d", maxDisplayName, n)
	}
	if n := len(t.Description); n > maxDescription {
		v.add(f("description"), "at most %d bytes, got %d", maxDescription, n)
	}
	var ok bool
	if t.Chemistry, ok = chemistryFromPB[in.GetChemistry()]; !ok {
		v.add(f("chemistry"), "is required (one of the CHEMISTRY_ values other than UNSPECIFIED)")
	}
	if t.ChargeMethod, ok = chargeMethodFromPB[in.GetChargeMethod()]; !ok {
		v.add(f("charge_method"), "is required (one of the CHARGE_METHOD_ values other than UNSPECIFIED)")
	}
	if len(in.GetSources()) > maxSources {
		v.add(f("sources"), "at most %d entries, got %d", maxSources, len(in.GetSources()))
	}
	for i, s := range in.GetSources() {
		if len(s) > maxSourceBytes {
			v.add(fmt.Sprintf("%s[%d]", f("sources"), i), "at most %d bytes, got %d", maxSourceBytes, len(s))
		}
	}
	if len(v) == 0 {
		t.Sources = append([]string(nil), in.GetSources()...)
	}
	if in.GetOpenCircuitVoltageVolts() == nil {
		v.add(f("open_circuit_voltage_volts"), "is required")
	} else {
		t.OCV = surfaceFromPB(&v, f("open_circuit_voltage_volts"), in.GetOpenCircuitVoltageVolts())
	}
	if in.GetSeriesResistanceOhms() == nil {
		v.add(f("series_resistance_ohms"), "is required")
	} else {
		t.R0 = paramFromPB(&v, f("series_resistance_ohms"), in.GetSeriesResistanceOhms())
	}
	if n := len(in.GetRcBranches()); n > cell.MaxBranches {
		v.add(f("rc_branches"), "at most %d branches, got %d", cell.MaxBranches, n)
	} else {
		for k, b := range in.GetRcBranches() {
			bf := fmt.Sprintf("%s[%d]", f("rc_branches"), k)
			if b.GetResistanceOhms() == nil || b.GetCapacitanceFarads() == nil {
				v.add(bf, "resistance_ohms and capacitance_farads are required")
				continue
			}
			t.Branches = append(t.Branches, cell.Branch{
				R: paramFromPB(&v, bf+".resistance_ohms", b.GetResistanceOhms()),
				C: paramFromPB(&v, bf+".capacitance_farads", b.GetCapacitanceFarads()),
			})
		}
	}
	if h := in.GetHysteresis(); h != nil {
		t.Hysteresis = cell.Hysteresis{Max: h.GetMaxVolts(), Gamma: h.GetRate()}
	}
	if l := in.GetLimits(); l == nil {
		v.add(f("limits"), "is required")
	} else {
		t.Limits = cell.Limits{
			ChargeVolts:         l.GetChargeVoltageVolts(),
			FloatVolts:          l.GetFloatVoltageVolts(),
			CutoffVolts:         l.GetCutoffVoltageVolts(),
			FloorVolts:          l.GetFloorVoltageVolts(),
			MaxChargeRate:       l.GetMaxChargeCRate(),
			StandardChargeRate:  l.GetStandardChargeCRate(),
			MaxDischargeRate:    l.GetMaxDischargeCRate(),
			TerminationRate:     l.GetTerminationCRate(),
			ChargeMinCelsius:    l.GetChargeMinCelsius(),
			ChargeMaxCelsius:    l.GetChargeMaxCelsius(),
			DischargeMinCelsius: l.GetDischargeMinCelsius(),
			DischargeMaxCelsius: l.GetDischargeMaxCelsius(),
			TempCompVoltsPerK:   l.GetTemperatureCompensationVoltsPerKelvin(),
			NickelDeltaVolts:    l.GetNickelDeltaVolts(),
			TimerFactor:         l.GetTimerFactor(),
		}
	}
	checkTypeMagnitudes(&v, field, in)
	if err := v.err(); err != nil {
		return nil, err
	}
	if err := t.Validate(); err != nil {
		return nil, modelFieldErr(field, err)
	}
	return t, nil
}

// checkTypeMagnitudes reports magnitudes of in beyond the plausibility ranges above.
// Signs, finiteness and consistency are left to [cell.Type.Validate].
func checkTypeMagnitudes(v *violations, field string, in *pb.BatteryType) {
	f := func(s string) string { return field + "." + s }
	if q := in.GetCapacityAmpHours(); q != 0 && cell.Finite(q) && (q < minCellAmpHours || q > maxCellAmpHours) {
		v.add(f("capacity_amp_hours"), "must be %g to %g Ah per cell, got %g (milliampere-hours passed as ampere-hours?)", minCellAmpHours, maxCellAmpHours, q)
	}
	atMost := func(name string, x, hi float64, unit string) {
		if cell.Finite(x) && math.Abs(x) > hi {
			v.add(f(name), "must be at most %g %s per cell, got %g", hi, unit, x)
		}
	}
	atMost("nominal_voltage_volts", in.GetNominalVoltageVolts(), maxCellVolts, "V")
	surface := func(name string, s *pb.Surface, hi float64, unit string) {
		for j, r := range s.GetRows() {
			for i, x := range r.GetValues() {
				atMost(fmt.Sprintf("%s.rows[%d].values[%d]", name, j, i), x, hi, unit)
			}
		}
	}
	param := func(name string, p *pb.TemperatureParameter, hi float64, unit string) {
		atMost(name+".value", p.GetValue(), hi, unit)
		surface(name+".table", p.GetTable(), hi, unit)
	}
	surface("open_circuit_voltage_volts", in.GetOpenCircuitVoltageVolts(), maxCellVolts, "V")
	param("series_resistance_ohms", in.GetSeriesResistanceOhms(), maxCellOhms, "ohm")
	for k, b := range in.GetRcBranches() {
		param(fmt.Sprintf("rc_branches[%d].resistance_ohms", k), b.GetResistanceOhms(), maxCellOhms, "ohm")
	}
	if l := in.GetLimits(); l != nil {
		for _, x := range []struct {
			name string
			x    float64
		}{{"charge_voltage_volts", l.GetChargeVoltageVolts()}, {"float_voltage_volts", l.GetFloatVoltageVolts()},
			{"cutoff_voltage_volts", l.GetCutoffVoltageVolts()}, {"floor_voltage_volts", l.GetFloorVoltageVolts()}} {
			atMost("limits."+x.name, x.x, maxCellVolts, "V")
		}
		for _, x := range []struct {
			name string
			x    float64
		}{{"max_charge_c_rate", l.GetMaxChargeCRate()}, {"standard_charge_c_rate", l.GetStandardChargeCRate()},
			{"max_discharge_c_rate", l.GetMaxDischargeCRate()}, {"termination_c_rate", l.GetTerminationCRate()}} {
			atMost("limits."+x.name, x.x, maxCRate, "C")
		}
	}
}

// modelFieldErr moves a model validation error's field path into the API's names.
func modelFieldErr(prefix string, err error) error {
	fe, ok := err.(*cell.FieldError)
	if !ok {
		return err
	}
	fld := fe.Field
	// The model's JSON path names differ from the API's in one place.
	if fld == "ocv" || len(fld) > 4 && fld[:4] == "ocv." {
		fld = "open_circuit_voltage_volts" + fld[3:]
	}
	return invalid(joinField(prefix, fld), "%s", fe.Reason)
}

func paramFromPB(v *violations, field string, in *pb.TemperatureParameter) cell.Param {
	p := cell.Param{Value: in.GetValue(), ActivationEnergy: in.GetActivationEnergyJoulesPerMole()}
	if in.GetTable() != nil {
		p.Table = surfaceFromPB(v, field+".table", in.GetTable())
	}
	return p
}

// surfaceFromPB builds a table from its API form, reporting shape problems to v. It
// returns nil when there is a problem.
func surfaceFromPB(v *violations, field string, in *pb.Surface) *table.Surface {
	knots, temps, rows := in.GetStateOfChargeKnots(), in.GetTemperaturesCelsius(), in.GetRows()
	n0 := len(*v)
	switch {
	case len(knots) < 2 || len(knots) > maxSurfaceKnots:
		v.add(field+".state_of_charge_knots", "need 2 to %d knots, got %d", maxSurfaceKnots, len(knots))
	case len(temps) < 1 || len(temps) > maxSurfaceTemps:
		v.add(field+".temperatures_celsius", "need 1 to %d temperatures, got %d", maxSurfaceTemps, len(temps))
	case len(rows) != len(temps):
		v.add(field+".rows", "need one row per temperature (%d), got %d", len(temps), len(rows))
	}
	if len(*v) > n0 {
		return nil
	}
	tk := make([]float64, len(temps))
	for j, c := range temps {
		if err := cell.CheckCelsius(fmt.Sprintf("%s.temperatures_celsius[%d]", field, j), c); err != nil {
			fe := err.(*cell.FieldError)
			v.add(fe.Field, "%s", fe.Reason)
			return nil
		}
		tk[j] = c + table.CelsiusOffset
	}
	values := make([][]float64, len(rows))
	for j, r := range rows {
		if len(r.GetValues()) != len(knots) {
			v.add(fmt.Sprintf("%s.rows[%d].values", field, j), "need one value per knot (%d), got %d", len(knots), len(r.GetValues()))
			return nil
		}
		values[j] = r.GetValues()
	}
	s, err := table.NewSurface(knots, tk, values)
	if err != nil {
		v.add(field, "%v", err)
		return nil
	}
	return s
}
