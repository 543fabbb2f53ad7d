package main

import (
	"context"
	"fmt"
	"math"
	"path/filepath"
	"regexp"
	"sort"
	"strconv"
	"strings"

	"github.com/voltcast/voltcast/labdata"
	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/estimate"
	"github.com/voltcast/voltcast/model/fit"
	"github.com/voltcast/voltcast/model/forecast"
	"github.com/voltcast/voltcast/model/sim"
)

// Model validation (issue 3, accuracy items 1–3): for each measured cell of
// ../shared/datasets with a low-rate OCV test and a pulse test, fit a type from those
// two only, then (1) simulate its drive cycles / random profiles from the true start
// and compare voltages, (2) run the EKF from 20 % SOC off the truth and compare with the
// SOC from the lab counter, with a coulomb counter beside it, and (3) forecast the time
// to cut-off of its constant-current discharges from full. Nothing is tuned on these
// results, and ../shared/holdout is never read.

// Accuracy targets of issue 3.
const (
	targetVoltageWarmMV = 15.0 // voltage RMSE at 25 °C
	targetVoltageColdMV = 30.0 // voltage RMSE at 0 °C and below
	targetSOCRMSEPct    = 1.5  // EKF SOC RMSE after 10 min, 25 °C
	targetSOCMaxPct     = 4.0  // EKF SOC max error after 10 min, 25 °C
	targetRuntimePct    = 2.0  // forecast time to cut-off vs measured, 25 °C
	socOffset           = 0.20 // the EKF starts this far below the true SOC
	socSettleSeconds    = 600  // errors are taken after the first 10 minutes
	// loadedStartRate is the C-rate above which a sample counts as "under load" for the
	// loaded-start SOC protocol (C/5; the 1C current in A equals the capacity in Ah).
	loadedStartRate = 0.2
	socWithin       = 0.02 // "within 2 %" of the issue
)

// loadedOffsets are the initial SOC errors of the loaded-start protocol: 20 % below and
// 20 % above the truth. The start is chosen where both stay within 0..1 (loadedStart).
var loadedOffsets = []float64{-socOffset, +socOffset}

// cellSpec is one measured cell: the files its type is fitted from and the files it is
// checked against. Paths are relative to the dataset folder; globs allowed.
type cellSpec struct {
	dataset string // folder under the datasets root
	cell    string // label
	cite    string // authors, DOI, licence (from PROVENANCE.md)
	// ocv is the low-rate OCV test; empty: the dataset has none, and the fit takes the
	// OCV and capacity from the first pulse test's long rests (fit.RestOCV).
	ocv    string
	pulses []string
	drives []string
	cc     []string
	cutoff float64 // V, the dataset's discharge cut-off (PROVENANCE.md)
	// noTemperature: the files have no temperature column; 25 °C is assumed (stated in
	// the report).
	noTemperature bool
	// keepLastDuplicate: the tester repeats the cut-off row's timestamp (see labdata).
	keepLastDuplicate bool
	// blockAverage: drive-cycle samples are averages over each interval (PROVENANCE.md).
	blockAverage bool
	// chemistry is the catalogue family whose limits the fitted type takes.
	chemistry string
	// noSOC skips the SOC check on the drives (constant-current discharges used as
	// voltage profiles rather than drive cycles).
	noSOC bool
	// ambient is the test temperature, °C, when the file names do not give it as
	// "<n>degC" (n prefix = negative): the targets are stated per test temperature.
	ambient float64
}

var ambientRE = regexp.MustCompile(`(n?)(\d+)degC`)

// ambientOf returns the nominal test temperature of a record, °C: from its file name
// ("25degC", "n10degC"), else the dataset's.
func ambientOf(spec cellSpec, name string) float64 {
	if m := ambientRE.FindStringSubmatch(name); m != nil {
		v, _ := strconv.ParseFloat(m[2], 64)
		if m[1] == "n" {
			v = -v
		}
		return v
	}
	return spec.ambient
}

const (
	citePan    = "Kollmeyer (2018), Panasonic 18650PF Li-ion Battery Data, Mendeley Data, doi:10.17632/wykht8y7tg.1, CC BY 4.0"
	citeDMEGC  = "L. Wang et al., Li-ion Battery Electro-Thermal Dataset (DMEGC INR18650), GitHub Silencefrog9305/Digital-Twins-for-Battery-Using-CTA-MTL @ec0fe7c, MIT"
	citeNissan = "Wiggins, Allu, Wang (ORNL), Battery cell data from a 2013 Nissan Leaf, doi:10.5281/zenodo.2580327, MIT"
	citeK2     = "ARTS Laboratory (A. Downey), University of South Carolina, K2 26650 LiFePO4 2.6 Ah HPPC and 1C discharge data, GitHub ARTS-Laboratory/Dataset-battery-electro-thermal-characterization @50c2d90 (no DOI), CC BY-SA 4.0"
)

// k2Cells returns the k2_lfp26650 checks, one per temperature: the type is fitted from
// that temperature's HPPC test alone (it has no low-rate test, so the OCV and capacity
// come from the HPPC's 90-minute rests, fit.RestOCV) and checked on the 1C discharge at
// the same temperature (voltage from the true start, and runtime). The 30 °C files are
// held out and never read.
func k2Cells() []cellSpec {
	var out []cellSpec
	for _, c := range []string{"20", "40", "50"} {
		out = append(out, cellSpec{
			dataset: "k2_lfp26650", cell: "K2 26650 (" + c + " °C HPPC)", cite: citeK2,
			pulses: []string{"hppc_" + c + "degC.csv"},
			drives: []string{"cc_discharge_" + c + "degC.csv"},
			cc:     []string{"cc_discharge_" + c + "degC.csv"},
			cutoff: 2.5, chemistry: "lfp", noSOC: true, // 2.5 V cut-off, LFP inferred (PROVENANCE.md)
		})
	}
	return out
}

// modelCells lists the cells validated.
func modelCells(quick bool) []cellSpec {
	pan := cellSpec{
		dataset: "pan18650pf", cell: "NCR18650PF", cite: citePan,
		ocv:    "ocv_c20_25degC.csv",
		pulses: []string{"hppc_25degC.csv", "hppc_0degC.csv", "hppc_n10degC.csv", "hppc_n20degC.csv"},
		drives: []string{"drive_25degC_*.csv", "drive_0degC_*.csv", "drive_n10degC_*.csv", "drive_n20degC_*.csv"},
		cc:     []string{"dis1c_25degC_start_of_tests.csv"},
		cutoff: 2.5, blockAverage: true, chemistry: "nca",
	}
	if quick {
		pan.pulses = pan.pulses[:1]
		pan.drives = pan.drives[:1] // the five 25 °C profiles
		return []cellSpec{pan}
	}
	cells := []cellSpec{pan}
	for _, c := range []string{"R1", "R2", "R3"} {
		cells = append(cells, cellSpec{
			dataset: "dmegc_inr18650", cell: "cell" + c, cite: citeDMEGC,
			ocv:    "cell" + c + "_ocv_c20.csv",
			pulses: []string{"cell" + c + "_pulse_1C_10min_rest20min.csv"},
			drives: []string{"cell" + c + "_random_profiles.csv"},
			cc:     []string{"cell" + c + "_cc_discharge_0p5C.csv", "cell" + c + "_cc_discharge_1C.csv", "cell" + c + "_cc_discharge_2C.csv"},
			cutoff: 2.5, keepLastDuplicate: true, chemistry: "nmc", ambient: 25, // chamber at 25 °C (PROVENANCE.md)
		})
	}
	cells = append(cells, cellSpec{
		dataset: "nissan_leaf_2013_cell", cell: "Leaf 2013", cite: citeNissan,
		ocv:    "lowrate_c15_cycling_10-24-40degC.csv",
		pulses: []string{"hppc_25degC.csv"},
		cc:     []string{"cc_discharge_1C_x5.csv", "cc_discharge_2C_x5.csv", "cc_discharge_3C_x5.csv"},
		cutoff: 3.0, noTemperature: true, ambient: 25, chemistry: "nmc", // the catalogue has no LMO/LNO type; its lithium-ion limits (4.2 V) apply
	})
	return append(cells, k2Cells()...)
}

type voltageRow struct {
	cell, profile string
	ambient       float64 // nominal test temperature
	celsius       float64 // median cell temperature
	rmse, max     float64 // mV
	samples       int
}

type socRow struct {
	cell, profile      string
	ambient, celsius   float64
	ekfRMSE, ekfMax    float64 // %, after 10 min
	within2            float64 // s to |error| ≤ 2 %, NaN if never
	ccRMSE, ccMax      float64 // %, coulomb counter from the true start
	ccWrongRMSE        float64 // %, coulomb counter from the same wrong start
	errors, rejections int
}

// socLoadedRow is one run of the loaded-start protocol: the EKF starts at the first
// sample at least socSettleSeconds into the profile whose |current| exceeds
// loadedStartRate·C, with its SOC offset from the truth there.
type socLoadedRow struct {
	cell, profile string
	ambient       float64
	startSec      float64 // start, s after the profile's first sample
	startAmps     float64 // current at the start sample, A
	truthStart    float64 // reference SOC at the start, %
	offset        float64 // initial error actually applied, % points
	within2       float64 // s from the start to |error| ≤ 2 %, NaN if never
	stays2        float64 // s from the start after which |error| stays ≤ 2 %, NaN if it ends outside
	rmse, max     float64 // %, from 10 min after the start to the end
	ccRMSE        float64 // %, coulomb counter from the same wrong start, same window
	rejected      int     // samples the EKF's innovation gate rejected
}

type runtimeRow struct {
	cell, file            string
	ambient               float64
	amps, celsius         float64
	measured, forecastSec float64
	errPct                float64
	status                string
}

// cellResult is everything measured on one cell.
type cellResult struct {
	spec     cellSpec
	fitted   *fit.Result
	voltage  []voltageRow
	soc      []socRow
	loaded   []socLoadedRow
	runtime  []runtimeRow
	skipped  []string
	capacity float64
}

// validateCell fits the cell's type from its OCV and pulse tests and runs the three
// checks.
func validateCell(ctx context.Context, root string, spec cellSpec) (*cellResult, error) {
	dir := filepath.Join(root, spec.dataset)
	lo := &labdata.Options{KeepLastDuplicate: spec.keepLastDuplicate}
	if spec.noTemperature {
		c := 25.0
		lo.DefaultCelsius = &c
	}
	read := func(name string) ([]fit.Record, error) {
		return readRecords(filepath.Join(dir, name), lo)
	}
	base, err := baseType(spec.chemistry)
	if err != nil {
		return nil, err
	}
	p := &fit.Problem{Name: spec.dataset + "-" + spec.cell, Base: base}
	if spec.ocv != "" {
		ocv, err := read(spec.ocv)
		if err != nil {
			return nil, err
		}
		p.OCVTest = ocv[0]
	}
	for _, f := range spec.pulses {
		rs, err := read(f)
		if err != nil {
			return nil, err
		}
		p.PulseTests = append(p.PulseTests, rs...)
	}
	res, err := fit.Fit(ctx, p, nil)
	if err != nil {
		return nil, fmt.Errorf("fit %s %s: %w", spec.dataset, spec.cell, err)
	}
	out := &cellResult{spec: spec, fitted: res, capacity: res.Type.CapacityAh}
	typ := res.Type
	q := typ.CapacityAh
	sim := &fit.SimSettings{BlockAverage: spec.blockAverage}

	var drives []fit.Record
	for _, g := range spec.drives {
		files, _ := filepath.Glob(filepath.Join(dir, g))
		sort.Strings(files)
		for _, f := range files {
			rs, err := readRecords(f, lo)
			if err != nil {
				return nil, err
			}
			drives = append(drives, rs...)
		}
	}
	for _, r := range drives {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		// The profiles start from full (PROVENANCE.md); the lab counter gives the truth.
		v := fit.Simulate(nil, typ, r, 1, sim)
		rmse, mx, n := fit.VoltageError(v, r, r.Time[0])
		tc := medianOf(r.Temperature) - cell.CelsiusOffset
		amb := ambientOf(spec, r.Name)
		out.voltage = append(out.voltage, voltageRow{spec.cell, r.Name, amb, tc, rmse * 1e3, mx * 1e3, n})
		if spec.noSOC {
			continue
		}
		row, err := socCheck(typ, r, q)
		if err != nil {
			out.skipped = append(out.skipped, fmt.Sprintf("SOC on %s: %v", r.Name, err))
			continue
		}
		row.cell, row.celsius, row.ambient = spec.cell, tc, amb
		out.soc = append(out.soc, row)
		for _, off := range loadedOffsets {
			lr, err := socLoadedCheck(typ, r, q, off)
			if err != nil {
				out.skipped = append(out.skipped, fmt.Sprintf("loaded-start SOC on %s: %v", r.Name, err))
				continue
			}
			lr.cell, lr.ambient = spec.cell, amb
			out.loaded = append(out.loaded, lr)
		}
	}
	for _, f := range spec.cc {
		rs, err := read(f)
		if err != nil {
			return nil, err
		}
		for _, r := range rs {
			out.runtime = append(out.runtime, runtimeChecks(typ, r, spec)...)
		}
	}
	return out, nil
}

// referenceSOC returns the SOC of the lab counter, 1 − (Ah − Ah₀)/q from full at the
// first sample; without a counter, the current integrated from full.
func referenceSOC(r fit.Record, q float64) []float64 {
	truth := make([]float64, r.Len())
	ah := r.DischargedAh
	for k := range truth {
		if ah != nil {
			truth[k] = 1 - (ah[k]-ah[0])/q
		} else if k > 0 {
			truth[k] = truth[k-1] - r.Current[k]*(r.Time[k]-r.Time[k-1])/3600/q
		} else {
			truth[k] = 1
		}
	}
	return truth
}

// recordSamples converts a record to estimator samples.
func recordSamples(r fit.Record) []estimate.Sample {
	samples := make([]estimate.Sample, r.Len())
	for k := range samples {
		samples[k] = estimate.Sample{Time: r.Time[k], Current: r.Current[k], Voltage: r.Voltage[k], Temperature: r.Temperature[k]}
	}
	return samples
}

// loadedStart returns the index of the first sample at least socSettleSeconds after the
// profile's start whose |current| exceeds loadedStartRate·C (C in A = q in Ah) and whose
// reference SOC lies within [socOffset, 1 − socOffset], so that both initial errors are
// applied in full; −1 if there is none.
func loadedStart(r fit.Record, truth []float64, q float64) int {
	for k := range r.Len() {
		if r.Time[k]-r.Time[0] >= socSettleSeconds && math.Abs(r.Current[k]) > loadedStartRate*q &&
			truth[k] >= socOffset && truth[k] <= 1-socOffset {
			return k
		}
	}
	return -1
}

// socLoadedCheck is the loaded-start protocol: the EKF (default settings, RC branches
// at rest as NewEKF sets them) starts at loadedStart, where the cell is under load and
// not rested, at the reference SOC + offset (clamped to 0..1), and runs to the end of
// the profile. A coulomb counter from the same wrong start is the baseline.
func socLoadedCheck(typ *cell.Type, r fit.Record, q, offset float64) (socLoadedRow, error) {
	row := socLoadedRow{profile: r.Name, within2: math.NaN(), stays2: math.NaN()}
	truth := referenceSOC(r, q)
	k0 := loadedStart(r, truth, q)
	if k0 < 0 {
		return row, fmt.Errorf("no sample above C/%.0f after %d s at SOC %.1f–%.1f", 1/loadedStartRate, socSettleSeconds, socOffset, 1-socOffset)
	}
	truth = truth[k0:]
	samples := recordSamples(r)[k0:]
	pack := cell.Pack{Type: typ, Series: 1, Parallel: 1}
	start := math.Min(math.Max(truth[0]+offset, 0), 1)
	row.startSec = r.Time[k0] - r.Time[0]
	row.startAmps = r.Current[k0]
	row.truthStart = 100 * truth[0]
	row.offset = 100 * (start - truth[0])
	ekf, err := estimate.NewEKF(pack, start, nil)
	if err != nil {
		return row, err
	}
	er := estimate.Run(nil, ekf, samples)
	row.rejected = int(er.Counters.Rejected)
	cc, err := estimate.NewCounter(pack, start, nil)
	if err != nil {
		return row, err
	}
	cr := estimate.Run(nil, cc, samples)
	t0 := samples[0].Time
	lastOut := -1
	var se, sc float64
	n := 0
	for k := range samples {
		e := er.Estimates[k].SOC - truth[k]
		if math.Abs(e) <= socWithin {
			if math.IsNaN(row.within2) {
				row.within2 = samples[k].Time - t0
			}
		} else {
			lastOut = k
		}
		if samples[k].Time-t0 < socSettleSeconds {
			continue
		}
		c := cr.Estimates[k].SOC - truth[k]
		se += e * e
		sc += c * c
		row.max = math.Max(row.max, math.Abs(e))
		n++
	}
	if lastOut < len(samples)-1 {
		row.stays2 = 0
		if lastOut >= 0 {
			row.stays2 = samples[lastOut+1].Time - t0
		}
	}
	if n == 0 {
		return row, fmt.Errorf("profile ends less than %d s after the loaded start", socSettleSeconds)
	}
	row.rmse = 100 * math.Sqrt(se/float64(n))
	row.ccRMSE = 100 * math.Sqrt(sc/float64(n))
	row.max *= 100
	return row, nil
}

// socCheck runs the EKF from 20 % below the true starting SOC and a coulomb counter
// beside it, against the SOC of the lab counter (1 − Ah/Q from full).
func socCheck(typ *cell.Type, r fit.Record, q float64) (socRow, error) {
	row := socRow{profile: r.Name, within2: math.NaN()}
	pack := cell.Pack{Type: typ, Series: 1, Parallel: 1}
	truth := referenceSOC(r, q)
	start := math.Max(truth[0]-socOffset, 0)
	samples := recordSamples(r)
	ekf, err := estimate.NewEKF(pack, start, nil)
	if err != nil {
		return row, err
	}
	er := estimate.Run(nil, ekf, samples)
	row.errors, row.rejections = er.Errors, int(er.Counters.Rejected)
	cc, err := estimate.NewCounter(pack, truth[0], nil)
	if err != nil {
		return row, err
	}
	cr := estimate.Run(nil, cc, samples)
	ccw, err := estimate.NewCounter(pack, start, nil)
	if err != nil {
		return row, err
	}
	cw := estimate.Run(nil, ccw, samples)
	var se, sc, sw float64
	n := 0
	t0 := r.Time[0]
	for k := range samples {
		e := er.Estimates[k].SOC - truth[k]
		if math.IsNaN(row.within2) && math.Abs(e) <= 0.02 {
			row.within2 = r.Time[k] - t0
		}
		if r.Time[k]-t0 < socSettleSeconds {
			continue
		}
		c := cr.Estimates[k].SOC - truth[k]
		w := cw.Estimates[k].SOC - truth[k]
		se += e * e
		sc += c * c
		sw += w * w
		row.ekfMax = math.Max(row.ekfMax, math.Abs(e))
		row.ccMax = math.Max(row.ccMax, math.Abs(c))
		n++
	}
	if n == 0 {
		return row, fmt.Errorf("profile shorter than %d s", socSettleSeconds)
	}
	row.ekfRMSE = 100 * math.Sqrt(se/float64(n))
	row.ccRMSE = 100 * math.Sqrt(sc/float64(n))
	row.ccWrongRMSE = 100 * math.Sqrt(sw/float64(n))
	row.ekfMax *= 100
	row.ccMax *= 100
	return row, nil
}

// runtimeChecks finds each constant-current discharge of a record (a run of samples
// whose current stays within 10 % of the run's median, lasting at least 5 minutes),
// measures its time from the first loaded sample to the cut-off (interpolated between
// samples; the end of the run when the tester stopped just above it), and forecasts it
// from full and rested at the run's mean current and mean cell temperature.
func runtimeChecks(typ *cell.Type, r fit.Record, spec cellSpec) []runtimeRow {
	var rows []runtimeRow
	imax := 0.0
	for _, i := range r.Current {
		imax = math.Max(imax, i)
	}
	n := r.Len()
	for k := 0; k < n; {
		if r.Current[k] < 0.5*imax {
			k++
			continue
		}
		j := k
		for j < n && r.Current[j] >= 0.5*imax {
			j++
		}
		run := r.Current[k:j]
		med := medianOf(run)
		var sumI, sumT float64
		m := 0
		for i := k; i < j; i++ {
			if math.Abs(r.Current[i]-med) <= 0.1*med {
				sumI += r.Current[i]
				sumT += r.Temperature[i]
				m++
			}
		}
		// The load begins at the last sample before the run (backward hold).
		t0 := r.Time[max(k-1, 0)]
		end := r.Time[j-1]
		for i := k; i < j; i++ {
			if r.Voltage[i] <= spec.cutoff {
				end = r.Time[i]
				if i > k && r.Voltage[i-1] > spec.cutoff {
					f := (r.Voltage[i-1] - spec.cutoff) / (r.Voltage[i-1] - r.Voltage[i])
					end = r.Time[i-1] + f*(r.Time[i]-r.Time[i-1])
				}
				break
			}
		}
		if end-t0 >= 300 && m > 0 {
			row := runtimeRow{cell: spec.cell, file: r.Name, ambient: ambientOf(spec, r.Name), amps: sumI / float64(m), celsius: sumT/float64(m) - cell.CelsiusOffset, measured: end - t0}
			if len(rows) > 0 || j < n {
				row.file = fmt.Sprintf("%s #%d", r.Name, len(rows)+1)
			}
			prob := &forecast.Problem{Problem: sim.Problem{
				Pack:            cell.Pack{Type: typ, Series: 1, Parallel: 1},
				Initial:         cell.State{SOC: 1},
				Celsius:         row.celsius,
				Load:            sim.ConstantCurrent(row.amps),
				CellCutoffVolts: spec.cutoff,
			}}
			res, err := forecast.Run(nil, prob, nil)
			if err != nil {
				row.status = err.Error()
				row.forecastSec, row.errPct = math.NaN(), math.NaN()
			} else {
				row.status = res.Status.String()
				row.forecastSec = res.Seconds
				row.errPct = 100 * (res.Seconds - row.measured) / row.measured
			}
			rows = append(rows, row)
		}
		k = j
	}
	return rows
}

func medianOf(v []float64) float64 {
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	if len(s) == 0 {
		return math.NaN()
	}
	return s[len(s)/2]
}

// modelValidationSections returns the markdown sections on the voltage model, SOC
// estimation and runtime.
func modelValidationSections(ctx context.Context, root string, quick bool, progress func(string)) (string, []*cellResult, error) {
	var results []*cellResult
	for _, spec := range modelCells(quick) {
		if progress != nil {
			progress(fmt.Sprintf("%s %s", spec.dataset, spec.cell))
		}
		r, err := validateCell(ctx, root, spec)
		if err != nil {
			return "", nil, err
		}
		results = append(results, r)
	}
	var b strings.Builder
	writeFitSection(&b, results)
	writeVoltageSection(&b, results)
	writeSOCSection(&b, results)
	writeSOCLoadedSection(&b, results)
	writeRuntimeSection(&b, results)
	return b.String(), results, nil
}

func writeFitSection(b *strings.Builder, rs []*cellResult) {
	b.WriteString("## Fitted types\n\n")
	b.WriteString("Each cell's type is fitted by `voltcast fit` (package model/fit) from that cell's low-rate OCV test and pulse test(s) only (k2_lfp26650 has no low-rate test: one type per temperature from that temperature's HPPC test alone, its OCV and capacity from the HPPC's long rests), with default settings " +
		"(2 RC branches, the fastest a Butler–Volmer charge-transfer branch where the pulses span several current magnitudes, OCV rows anchored to the pulse tests' rested voltages, Arrhenius rows between and beyond the tested temperatures). Nothing below is tuned on the drive cycles, profiles or constant-current discharges.\n\n")
	b.WriteString("| dataset | cell | fitted from | capacity Ah | pulse-window RMSE mV | notes |\n|---|---|---|---|---|---|\n")
	for _, r := range rs {
		var pulseRMSE []string
		for _, f := range r.fitted.Report.Files {
			if f.Role == "pulse" {
				pulseRMSE = append(pulseRMSE, fmt.Sprintf("%s %.1f", f.Name, f.RMSE*1e3))
			}
		}
		from := r.spec.ocv + " + " + strings.Join(r.spec.pulses, ", ")
		if r.spec.ocv == "" {
			from = "rests and pulses of " + strings.Join(r.spec.pulses, ", ") + " (no low-rate test)"
		}
		notes := strings.Join(r.fitted.Report.Notes, "; ")
		if r.spec.noTemperature {
			notes = "no temperature column: 25 °C assumed; " + notes
		}
		fmt.Fprintf(b, "| %s (%s) | %s | %s | %.4f | %s | %s |\n", r.spec.dataset, r.spec.cite, r.spec.cell, from, r.capacity, strings.Join(pulseRMSE, "; "), notes)
	}
	b.WriteString("\n")
}

// voltTarget returns the voltage RMSE target at nominal test temperature c, °C.
func voltTarget(c float64) (float64, string) {
	switch {
	case c <= 0:
		return targetVoltageColdMV, "≤ 30"
	case c >= 20 && c <= 30:
		return targetVoltageWarmMV, "≤ 15"
	}
	return math.NaN(), "–"
}

func mark(ok bool) string {
	if ok {
		return "met"
	}
	return "**missed**"
}

func writeVoltageSection(b *strings.Builder, rs []*cellResult) {
	b.WriteString("## Voltage model: drive cycles and random profiles simulated from the true start\n\n")
	b.WriteString("Each profile is simulated from its first sample, fully charged and rested (every profile of these datasets starts from full), driven by the measured current and cell temperature; " +
		"the state of charge follows the current (the lab counter is not used). Metric: RMSE and largest absolute error of the terminal voltage over all samples, mV. " +
		"The target applies by the test (chamber) temperature; the median measured cell temperature is shown beside it. Targets (issue 3): ≤ 15 mV at 25 °C, ≤ 30 mV at 0 °C and below. " +
		"pan18650pf profiles are 1-s block averages (PROVENANCE.md), so the model's interval-average voltage is compared.\n\n")
	for _, r := range rs {
		if len(r.voltage) == 0 {
			continue
		}
		fmt.Fprintf(b, "### %s %s\n\nSource: %s.\n\n", r.spec.dataset, r.spec.cell, r.spec.cite)
		if len(r.voltage) > 20 {
			writeVoltageSummary(b, r)
			continue
		}
		b.WriteString("| profile | test °C | cell °C (median) | samples | RMSE mV | max mV | target mV | |\n|---|---|---|---|---|---|---|---|\n")
		for _, v := range r.voltage {
			t, ts := voltTarget(v.ambient)
			status := "–"
			if !math.IsNaN(t) {
				status = mark(v.rmse <= t)
			}
			fmt.Fprintf(b, "| %s | %.0f | %.1f | %d | %.1f | %.0f | %s | %s |\n", v.profile, v.ambient, v.celsius, v.samples, v.rmse, v.max, ts, status)
		}
		b.WriteString("\n")
	}
}

func writeVoltageSummary(b *strings.Builder, r *cellResult) {
	var rm []float64
	met := 0
	worst := r.voltage[0]
	for _, v := range r.voltage {
		rm = append(rm, v.rmse)
		if t, _ := voltTarget(v.ambient); v.rmse <= t {
			met++
		}
		if v.rmse > worst.rmse {
			worst = v
		}
	}
	sort.Float64s(rm)
	var mean float64
	for _, v := range rm {
		mean += v
	}
	mean /= float64(len(rm))
	fmt.Fprintf(b, "%d profiles at %.0f °C (cell %.0f–%.0f °C): RMSE mean %.1f mV, median %.1f mV, 90th percentile %.1f mV, worst %.1f mV (%s, max error %.0f mV); %d of %d meet the 15 mV target.\n\n",
		len(rm), r.voltage[0].ambient, minField(r.voltage), maxField(r.voltage), mean, rm[len(rm)/2], rm[int(0.9*float64(len(rm)-1))], worst.rmse, worst.profile, worst.max, met, len(rm))
}

func minField(v []voltageRow) float64 {
	m := math.Inf(1)
	for _, x := range v {
		m = math.Min(m, x.celsius)
	}
	return m
}

func maxField(v []voltageRow) float64 {
	m := math.Inf(-1)
	for _, x := range v {
		m = math.Max(m, x.celsius)
	}
	return m
}

func writeSOCSection(b *strings.Builder, rs []*cellResult) {
	b.WriteString("## SOC estimation: EKF started 20 % below the true SOC\n\n")
	b.WriteString("The extended Kalman filter of model/estimate (default settings) runs on each profile with the fitted type, starting at the true SOC − 0.20. " +
		"Reference SOC = 1 − (lab Ah counter)/(capacity of the OCV test), from full. Errors in SOC percentage points after the first 10 minutes; " +
		"\"to 2 %\" = time from the first sample until the error first comes within 2 points (0: the filter's first update, on the rested starting voltage, already brings it there). Baselines: a coulomb counter started at the true SOC, and one started at the same wrong SOC. " +
		"Targets (issue 3, 25 °C): RMSE ≤ 1.5 %, max ≤ 4 %.\n\n")
	for _, r := range rs {
		if len(r.soc) == 0 {
			continue
		}
		fmt.Fprintf(b, "### %s %s\n\nSource: %s.\n\n", r.spec.dataset, r.spec.cell, r.spec.cite)
		if len(r.soc) > 20 {
			writeSOCSummary(b, r)
			continue
		}
		b.WriteString("| profile | test °C | EKF RMSE % | EKF max % | to 2 % (s) | counter RMSE % (true start) | counter max % (true start) | counter RMSE % (wrong start) | target | |\n|---|---|---|---|---|---|---|---|---|---|\n")
		for _, s := range r.soc {
			status, ts := "–", "–"
			if s.ambient >= 20 && s.ambient <= 30 {
				ts = "≤ 1.5 / ≤ 4"
				status = mark(s.ekfRMSE <= targetSOCRMSEPct && s.ekfMax <= targetSOCMaxPct)
			}
			fmt.Fprintf(b, "| %s | %.0f | %.2f | %.2f | %s | %.2f | %.2f | %.2f | %s | %s |\n", s.profile, s.ambient, s.ekfRMSE, s.ekfMax, secs(s.within2), s.ccRMSE, s.ccMax, s.ccWrongRMSE, ts, status)
		}
		b.WriteString("\n")
	}
}

func writeSOCSummary(b *strings.Builder, r *cellResult) {
	var rm, mx, cc, tw []float64
	met := 0
	for _, s := range r.soc {
		rm = append(rm, s.ekfRMSE)
		mx = append(mx, s.ekfMax)
		cc = append(cc, s.ccRMSE)
		if !math.IsNaN(s.within2) {
			tw = append(tw, s.within2)
		}
		if s.ekfRMSE <= targetSOCRMSEPct && s.ekfMax <= targetSOCMaxPct {
			met++
		}
	}
	fmt.Fprintf(b, "%d profiles: EKF RMSE median %.2f %% (worst %.2f %%), max error median %.2f %% (worst %.2f %%); %d of %d meet both targets; "+
		"within 2 %% after a median %s (%d of %d profiles get there); coulomb counter from the true start: RMSE median %.2f %% (worst %.2f %%).\n\n",
		len(rm), medianOf(rm), maxOf(rm), medianOf(mx), maxOf(mx), met, len(rm), secs(medianOf(tw)), len(tw), len(rm), medianOf(cc), maxOf(cc))
}

func writeSOCLoadedSection(b *strings.Builder, rs []*cellResult) {
	b.WriteString("## SOC estimation, loaded start: EKF started 20 % off the truth under load\n\n")
	b.WriteString("A second protocol beside the one above (which it does not replace): there every profile starts full and rested, so the filter's first update on the rested voltage removes the 20 % error at once and \"to 2 %\" is 0 s. " +
		"Here the same filter (model/estimate, default settings, RC branches initialised at rest) starts at the first sample at least 10 minutes into the profile whose |current| exceeds C/5 (C in A = the fitted capacity in Ah) and whose reference SOC lies between 20 % and 80 % (so that both offsets fit in 0–100 %; one rule for every file), so the cell is under load and not rested, " +
		"at the reference SOC there + 20 points and − 20 points (two runs; the offset applied is shown). Reference SOC from the lab Ah counter as above. " +
		"\"to 2 %\" = time from the start until the error first comes within 2 points; \"stays\" = time from the start after which it never leaves 2 points again (\"never\": it ends the profile outside). " +
		"RMSE and max over the samples from 10 minutes after the start to the end. Baseline: a coulomb counter from the same wrong start (its error stays ≈ the offset). " +
		"Targets (issue 3, 25 °C, unchanged): RMSE ≤ 1.5 %, max ≤ 4 %; the issue sets no target for the time to 2 %.\n\n")
	for _, r := range rs {
		if len(r.loaded) == 0 {
			continue
		}
		fmt.Fprintf(b, "### %s %s\n\nSource: %s.\n\n", r.spec.dataset, r.spec.cell, r.spec.cite)
		if len(r.loaded) > 40 {
			writeSOCLoadedSummary(b, r)
			continue
		}
		b.WriteString("| profile | test °C | start s | current A | true SOC % | initial error % | to 2 % (s) | stays within 2 % (s) | EKF RMSE % | EKF max % | counter RMSE % (wrong start) | gate rejections | target | |\n|---|---|---|---|---|---|---|---|---|---|---|---|---|---|\n")
		for _, s := range r.loaded {
			status, ts := "–", "–"
			if s.ambient >= 20 && s.ambient <= 30 {
				ts = "≤ 1.5 / ≤ 4"
				status = mark(s.rmse <= targetSOCRMSEPct && s.max <= targetSOCMaxPct)
			}
			fmt.Fprintf(b, "| %s | %.0f | %.0f | %.2f | %.1f | %+.1f | %s | %s | %.2f | %.2f | %.2f | %d | %s | %s |\n",
				s.profile, s.ambient, s.startSec, s.startAmps, s.truthStart, s.offset, secs(s.within2), secs(s.stays2), s.rmse, s.max, s.ccRMSE, s.rejected, ts, status)
		}
		b.WriteString("\n")
	}
}

// writeSOCLoadedSummary gives summary statistics per initial-error sign for a cell with
// many profiles.
func writeSOCLoadedSummary(b *strings.Builder, r *cellResult) {
	for _, neg := range []bool{true, false} {
		var rm, mx, tw, ts, st []float64
		met := 0
		for _, s := range r.loaded {
			if (s.offset < 0) != neg {
				continue
			}
			rm = append(rm, s.rmse)
			mx = append(mx, s.max)
			st = append(st, s.startSec)
			if !math.IsNaN(s.within2) {
				tw = append(tw, s.within2)
			}
			if !math.IsNaN(s.stays2) {
				ts = append(ts, s.stays2)
			}
			if s.rmse <= targetSOCRMSEPct && s.max <= targetSOCMaxPct {
				met++
			}
		}
		if len(rm) == 0 {
			continue
		}
		sign := "+"
		if neg {
			sign = "−"
		}
		fmt.Fprintf(b, "- %s20 %% (start %s–%s s into the profile): %d profiles; within 2 %% after a median %s s (worst %s s; %d of %d get there), stays within 2 %% after a median %s s (worst %s s; %d of %d end inside); "+
			"EKF RMSE median %.2f %% (worst %.2f %%), max error median %.2f %% (worst %.2f %%); %d of %d meet both targets.\n",
			sign, secs(minOf(st)), secs(maxOf(st)), len(rm), secs(medianOf(tw)), secs(maxOf(tw)), len(tw), len(rm), secs(medianOf(ts)), secs(maxOf(ts)), len(ts), len(rm),
			medianOf(rm), maxOf(rm), medianOf(mx), maxOf(mx), met, len(rm))
	}
	b.WriteString("\n")
}

func minOf(v []float64) float64 {
	m := math.Inf(1)
	for _, x := range v {
		m = math.Min(m, x)
	}
	return m
}

func maxOf(v []float64) float64 {
	m := math.Inf(-1)
	for _, x := range v {
		m = math.Max(m, x)
	}
	return m
}

func secs(s float64) string {
	if math.IsNaN(s) {
		return "never"
	}
	return fmt.Sprintf("%.0f", s)
}

func writeRuntimeSection(b *strings.Builder, rs []*cellResult) {
	b.WriteString("## Runtime: time to cut-off of constant-current discharges from full\n\n")
	b.WriteString("model/forecast with the fitted type, from full and rested, at the discharge's mean current and mean measured cell temperature (held constant), to the dataset's cut-off. " +
		"Measured: from the last sample before the load to the cut-off (interpolated; the end of the discharge where the tester stopped at it). Target (issue 3, 25 °C): within 2 %.\n\n")
	b.WriteString("| dataset | cell | discharge | current A | cell °C | measured s | forecast s | error % | target | |\n|---|---|---|---|---|---|---|---|---|---|\n")
	for _, r := range rs {
		for _, x := range r.runtime {
			status, ts := "–", "–"
			if x.ambient >= 20 && x.ambient <= 30 {
				ts = "±2 %"
				status = mark(math.Abs(x.errPct) <= targetRuntimePct)
			}
			fmt.Fprintf(b, "| %s (%s) | %s | %s | %.2f | %.1f | %.0f | %.0f | %+.1f | %s | %s |\n", r.spec.dataset, r.spec.cite, x.cell, x.file, x.amps, x.celsius, x.measured, x.forecastSec, x.errPct, ts, status)
		}
	}
	b.WriteString("\n")
}
