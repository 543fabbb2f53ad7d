package fit

import (
	"context"
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
	"time"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/table"
)

// Problem is a calibration task: the lab records of one cell design.
type Problem struct {
	// Name is the name of the fitted type; empty means "fitted".
	Name string
	// OCVTest is a low-rate (C/20-style) test; see [OCV]. When it is not one (no
	// constant-current discharge at most Settings.OCV.MaxRate) but holds long rests, its
	// rested voltages are used instead ([RestOCV]). When it is empty (no samples), the
	// rested voltages of the first pulse test are used. OCVResult.Source and the report's
	// notes say which.
	OCVTest Record
	// PulseTests are HPPC-style tests, one or more per temperature; see [Pulses].
	PulseTests []Record
	// DriveCycles are optional dynamic records used to refine the resistances and
	// capacitances (see Settings.Refine) and reported against.
	DriveCycles []Record
	// Base supplies what lab data cannot: chemistry, charge method, coulombic
	// efficiency and limits. Nil selects generic lithium-ion limits (see
	// [LithiumLimits]). Base is not modified.
	Base *cell.Type
}

// Settings control [Fit]. The zero value (or nil) selects the defaults.
type Settings struct {
	OCV OCVSettings
	// RestOCV controls the OCV taken from rested voltages when there is no low-rate
	// test. Its Hysteresis is replaced by the base type's when that has one.
	RestOCV RestOCVSettings
	Pulse   PulseSettings
	// NoRestAnchoring keeps the low-rate OCV curve as it is. By default the curve of
	// each pulse-test temperature is moved through the pulse test's rested voltages
	// (see [Fit]).
	NoRestAnchoring bool
	// ActivationEnergy (J/mol) extends the resistance tables beyond the tested
	// temperatures when the pulse tests cover only one. 0 means the base type's R0
	// activation energy, and none without a base type. With two or more tested
	// temperatures the value is measured from the data instead.
	ActivationEnergy float64
	// Refine enables the drive-cycle refinement when DriveCycles are given.
	Refine bool
	// Sim is used for the drive-cycle reports and refinement.
	Sim SimSettings
	// Progress, when not nil, receives progress reports of every stage.
	Progress func(Progress)
}

// Result is the outcome of [Fit].
type Result struct {
	Type   *cell.Type     // the fitted parameter set, validated
	OCV    *OCVResult     // the OCV identification (low-rate test or rested voltages)
	Pulses []*PulseResult // one per pulse test
	// Refinement holds the drive-cycle scale factors when Settings.Refine was used.
	Refinement *Refinement
	Report     Report
	Runtime    time.Duration
}

// Report summarises a fit for people: the voltage error on every input record and
// notes on the choices made.
type Report struct {
	Files []FileReport
	Notes []string
}

// FileReport is the voltage error of the fitted type on one input record.
type FileReport struct {
	Name string
	Role string // "ocv", "pulse" or "drive"
	// How says how the record was simulated.
	How       string
	Samples   int
	RMSE, Max float64   // V
	Time      []float64 // s, of the compared samples
	Residual  []float64 // modelled − measured, V
}

// LithiumLimits returns the generic lithium-ion limits used when a Problem has no
// Base: CC-CV to 4.20 V, floor 2.5 V (REFERENCE.md §1a, BU-205), charge 0–45 °C and
// discharge −20–60 °C (BU-410), standard charge 0.5C, maximum charge 1C, termination
// C/20 (common practice), maximum continuous discharge 2C (common practice). The cut-off
// is the voltage the low-rate test ended at (the lab's own cut-off), at least the floor.
// Always check them against the cell maker's datasheet, which takes precedence.
func LithiumLimits(cutoff float64) cell.Limits {
	return cell.Limits{
		ChargeVolts: 4.20, CutoffVolts: math.Max(cutoff, 2.5), FloorVolts: 2.5,
		MaxChargeRate: 1, StandardChargeRate: 0.5, MaxDischargeRate: 2, TerminationRate: 0.05,
		ChargeMinCelsius: 0, ChargeMaxCelsius: 45, DischargeMinCelsius: -20, DischargeMaxCelsius: 60,
	}
}

// Fit calibrates a cell type from lab records.
//
//  1. The OCV curve and the capacity come from the low-rate test ([OCV]), or, without
//     one, from the long rests of a pulse test ([RestOCV]; see Problem.OCVTest).
//  2. Each pulse test gives R0 and RC parameters at several states of charge
//     ([Pulses]). Pulse tests within 2 K of each other are pooled into one temperature.
//  3. Rest anchoring: the rested voltages of the pulse tests are OCV samples at the
//     pulse test's temperature and ageing state. The low-rate curve is moved through
//     them by a correction interpolated linearly in state of charge between rests
//     (held constant beyond the outermost), one OCV row per pulse temperature. This
//     also gives the OCV its temperature dependence. The low-rate curve keeps its own
//     row when no pulse test is within 2 K of its temperature.
//  4. The parameters become tables over state of charge (the union of the level
//     states of charge, plus 0 and 1 with the end values held) and temperature. Where
//     a temperature's pulse tests stopped more than 0.1 V above the low-rate test's
//     end voltage, R0 below the lowest level follows Shepherd's polarisation form
//     (see shepherdLow) instead of being held. A
//     branch fitted as a charge-transfer branch at some level gets an exchange-current
//     table (interpolated in ln i₀; levels where it came out ohmic count as i₀ = 32×
//     their largest pulse current). Between tested temperatures rows are inserted at
//     most 5 K apart, interpolated log-linearly in 1/T (the Arrhenius law), so that
//     the table's linear interpolation in T does not overstate resistances there.
//     Beyond the tested temperatures each resistance table follows the Arrhenius law
//     with its own activation energy, and exchange currents the inverse of their
//     branch's.
//     With a base type that has hysteresis (LFP, NiMH in the catalogue), the fitted
//     type keeps it: the records here cannot identify it (that needs rests reached
//     from both directions at the same state of charge), so it is the catalogue's
//     value, and every rested voltage is taken as OCV + h with h the model's own
//     hysteresis state there (replayed through the record from h = 0).
//  5. With Settings.Refine and drive cycles, scale factors on the resistance and
//     capacitance tables are fitted over the whole drive-cycle voltage traces
//     ([Refine]).
//
// The result is deterministic: the same records and settings give the same type. ctx
// is checked once per major iteration (pulse level, refinement iteration).
func Fit(ctx context.Context, p *Problem, settings *Settings) (*Result, error) {
	start := time.Now()
	var s Settings
	if settings != nil {
		s = *settings
	}
	if s.Progress != nil && s.Pulse.Progress == nil {
		s.Pulse.Progress = s.Progress
	}
	if len(p.PulseTests) == 0 {
		return nil, fmt.Errorf("%w: at least one pulse test is needed", ErrData)
	}
	res := &Result{}
	var hyst cell.Hysteresis
	if p.Base != nil {
		hyst = p.Base.Hysteresis
	}
	rs := s.RestOCV
	if hyst.Max > 0 {
		rs.Hysteresis = hyst
	}
	src := p.OCVTest
	if src.Len() == 0 {
		src = p.PulseTests[0]
	}
	if s.Progress != nil {
		s.Progress(Progress{Stage: "ocv", Name: src.Name, Done: 0, Total: 1})
	}
	var ocv *OCVResult
	var err error
	if p.OCVTest.Len() == 0 {
		ocv, err = RestOCV(src, &rs)
		if err != nil {
			return nil, fmt.Errorf("no ocv test given, and the first pulse test gives no OCV from its rests: %w", err)
		}
	} else {
		ocv, err = OCV(src, &s.OCV)
		if errors.Is(err, ErrNotLowRate) {
			r, rerr := RestOCV(src, &rs)
			if rerr != nil {
				return nil, fmt.Errorf("ocv test: %w; nor do its rests give an OCV: %v", err, rerr)
			}
			ocv, err = r, nil
		}
		if err != nil {
			return nil, fmt.Errorf("ocv test: %w", err)
		}
	}
	res.OCV = ocv
	base, err := table.NewCurve(ocv.SOC, ocv.Volts)
	if err != nil {
		return nil, fmt.Errorf("ocv test: %w", err)
	}
	q := ocv.CapacityAh
	for _, r := range p.PulseTests {
		pr, err := Pulses(ctx, r, base, q, &s.Pulse)
		if err != nil {
			return nil, fmt.Errorf("pulse test: %w", err)
		}
		if hyst.Max > 0 {
			h := replayHysteresis(r, hyst, q)
			for i := range pr.Rests {
				rp := &pr.Rests[i]
				rp.Volts -= h[pr.Windows[rp.window].Start]
			}
		}
		res.Pulses = append(res.Pulses, pr)
	}
	ps := s.Pulse.defaults()
	ea := s.ActivationEnergy
	if ea == 0 && p.Base != nil {
		ea = p.Base.R0.ActivationEnergy
	}
	if !(ea >= 0 && ea <= 200e3) {
		return nil, fmt.Errorf("fit: activation energy must be in [0, 200000] J/mol, got %g", ea)
	}
	typ, notes, err := assemble(p, src, ocv, base, res.Pulses, ps.Branches, !s.NoRestAnchoring, ea)
	if err != nil {
		return nil, err
	}
	res.Report.Notes = append(res.Report.Notes, notes...)
	if s.Refine && len(p.DriveCycles) > 0 {
		ref, err := Refine(ctx, typ, p.DriveCycles, &RefineSettings{Sim: s.Sim, Progress: s.Progress})
		if err != nil {
			return nil, fmt.Errorf("drive-cycle refinement: %w", err)
		}
		res.Refinement = ref
		typ = ref.Type
		res.Report.Notes = append(res.Report.Notes, fmt.Sprintf("drive-cycle refinement: %s", ref))
	}
	if err := typ.Validate(); err != nil {
		return nil, fmt.Errorf("fit: the fitted type is invalid: %w", err)
	}
	res.Type = typ
	res.Report.Files = reportFiles(p, src, typ, ocv, res.Pulses, &s.Sim)
	res.Runtime = time.Since(start)
	return res, nil
}

// tempGroup is the pulse results pooled at one temperature.
type tempGroup struct {
	tk     float64
	levels []Level
	rests  []RestPoint
	// minVolts is the lowest terminal voltage of the pooled pulse tests, V.
	minVolts float64
}

func groupByTemperature(prs []*PulseResult) []tempGroup {
	idx := make([]int, len(prs))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return prs[idx[a]].TemperatureK < prs[idx[b]].TemperatureK })
	var gs []tempGroup
	for _, i := range idx {
		pr := prs[i]
		if n := len(gs); n > 0 && pr.TemperatureK-gs[n-1].tk < 2 {
			g := &gs[n-1]
			g.levels = append(g.levels, pr.Levels...)
			g.rests = append(g.rests, pr.Rests...)
			g.minVolts = math.Min(g.minVolts, pr.MinVolts)
			continue
		}
		gs = append(gs, tempGroup{tk: pr.TemperatureK, levels: append([]Level(nil), pr.Levels...), rests: append([]RestPoint(nil), pr.Rests...), minVolts: pr.MinVolts})
	}
	// The temperature of a pooled group is the median of its levels'.
	for j := range gs {
		var t []float64
		for _, l := range gs[j].levels {
			t = append(t, l.TemperatureK)
		}
		gs[j].tk = median(t)
	}
	for j := 1; j < len(gs); j++ {
		if gs[j].tk <= gs[j-1].tk {
			gs[j].tk = gs[j-1].tk + 0.5
		}
	}
	return gs
}

// assemble builds the cell type from the identified pieces.
func assemble(p *Problem, src Record, ocv *OCVResult, base *table.Curve, prs []*PulseResult, nb int, anchor bool, ea float64) (*cell.Type, []string, error) {
	gs := groupByTemperature(prs)
	var notes []string
	if ocv.Source == SourceRests {
		notes = append(notes, fmt.Sprintf("ocv method: rested voltages of %s (no low-rate test); capacity %.4g Ah = charge removed from full to the deepest point of that test at its own rates, a lower bound of the low-rate capacity", src.Name, ocv.CapacityAh))
	} else {
		notes = append(notes, fmt.Sprintf("ocv method: low-rate test %s; capacity %.4g Ah from the low-rate discharge (%s)", src.Name, ocv.CapacityAh, src.Name))
	}
	notes = append(notes, "ocv: "+ocv.Method)

	// OCV rows.
	type row struct {
		tk float64
		v  []float64
	}
	var rows []row
	ocvT := ocv.TemperatureK
	near := false
	for _, g := range gs {
		v := append([]float64(nil), ocv.Volts...)
		if anchor && len(g.rests) > 0 {
			corr, rms := restCorrection(base, g.rests)
			for k, z := range ocv.SOC {
				v[k] += corr(z)
			}
			v = isotonic(v)
			notes = append(notes, fmt.Sprintf("ocv at %.1f °C: anchored to %d rested voltages (rms offset of the low-rate curve %.1f mV)",
				g.tk-cell.CelsiusOffset, len(g.rests), rms*1e3))
		}
		if math.Abs(g.tk-ocvT) < 2 {
			near = true
			if !anchor || len(g.rests) == 0 {
				v = append([]float64(nil), ocv.Volts...)
			}
		}
		rows = append(rows, row{g.tk, v})
	}
	if !near {
		rows = append(rows, row{ocvT, append([]float64(nil), ocv.Volts...)})
		sort.SliceStable(rows, func(a, b int) bool { return rows[a].tk < rows[b].tk })
		for j := 1; j < len(rows); j++ {
			if rows[j].tk-rows[j-1].tk < 0.5 {
				return nil, nil, fmt.Errorf("fit: OCV rows at %.2f and %.2f K are too close", rows[j-1].tk, rows[j].tk)
			}
		}
	}
	var temps []float64
	var vals [][]float64
	for _, r := range rows {
		temps = append(temps, r.tk)
		vals = append(vals, r.v)
	}
	ocvSurf, err := table.NewSurface(ocv.SOC, temps, vals)
	if err != nil {
		return nil, nil, fmt.Errorf("fit: OCV table: %w", err)
	}

	// Parameter tables over a common SOC grid.
	var zs []float64
	for _, g := range gs {
		for _, l := range g.levels {
			zs = append(zs, l.SOC)
		}
	}
	grid := mergeGrid(zs, 0.02)
	// Low-SOC extension (see shepherdLow) for temperatures whose pulse tests stopped
	// more than shepherdShortVolts above the low-rate test's end voltage (the lab's
	// cut-off): below their lowest level the tables would otherwise be held flat.
	labCutoff := lastDischargeVolts(src)
	short := make([]bool, len(gs))
	anyShort := false
	for j, g := range gs {
		short[j] = g.minVolts > labCutoff+shepherdShortVolts
		anyShort = anyShort || short[j]
	}
	if anyShort {
		for j, g := range gs {
			if !short[j] {
				continue
			}
			lz := make([]float64, len(g.levels))
			for k, l := range g.levels {
				lz[k] = l.SOC
			}
			grid = lowSOCGrid(grid, lz)
		}
	}
	var ptemps []float64
	for _, g := range gs {
		ptemps = append(ptemps, g.tk)
	}
	levelRows := func(get func(l Level) float64) [][]float64 {
		vals := make([][]float64, len(gs))
		for j, g := range gs {
			lz := make([]float64, len(g.levels))
			lv := make([]float64, len(g.levels))
			for i, l := range g.levels {
				lz[i], lv[i] = l.SOC, get(l)
			}
			vals[j] = interpHold(lz, lv, grid)
		}
		return vals
	}
	// Temperature extension: resistances follow the Arrhenius law beyond the tested
	// temperatures (capacitances are held), each table with its own activation energy
	// measured between the two outermost rows at that end (the processes behind R0 and
	// the branches, ionic conduction, charge transfer and diffusion, have different
	// activation energies [common practice]), or Settings.ActivationEnergy / the base
	// type's when only one temperature was tested.
	meanLog := func(v []float64) float64 {
		var s float64
		for _, x := range v {
			s += math.Log(math.Max(x, 1e-12))
		}
		return s / float64(len(v))
	}
	resVals := [][][]float64{levelRows(func(l Level) float64 { return l.R0.Value })}
	for j := range nb {
		resVals = append(resVals, levelRows(func(l Level) float64 { return l.R[j].Value }))
	}
	if anyShort {
		var parts []string
		for j, g := range gs {
			if !short[j] {
				continue
			}
			lz := make([]float64, len(g.levels))
			lv := make([]float64, len(g.levels))
			for k, l := range g.levels {
				lz[k], lv[k] = l.SOC, l.R0.Value
			}
			if k, ok := shepherdLow(resVals[0][j], grid, lz, lv); ok {
				parts = append(parts, fmt.Sprintf("%.1f °C K = %.2f mΩ", g.tk-cell.CelsiusOffset, k*1e3))
			} else {
				parts = append(parts, fmt.Sprintf("%.1f °C none (K = %.2f mΩ not positive and significant)", g.tk-cell.CelsiusOffset, k*1e3))
			}
		}
		notes = append(notes, fmt.Sprintf("R0 below the lowest pulse level (pulse test stopped short of the cut-off): R0(z) = R0(z_min) + K·(1/z − 1/z_min), Shepherd's polarisation form fitted to the lowest %d levels at SOC ≤ %.1f, capped at %g× R0(z_min): %s",
			shepherdMaxLevel, shepherdMaxSOC, float64(shepherdCap), strings.Join(parts, ", ")))
	}
	var capVals [][][]float64
	for j := range nb {
		capVals = append(capVals, levelRows(func(l Level) float64 { return l.Tau[j].Value / l.R[j].Value }))
	}
	// Exchange currents of charge-transfer branches, interpolated in ln i₀ between
	// levels; a level where the branch came out ohmic counts as i₀ = 32× its largest
	// pulse current (the upper end of the fitted range, where the branch is ohmic to
	// within 1e-4 over the tested currents). A branch ohmic at every level stays ohmic.
	i0Vals := make([][][]float64, nb)
	for j := range nb {
		charge := false
		for _, g := range gs {
			for _, l := range g.levels {
				if j < len(l.I0) && !math.IsInf(l.I0[j].Value, 1) {
					charge = true
				}
			}
		}
		if !charge {
			continue
		}
		rows := levelRows(func(l Level) float64 {
			if j < len(l.I0) && !math.IsInf(l.I0[j].Value, 1) {
				return math.Log(l.I0[j].Value)
			}
			return math.Log(32 * math.Max(l.PulseAmps, 1e-3))
		})
		for _, r := range rows {
			for k := range r {
				r[k] = math.Exp(r[k])
			}
		}
		i0Vals[j] = rows
	}
	// eaLow[i], eaHigh[i]: activation energies of resistance table i (R0, R1, …).
	eaLow := make([]float64, len(resVals))
	eaHigh := make([]float64, len(resVals))
	anyEa := false
	for i, rv := range resVals {
		eaLow[i], eaHigh[i] = ea, ea
		if n := len(ptemps); n >= 2 {
			lnRatio := func(a, b int) float64 {
				return cell.GasConstant * (meanLog(rv[a]) - meanLog(rv[b])) / (1/ptemps[a] - 1/ptemps[b])
			}
			eaLow[i] = math.Min(math.Max(lnRatio(0, 1), 0), 100e3)
			eaHigh[i] = math.Min(math.Max(lnRatio(n-2, n-1), 0), 100e3)
		}
		anyEa = anyEa || eaLow[i] > 0 || eaHigh[i] > 0
	}
	// Between tested temperatures a table interpolates linearly in T, which overstates
	// a quantity that follows the Arrhenius law (exponential in 1/T) in between: half-way
	// from 0 to 25 °C a resistance with 46 kJ/mol would read 37 % high. Rows are
	// therefore inserted at most 5 K apart, interpolated log-linearly in 1/T (exact for
	// an Arrhenius quantity), which leaves the linear interpolation between them within
	// about 1 %.
	if len(ptemps) >= 2 {
		var all []float64
		type at struct {
			a int
			w float64
		}
		var where []at
		for a := 0; a+1 < len(ptemps); a++ {
			ta, tb := ptemps[a], ptemps[a+1]
			n := int(math.Ceil((tb - ta) / 5))
			for k := range n {
				t := ta + float64(k)*(tb-ta)/float64(n)
				all = append(all, t)
				where = append(where, at{a, (1/t - 1/ta) / (1/tb - 1/ta)})
			}
		}
		all = append(all, ptemps[len(ptemps)-1])
		where = append(where, at{len(ptemps) - 2, 1})
		between := func(vals [][]float64) [][]float64 {
			out := make([][]float64, len(all))
			for r, x := range where {
				out[r] = make([]float64, len(grid))
				for k := range grid {
					la := math.Log(math.Max(vals[x.a][k], 1e-300))
					lb := math.Log(math.Max(vals[x.a+1][k], 1e-300))
					out[r][k] = math.Exp((1-x.w)*la + x.w*lb)
				}
			}
			return out
		}
		for i := range resVals {
			resVals[i] = between(resVals[i])
		}
		for i := range capVals {
			capVals[i] = between(capVals[i])
		}
		for i := range i0Vals {
			if i0Vals[i] != nil {
				i0Vals[i] = between(i0Vals[i])
			}
		}
		ptemps = all
	}
	if anyEa {
		var lowT, highT []float64
		for _, d := range []float64{20, 10} {
			if t := ptemps[0] - d; t > 213.15 {
				lowT = append(lowT, t)
			}
		}
		for _, d := range []float64{10, 20} {
			if t := ptemps[len(ptemps)-1] + d; t < 373.15 {
				highT = append(highT, t)
			}
		}
		// power 1 scales like a resistance, 0 holds the value (capacitances), −1 scales
		// inversely (exchange currents: i₀ is a rate, RT/(F·i₀) a resistance).
		extend := func(vals [][]float64, power, eaLo, eaHi float64) [][]float64 {
			var out [][]float64
			for _, t := range lowT {
				f := math.Exp(power * eaLo / cell.GasConstant * (1/t - 1/ptemps[0]))
				out = append(out, scaled(vals[0], f))
			}
			out = append(out, vals...)
			top := vals[len(vals)-1]
			for _, t := range highT {
				f := math.Exp(power * eaHi / cell.GasConstant * (1/t - 1/ptemps[len(ptemps)-1]))
				out = append(out, scaled(top, f))
			}
			return out
		}
		// An exchange current scales as the inverse of its branch's resistance.
		for j := range i0Vals {
			if i0Vals[j] != nil {
				i0Vals[j] = extend(i0Vals[j], -1, eaLow[1+j], eaHigh[1+j])
			}
		}
		for i := range resVals {
			resVals[i] = extend(resVals[i], 1, eaLow[i], eaHigh[i])
		}
		for i := range capVals {
			capVals[i] = extend(capVals[i], 0, 0, 0)
		}
		ptemps = append(append(lowT, ptemps...), highT...)
		var parts []string
		for i := range resVals {
			name := "R0"
			if i > 0 {
				name = fmt.Sprintf("R%d", i)
			}
			parts = append(parts, fmt.Sprintf("%s %.0f/%.0f", name, eaLow[i]/1e3, eaHigh[i]/1e3))
		}
		notes = append(notes, fmt.Sprintf("resistances extended beyond the tested temperatures by the Arrhenius law, kJ/mol below/above: %s (%s)",
			strings.Join(parts, ", "), eaSource(len(gs), ea)))
	}
	param := func(vals [][]float64) (*table.Surface, error) {
		return table.NewSurface(grid, ptemps, vals)
	}
	typ := &cell.Type{
		Name:         p.Name,
		CapacityAh:   ocv.CapacityAh,
		OCV:          ocvSurf,
		ChargeMethod: cell.ChargeCCCV,
	}
	if typ.Name == "" {
		typ.Name = "fitted"
	}
	if typ.R0.Table, err = param(resVals[0]); err != nil {
		return nil, nil, fmt.Errorf("fit: R0 table: %w", err)
	}
	for j := range nb {
		var b cell.Branch
		if b.R.Table, err = param(resVals[1+j]); err != nil {
			return nil, nil, fmt.Errorf("fit: R%d table: %w", j+1, err)
		}
		if b.C.Table, err = param(capVals[j]); err != nil {
			return nil, nil, fmt.Errorf("fit: C%d table: %w", j+1, err)
		}
		if i0Vals[j] != nil {
			t, err := param(i0Vals[j])
			if err != nil {
				return nil, nil, fmt.Errorf("fit: exchange current %d table: %w", j+1, err)
			}
			b.ExchangeCurrent = &cell.Param{Table: t}
		}
		typ.Branches = append(typ.Branches, b)
	}
	// Nominal voltage: the mean OCV over state of charge at the reference row
	// (energy ÷ capacity of a slow discharge; common practice).
	ref := ocvSurf.Curve(0)
	for j, tk := range ocvSurf.Temps() {
		if math.Abs(tk-ocvT) < math.Abs(ocvSurf.Temps()[0]-ocvT) {
			ref = ocvSurf.Curve(j)
		}
	}
	var sum float64
	const m = 200
	for k := range m {
		sum += ref.At((float64(k) + 0.5) / m)
	}
	typ.NominalVolts = math.Round(sum/m*100) / 100
	cutoff := lastDischargeVolts(src)
	if b := p.Base; b != nil {
		typ.Chemistry = b.Chemistry
		if b.ChargeMethod != "" {
			typ.ChargeMethod = b.ChargeMethod
		}
		typ.Limits = b.Limits
		typ.CoulombicEfficiency = b.CoulombicEfficiency
		if b.Hysteresis.Max > 0 {
			typ.Hysteresis = b.Hysteresis
			notes = append(notes, fmt.Sprintf("hysteresis kept from the base type %q (max %.0f mV, rate %g): not identified from these records, which have no long rests reached by charge at the same state of charge; rested voltages are taken as OCV + the model's hysteresis state",
				b.Name, b.Hysteresis.Max*1e3, b.Hysteresis.Gamma))
		}
		typ.Sources = append(typ.Sources, b.Sources...)
		notes = append(notes, fmt.Sprintf("limits from the base type %q", b.Name))
	} else {
		typ.Limits = LithiumLimits(math.Round(cutoff*100) / 100)
		notes = append(notes, "limits: generic lithium-ion (no chemistry given); check them against the cell maker's datasheet")
	}
	how := "OCV and capacity from " + src.Name
	if ocv.Source == SourceRests {
		how = "OCV and capacity from the rested voltages of " + src.Name
	}
	typ.Description = fmt.Sprintf("fitted from lab data: %d-RC Thevenin model, %s, resistances from %d pulse test(s)", nb, how, len(prs))
	if p.OCVTest.Len() > 0 {
		typ.Sources = append(typ.Sources, "fitted by voltcast fit from "+p.OCVTest.Name)
	}
	for _, r := range p.PulseTests {
		typ.Sources = append(typ.Sources, "fitted by voltcast fit from "+r.Name)
	}
	return typ, notes, nil
}

func scaled(v []float64, f float64) []float64 {
	out := make([]float64, len(v))
	for i, x := range v {
		out[i] = x * f
	}
	return out
}

func eaSource(temps int, ea float64) string {
	if temps >= 2 {
		return "measured between the outermost tested temperatures"
	}
	return fmt.Sprintf("one tested temperature: %.0f kJ/mol from the settings or the base type, not measured on this cell", ea/1e3)
}

// restCorrection returns the OCV correction δ(z) through the rest points (median per
// 0.02-wide cluster, linear between clusters, held beyond) and the RMS of the raw
// offsets.
func restCorrection(base *table.Curve, rests []RestPoint) (func(z float64) float64, float64) {
	rs := append([]RestPoint(nil), rests...)
	sort.SliceStable(rs, func(a, b int) bool { return rs[a].SOC < rs[b].SOC })
	var cz, cd []float64
	var ss float64
	for i := 0; i < len(rs); {
		j := i
		var zz, dd []float64
		for j < len(rs) && rs[j].SOC-rs[i].SOC < 0.02 {
			d := rs[j].Volts - base.At(rs[j].SOC)
			ss += d * d
			zz = append(zz, rs[j].SOC)
			dd = append(dd, d)
			j++
		}
		cz = append(cz, median(zz))
		cd = append(cd, median(dd))
		i = j
	}
	rms := math.Sqrt(ss / float64(len(rs)))
	return func(z float64) float64 { return interpHold(cz, cd, []float64{z})[0] }, rms
}

// sortedPairs returns copies of x and y ordered by x (stable).
func sortedPairs(x, y []float64) (xs, ys []float64) {
	idx := make([]int, len(x))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return x[idx[a]] < x[idx[b]] })
	xs = make([]float64, len(x))
	ys = make([]float64, len(x))
	for i, j := range idx {
		xs[i], ys[i] = x[j], y[j]
	}
	return xs, ys
}

// interpHold interpolates (x, y) linearly at each g, holding the end values beyond;
// x need not be sorted.
func interpHold(x, y, g []float64) []float64 {
	xs, ys := sortedPairs(x, y)
	out := make([]float64, len(g))
	for k, v := range g {
		switch {
		case v <= xs[0]:
			out[k] = ys[0]
		case v >= xs[len(xs)-1]:
			out[k] = ys[len(ys)-1]
		default:
			i := sort.SearchFloat64s(xs, v)
			if xs[i] == v {
				out[k] = ys[i]
				continue
			}
			w := (v - xs[i-1]) / (xs[i] - xs[i-1])
			out[k] = ys[i-1] + w*(ys[i]-ys[i-1])
		}
	}
	return out
}

// mergeGrid sorts zs, merges values closer than tol (mean), and adds 0 and 1.
func mergeGrid(zs []float64, tol float64) []float64 {
	s := append([]float64(nil), zs...)
	sort.Float64s(s)
	var out []float64
	for i := 0; i < len(s); {
		j := i
		var sum float64
		for j < len(s) && s[j]-s[i] < tol {
			sum += s[j]
			j++
		}
		m := math.Min(math.Max(sum/float64(j-i), 0), 1)
		if len(out) == 0 || m > out[len(out)-1] {
			out = append(out, m)
		}
		i = j
	}
	if out[0] > 0.005 {
		out = append([]float64{0}, out...)
	}
	if out[len(out)-1] < 0.995 {
		out = append(out, 1)
	}
	return out
}

// lastDischargeVolts returns the lowest voltage of the record: the cut-off the
// low-rate test ran to.
func lastDischargeVolts(r Record) float64 {
	return slicesMin(r.Voltage)
}

// reportFiles computes the voltage error of the fitted type on every input record.
func reportFiles(p *Problem, src Record, typ *cell.Type, ocv *OCVResult, prs []*PulseResult, sim *SimSettings) []FileReport {
	var out []FileReport
	// The part of the OCV test that was used, simulated from full at its start.
	{
		r := src
		part := Record{Name: r.Name, Time: r.Time[ocv.Start:ocv.End], Current: r.Current[ocv.Start:ocv.End],
			Voltage: r.Voltage[ocv.Start:ocv.End], Temperature: r.Temperature[ocv.Start:ocv.End]}
		v := Simulate(nil, typ, part, 1, nil)
		how := "the low-rate discharge (and charge) used, simulated from full"
		if ocv.Source == SourceRests {
			how = "the whole test whose rests gave the OCV, simulated from full (state of charge from the current)"
		}
		out = append(out, fileReport(part, "ocv", how, v, 0))
	}
	for i, r := range p.PulseTests {
		out = append(out, pulseReport(r, typ, prs[i]))
	}
	for _, r := range p.DriveCycles {
		v := Simulate(nil, typ, r, r.initialSOC(), sim)
		out = append(out, fileReport(r, "drive", "simulated from the first sample", v, 0))
	}
	return out
}

func fileReport(r Record, role, how string, model []float64, from float64) FileReport {
	fr := FileReport{Name: r.Name, Role: role, How: how}
	for k := range model {
		if r.Time[k] < from {
			continue
		}
		fr.Time = append(fr.Time, r.Time[k])
		fr.Residual = append(fr.Residual, model[k]-r.Voltage[k])
	}
	fr.Samples = len(fr.Residual)
	fr.RMSE = math.Sqrt(sumSq(fr.Residual) / math.Max(1, float64(fr.Samples)))
	for _, e := range fr.Residual {
		fr.Max = math.Max(fr.Max, math.Abs(e))
	}
	return fr
}

// pulseReport simulates each window of a pulse test with the fitted type, from rest at
// the window's start and anchored at its rested voltage (as the fit does).
func pulseReport(r Record, typ *cell.Type, pr *PulseResult) FileReport {
	fr := FileReport{Name: r.Name, Role: "pulse", How: "each pulse window simulated from its rested start, anchored at the rested voltage"}
	pk := cell.Pack{Type: typ, Series: 1, Parallel: 1}
	for _, w := range pr.Windows {
		st := cell.State{SOC: w.SOC0}
		s := w.Start
		off := r.Voltage[s] - pk.Voltage(&st, 0, r.Temperature[s])
		for k := s + 1; k < w.End; k++ {
			pk.Step(&st, r.Current[k], r.Time[k]-r.Time[k-1], r.Temperature[k])
			e := pk.Voltage(&st, r.Current[k], r.Temperature[k]) + off - r.Voltage[k]
			fr.Time = append(fr.Time, r.Time[k])
			fr.Residual = append(fr.Residual, e)
		}
	}
	fr.Samples = len(fr.Residual)
	fr.RMSE = math.Sqrt(sumSq(fr.Residual) / math.Max(1, float64(fr.Samples)))
	for _, e := range fr.Residual {
		fr.Max = math.Max(fr.Max, math.Abs(e))
	}
	return fr
}

// Low-SOC extension of the resistance tables (Shepherd, J. Electrochem. Soc.
// 112(7):657–664, 1965; REFERENCE.md §2.5: the polarisation term K·Q/(Q − it)·i is a
// resistance K/z). Below the lowest pulse level a table would otherwise be held flat.
const (
	shepherdMaxSOC   = 0.5   // levels at or below this SOC enter the fit
	shepherdMaxLevel = 4     // at most this many of the lowest levels
	shepherdMinLevel = 3     // at least this many, else no extension
	shepherdTStat    = 2     // K must exceed this many standard errors
	shepherdCap      = 4     // extension capped at this multiple of the lowest level's value
	shepherdMinSOC   = 0.005 // 1/z is evaluated at no lower SOC (the value at SOC 0)
	// shepherdShortVolts: a pulse test whose lowest voltage stays this far above the
	// low-rate test's end voltage did not reach the cut-off.
	shepherdShortVolts = 0.1
)

// lowSOCGrid adds grid points below the lowest level SOC so that the table's linear
// interpolation follows a 1/z extension: geometric steps of 1.25 down to 0.01.
func lowSOCGrid(grid, zs []float64) []float64 {
	zmin := slicesMin(zs)
	var add []float64
	for z := zmin / 1.25; z > 0.01; z /= 1.25 {
		add = append(add, z)
	}
	out := append(append([]float64(nil), grid...), add...)
	sort.Float64s(out)
	// drop points closer than 0.005 to a neighbour, keeping level points and 0.
	var m []float64
	for _, z := range out {
		if len(m) > 0 && z-m[len(m)-1] < 0.005 {
			continue
		}
		m = append(m, z)
	}
	return m
}

// shepherdLow fits R(z) = a + K/z by least squares to the lowest levels (lz, lv)
// and, when K is positive and significant, replaces row below the lowest level by
// R(zmin) + K·(1/z − 1/zmin), capped at shepherdCap·R(zmin). It reports K.
func shepherdLow(row, grid, lz, lv []float64) (float64, bool) {
	xs, ys := sortedPairs(lz, lv)
	n := 0
	for n < len(xs) && n < shepherdMaxLevel && xs[n] <= shepherdMaxSOC {
		n++
	}
	if n < shepherdMinLevel || xs[0] <= 0 {
		return 0, false
	}
	var sx, sy, sxx, sxy float64
	for k := range n {
		x := 1 / xs[k]
		sx += x
		sy += ys[k]
		sxx += x * x
		sxy += x * ys[k]
	}
	fn := float64(n)
	den := fn*sxx - sx*sx
	if den <= 0 {
		return 0, false
	}
	kk := (fn*sxy - sx*sy) / den
	a := (sy - kk*sx) / fn
	var sse float64
	for k := range n {
		e := ys[k] - a - kk/xs[k]
		sse += e * e
	}
	se := math.Sqrt(sse / float64(n-2) * fn / den)
	if !(kk > 0) || kk < shepherdTStat*se {
		return kk, false
	}
	zmin, r := xs[0], ys[0]
	for g, z := range grid {
		if z >= zmin {
			break
		}
		row[g] = math.Min(r+kk*(1/math.Max(z, shepherdMinSOC)-1/zmin), shepherdCap*r)
	}
	return kk, true
}
