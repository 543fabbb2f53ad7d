package main

import (
	"bufio"
	"context"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
	"strings"

	"github.com/voltcast/voltcast/labdata"
	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/estimate"
)

func init() {
	register("estimate", command{
		summary: "track state of charge through a telemetry or lab log (extended Kalman filter)",
		run:     runEstimate,
	})
}

// estimateUsage is the first line of voltcast estimate -h.
const estimateUsage = "usage: voltcast estimate --type TYPE --in LOG.csv --out EST.csv [--initial-soc X] [--temperature-celsius T] [--current-sign charge-positive] [--series S --parallel P] [--health] [--estimator ekf|coulomb-counter]"

// progressRows is the file size from which estimate reports progress on stderr (a
// variable so that a test can lower it).
var progressRows = 200_000

func runEstimate(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("estimate", stderr)
	typeName := fs.String("type", "", "built-in cell type (see voltcast types) or a JSON parameter file (required)")
	in := fs.String("in", "", "input log CSV (required): time_s, current_a, voltage_v, a temperature column (temp_cell_c, temperature_c or temp_c), optional profile")
	out := fs.String("out", "", "output CSV, one row per input row (required; - for stdout)")
	initial := fs.Float64("initial-soc", math.NaN(), "state of charge at the start of the log (or of each profile), a fraction 0–1; default: from the first rested voltage")
	celsius := fs.Float64("temperature-celsius", math.NaN(), "cell temperature, °C, for a log without a temperature column")
	sign := fs.String("current-sign", "discharge-positive", "sign convention of current_a in the log: discharge-positive or charge-positive")
	series := fs.Int("series", 1, "cells in series (current_a and voltage_v are for the whole pack)")
	parallel := fs.Int("parallel", 1, "cells in parallel")
	health := fs.Bool("health", false, "also estimate the capacity and resistance factors (state of health) from the log")
	which := fs.String("estimator", "ekf", "ekf (extended Kalman filter) or coulomb-counter (the baseline)")
	modelSigma := fs.Float64("model-sigma-volts", 0, "the type's voltage error per cell under load, V (e.g. the fit's RMSE; 0: the default 0.020)")
	timing := fs.String("current-timing", "interval-average", "what a row's current means: interval-average (mean since the previous row) or sample-and-hold (held until the next row)")
	fs.Usage = func() {
		fmt.Fprintln(stderr, estimateUsage)
		fmt.Fprintln(stderr, "")
		fmt.Fprintln(stderr, "Current is positive when it leaves the battery (discharge). EST.csv has one row per input row:")
		fmt.Fprintln(stderr, "[profile,]time_s,soc,soc_sigma,voltage_v,voltage_model_v,innovation_v,flags[,capacity_factor,...].")
		fmt.Fprintln(stderr, "Flags: rejected (outlier voltage), forced, invalid (NaN or saturated reading), rest, gap,")
		fmt.Fprintln(stderr, "temperature-range, soc-range, health-clamped, repaired, error (row refused, e.g. time backwards).")
		fmt.Fprintln(stderr, "Estimates are advisory: the cell maker's datasheet, local codes and licensed practice govern")
		fmt.Fprintln(stderr, "charging and deep discharge.")
		fmt.Fprintln(stderr, "")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *in == "" || *out == "" {
		return fmt.Errorf("%w: --in and --out are required", errUsage)
	}
	if err := checkGivenNaN(fs, []string{"initial-soc", "temperature-celsius"}, *initial, *celsius); err != nil {
		return err
	}
	if !math.IsNaN(*initial) {
		if err := cell.CheckSOC("--initial-soc", *initial); err != nil {
			return fmt.Errorf("%w: %v", errUsage, err)
		}
	}
	if !math.IsNaN(*celsius) {
		if err := cell.CheckCelsius("--temperature-celsius", *celsius); err != nil {
			return fmt.Errorf("%w: %v", errUsage, err)
		}
	}
	cs, err := labdata.ParseCurrentSign(*sign)
	if err != nil {
		return fmt.Errorf("%w: --current-sign: %v", errUsage, err)
	}
	settings := &estimate.Settings{Health: *health, ModelSigma: *modelSigma}
	switch *timing {
	case "interval-average":
	case "sample-and-hold":
		settings.Timing = estimate.SampleAndHold
	default:
		return fmt.Errorf("%w: --current-timing must be interval-average or sample-and-hold, got %q", errUsage, *timing)
	}
	if *which != "ekf" && *which != "coulomb-counter" {
		return fmt.Errorf("%w: --estimator must be ekf or coulomb-counter, got %q", errUsage, *which)
	}
	if err := settings.Validate(); err != nil {
		return fmt.Errorf("%w: %v", errUsage, err)
	}
	typ, err := loadType(*typeName)
	if err != nil {
		return err
	}
	pack, err := cell.NewPack(typ, *series, *parallel)
	if err != nil {
		return fmt.Errorf("%w: pack: %v", errUsage, err)
	}

	log, err := readLog(*in, cs == labdata.ChargePositive, *celsius)
	if err != nil {
		return err
	}
	if log.tempDefaulted {
		fmt.Fprintf(stderr, "estimate: %s has no temperature column; using %g °C for every row\n", *in, *celsius)
	}

	w, closeOut, err := createOut(*out, stdout)
	if err != nil {
		return err
	}
	bw := bufio.NewWriterSize(w, 1<<16)
	cw := &estWriter{w: bw, profile: log.profile != nil, health: *health}
	cw.header()

	newEstimator := func() (estimate.Estimator, error) {
		if *which == "coulomb-counter" {
			return estimate.NewCounter(pack, 0.5, settings)
		}
		return estimate.NewEKF(pack, 0.5, settings)
	}
	n := log.len()
	showProgress := n >= progressRows
	nextProgress := n / 10
	var total estimate.Counters
	var timeErrors int
	var summaries []string
	for _, p := range log.profiles() {
		if err := ctx.Err(); err != nil {
			closeOut()
			return err
		}
		e, err := newEstimator()
		if err != nil {
			closeOut()
			return fmt.Errorf("estimator: %w", err)
		}
		how, err := initialise(e, pack, log, p, *initial)
		if err != nil {
			closeOut()
			return fmt.Errorf("%s: %w", log.where(p.start), err)
		}
		var last estimate.Estimate
		for k := p.start; k < p.end; k++ {
			est, err := e.Update(log.sample(k))
			if err != nil {
				if errors.Is(err, estimate.ErrImplausible) {
					closeOut()
					return fmt.Errorf("%s: %w", log.where(k), err)
				}
				if timeErrors == 0 {
					fmt.Fprintf(stderr, "estimate: %s: %v; the row is flagged error and skipped\n", log.where(k), err)
				}
				timeErrors++
				est.Flags |= estimate.FlagError
			}
			cw.row(log, k, est)
			last = est
			if showProgress && k+1 >= nextProgress {
				fmt.Fprintf(stderr, "estimate: %d%% (%d of %d rows)\n", 100*(k+1)/n, k+1, n)
				nextProgress += n / 10
			}
		}
		c := e.Counters()
		total.Samples += c.Samples
		total.Updates += c.Updates
		total.Rejected += c.Rejected
		total.Forced += c.Forced
		total.Invalid += c.Invalid
		total.Errors += c.Errors
		name := "log"
		if log.profile != nil {
			name = fmt.Sprintf("profile %d", log.profile[p.start])
		}
		summaries = append(summaries, fmt.Sprintf("%s: %d rows, start %s, final SOC %.3f ± %.3f; rejected %d, invalid %d, errors %d",
			name, p.end-p.start, how, last.SOC, last.SOCSigma, c.Rejected, c.Invalid, c.Errors))
	}
	if err := bw.Flush(); err != nil {
		closeOut()
		return fmt.Errorf("write %s: %w", *out, err)
	}
	if err := closeOut(); err != nil {
		return fmt.Errorf("write %s: %w", *out, err)
	}
	if timeErrors > 1 {
		fmt.Fprintf(stderr, "estimate: %d rows in all were refused (flagged error)\n", timeErrors)
	}
	if *out != "-" {
		const maxLines = 20
		for i, s := range summaries {
			if i == maxLines {
				fmt.Fprintf(stdout, "... %d more profiles\n", len(summaries)-maxLines)
				break
			}
			fmt.Fprintln(stdout, s)
		}
		fmt.Fprintf(stdout, "%d rows written to %s (%s); %d voltages rejected as outliers, %d readings invalid, %d rows refused\n",
			n, *out, *which, total.Rejected, total.Invalid, total.Errors)
	}
	return nil
}

// initialise starts estimator e for profile p: at --initial-soc when given, else from
// the first rested voltage of the profile. When that is not the first row, the charge
// that flowed before it is added back (coulomb counting backwards) to give the SOC at
// the first row; with no rested row at all, the first voltage corrected by the series
// resistance drop is used. It returns how the start was chosen, for the summary.
func initialise(e estimate.Estimator, pack cell.Pack, log *logData, p span, initial float64) (string, error) {
	if !math.IsNaN(initial) {
		return fmt.Sprintf("SOC %.3f (given)", initial), e.InitSOC(initial)
	}
	restI := pack.RatedCapacityAh() / 50 // the estimators' default rest current, C/50
	first := -1
	for k := p.start; k < p.end; k++ {
		s := log.sample(k)
		if cell.Finite(s.Current) && cell.Finite(s.Voltage) && cell.Finite(s.Temperature) && s.Voltage > 0 {
			if math.Abs(s.Current) <= restI {
				first = k
				break
			}
		}
	}
	if first == p.start {
		s := log.sample(first)
		if err := e.InitFromVoltage(s.Voltage, s.Temperature); err != nil {
			return "", fmt.Errorf("initial SOC from the rested voltage: %w", err)
		}
		return fmt.Sprintf("SOC %.3f (from the rested voltage %.4g V)", e.State().SOC, s.Voltage), nil
	}
	if first > p.start {
		s := log.sample(first)
		if err := e.InitFromVoltage(s.Voltage, s.Temperature); err != nil {
			return "", fmt.Errorf("initial SOC from the rested voltage at %s: %w", log.where(first), err)
		}
		z := e.State().SOC
		// Charge that left the pack between the first row and the rested one.
		var ah float64
		for k := p.start + 1; k <= first; k++ {
			i, dt := log.current[k], log.time[k]-log.time[k-1]
			if cell.Finite(i) && dt > 0 && dt < 3600 {
				ah += i * dt / 3600
			}
		}
		z0 := math.Min(1, math.Max(0, z+ah/pack.CapacityAh()))
		return fmt.Sprintf("SOC %.3f (from the rested voltage at %s, counted back)", z0, log.where(first)), e.InitSOC(z0)
	}
	// No rested row: the first usable voltage plus the ohmic drop.
	for k := p.start; k < p.end; k++ {
		s := log.sample(k)
		if !cell.Finite(s.Current) || !cell.Finite(s.Voltage) || !cell.Finite(s.Temperature) || s.Voltage <= 0 {
			continue
		}
		v := s.Voltage + s.Current*pack.PackResistance(0.5, s.Temperature)
		if err := e.InitFromVoltage(v, s.Temperature); err != nil {
			return "", fmt.Errorf("initial SOC from the first voltage: %w (pass --initial-soc)", err)
		}
		z := e.State().SOC
		return fmt.Sprintf("SOC %.3f (no rested row: first voltage corrected for R0)", z), e.InitSOC(z)
	}
	return "", errors.New("no usable row to start from (pass --initial-soc)")
}

// createOut opens the output file, or stdout for "-".
func createOut(path string, stdout io.Writer) (io.Writer, func() error, error) {
	if path == "-" {
		return stdout, func() error { return nil }, nil
	}
	f, err := os.Create(path)
	if err != nil {
		return nil, nil, fmt.Errorf("create output: %w", err)
	}
	closed := false
	return f, func() error {
		if closed {
			return nil
		}
		closed = true
		return f.Close()
	}, nil
}

// logData is a telemetry log as columns. Unlike the lab reader (package labdata), which
// refuses a file at its first bad row because a fit must not use bad data, this reader
// keeps every row: a field that is empty or not a number becomes NaN, and the estimator
// then flags that row invalid (or refuses a row whose time goes backwards) while the
// output keeps one row per input row.
type logData struct {
	name          string
	line          []int // file line of each row
	time          []float64
	current       []float64 // A, discharge positive
	voltage       []float64
	kelvin        []float64
	profile       []int // nil without a profile column
	tempDefaulted bool
}

// span is one profile's rows [start, end).
type span struct{ start, end int }

func (l *logData) len() int { return len(l.time) }

func (l *logData) sample(k int) estimate.Sample {
	return estimate.Sample{Time: l.time[k], Current: l.current[k], Voltage: l.voltage[k], Temperature: l.kelvin[k]}
}

func (l *logData) where(k int) string { return fmt.Sprintf("%s:%d", l.name, l.line[k]) }

// profiles splits the rows into runs of equal profile number (one run without a
// profile column).
func (l *logData) profiles() []span {
	if l.profile == nil {
		return []span{{0, l.len()}}
	}
	var out []span
	start := 0
	for k := 1; k <= l.len(); k++ {
		if k == l.len() || l.profile[k] != l.profile[start] {
			out = append(out, span{start, k})
			start = k
		}
	}
	return out
}

// Column names, as labdata recognises them.
var (
	logTempNames = []string{"temp_cell_c", "temperature_c", "temp_c"}
	logRequired  = []string{"time_s", "current_a", "voltage_v"}
)

// maxLogRows bounds the rows read into memory (about 60 bytes each).
const maxLogRows = 50_000_000

// readLog reads a log CSV. chargePositive flips the current's sign; defaultCelsius (NaN
// for none) is the temperature of a file without a temperature column.
func readLog(path string, chargePositive bool, defaultCelsius float64) (*logData, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("read log: %w", err)
	}
	defer f.Close()
	name := path
	cr := csv.NewReader(bufio.NewReaderSize(f, 1<<16))
	cr.ReuseRecord = true
	cr.FieldsPerRecord = -1
	head, err := cr.Read()
	if err == io.EOF {
		return nil, fmt.Errorf("%s: empty file (no header row)", name)
	}
	if err != nil {
		return nil, fmt.Errorf("%s: %w", name, err)
	}
	col := map[string]int{}
	for i, h := range head {
		h = strings.ToLower(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")))
		if _, dup := col[h]; dup && h != "" {
			return nil, fmt.Errorf("%s: column %q appears twice", name, h)
		}
		col[h] = i
	}
	var missing []string
	for _, n := range logRequired {
		if _, ok := col[n]; !ok {
			missing = append(missing, n)
		}
	}
	tcol := -1
	for _, n := range logTempNames {
		if i, ok := col[n]; ok {
			tcol = i
			break
		}
	}
	if tcol < 0 && math.IsNaN(defaultCelsius) {
		missing = append(missing, "temp_cell_c (or temperature_c, temp_c; or pass --temperature-celsius)")
	}
	if len(missing) > 0 {
		return nil, fmt.Errorf("%s: missing column(s) %s (have %s)", name, strings.Join(missing, ", "), strings.Join(head, ","))
	}
	pcol, hasProfile := col["profile"]
	sign := 1.0
	if chargePositive {
		sign = -1
	}
	l := &logData{name: name, tempDefaulted: tcol < 0}
	num := func(row []string, c int) float64 {
		if c < 0 || c >= len(row) {
			return math.NaN()
		}
		v, err := strconv.ParseFloat(strings.TrimSpace(row[c]), 64)
		if err != nil {
			return math.NaN()
		}
		return v
	}
	line := 1
	for {
		row, err := cr.Read()
		line++
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("%s: %w", name, err)
		}
		if len(row) == 1 && strings.TrimSpace(row[0]) == "" {
			continue
		}
		if l.len() >= maxLogRows {
			return nil, fmt.Errorf("%s: more than %d rows; split the log", name, maxLogRows)
		}
		tc := defaultCelsius
		if tcol >= 0 {
			tc = num(row, tcol)
		}
		if hasProfile {
			p := num(row, pcol)
			if !cell.Finite(p) || p != math.Trunc(p) || math.Abs(p) > 1e9 {
				return nil, fmt.Errorf("%s:%d: profile %q is not an integer", name, line, field(row, pcol))
			}
			l.profile = append(l.profile, int(p))
		}
		l.line = append(l.line, line)
		l.time = append(l.time, num(row, col["time_s"]))
		l.current = append(l.current, sign*num(row, col["current_a"]))
		l.voltage = append(l.voltage, num(row, col["voltage_v"]))
		l.kelvin = append(l.kelvin, tc+cell.CelsiusOffset)
	}
	if l.len() == 0 {
		return nil, fmt.Errorf("%s: no data rows", name)
	}
	return l, nil
}

func field(row []string, c int) string {
	if c < len(row) {
		return row[c]
	}
	return ""
}

// estWriter writes EST.csv.
type estWriter struct {
	w       *bufio.Writer
	profile bool
	health  bool
	buf     []byte
}

func (c *estWriter) header() {
	if c.profile {
		c.w.WriteString("profile,")
	}
	c.w.WriteString("time_s,soc,soc_sigma,voltage_v,voltage_model_v,innovation_v,flags")
	if c.health {
		c.w.WriteString(",capacity_factor,capacity_sigma,resistance_factor,resistance_sigma")
	}
	c.w.WriteByte('\n')
}

func (c *estWriter) row(l *logData, k int, e estimate.Estimate) {
	b := c.buf[:0]
	if c.profile {
		b = strconv.AppendInt(b, int64(l.profile[k]), 10)
		b = append(b, ',')
	}
	b = appendNum(b, l.time[k], -1)
	b = append(b, ',')
	b = appendNum(b, e.SOC, 6)
	b = append(b, ',')
	b = appendNum(b, e.SOCSigma, 6)
	b = append(b, ',')
	b = appendNum(b, l.voltage[k], -1)
	b = append(b, ',')
	b = appendNum(b, e.Voltage, 5)
	b = append(b, ',')
	b = appendNum(b, e.Innovation, 5)
	b = append(b, ',')
	b = append(b, e.Flags.String()...)
	if c.health {
		for _, v := range []float64{e.CapacityFactor, e.CapacitySigma, e.ResistanceFactor, e.ResistanceSigma} {
			b = append(b, ',')
			b = appendNum(b, v, 5)
		}
	}
	b = append(b, '\n')
	c.w.Write(b)
	c.buf = b
}

// appendNum appends v with prec decimals (-1: shortest exact form); NaN and infinities
// are written as an empty field.
func appendNum(b []byte, v float64, prec int) []byte {
	if !cell.Finite(v) {
		return b
	}
	if prec < 0 {
		return strconv.AppendFloat(b, v, 'g', -1, 64)
	}
	// Round first so that a tiny negative value prints as 0, not -0.
	p := math.Pow10(prec)
	return strconv.AppendFloat(b, math.Round(v*p)/p+0, 'f', prec, 64)
}
