package main

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/plotutil"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"

	"github.com/voltcast/voltcast/model/ageing"
)

func init() {
	register("lifetime", command{
		summary: "project cycles to end of life from a capacity history CSV",
		run:     runLifetime,
	})
}

// Column names recognised in a capacity table, in order of preference.
var (
	lifetimeCycleCols    = []string{"cycle", "cycle_index", "discharge_index"}
	lifetimeCapacityCols = []string{"capacity_ah", "capacity_amp_hours", "dis_ah"}
	lifetimeCellCols     = []string{"cell_id"}
	lifetimeDaysCols     = []string{"elapsed_days", "days"}
	lifetimeTimeCols     = []string{"start_time_local", "start_time", "timestamp"}
)

// lifetimeSeries is one cell's capacity history read from a table.
type lifetimeSeries struct {
	cell     string
	cycles   []float64
	capacity []float64
	days     []float64 // elapsed days from the cell's first row; nil if the table has no time
	skipped  int       // rows without a capacity value (or dropped by a row filter)
}

// maxCapacityRows bounds the rows of a capacity history read into memory (a variable
// only so that a test can lower it).
var maxCapacityRows = 5_000_000

// readCapacityTable reads a CSV capacity history with a header row: a cycle-index column,
// a capacity column in Ah and optionally a cell_id column (one series per cell, in order
// of first appearance) and a time column (elapsed days, or an ISO 8601 start time). Rows
// whose capacity is empty are skipped and counted; other unparsable values are errors.
// If keep is not nil, only rows for which it returns true are read (it gets a lookup of
// the row's fields by lower-case column name; rows it drops are counted as skipped).
func readCapacityTable(r io.Reader, keep func(field func(col string) string) bool) ([]*lifetimeSeries, error) {
	cr := csv.NewReader(r)
	cr.ReuseRecord = true
	cr.FieldsPerRecord = -1
	head, err := cr.Read()
	if err != nil {
		if errors.Is(err, io.EOF) {
			return nil, errors.New("empty file: a header row is required")
		}
		return nil, fmt.Errorf("read header: %w", err)
	}
	cols := make(map[string]int, len(head))
	for i, h := range head {
		cols[strings.ToLower(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")))] = i
	}
	find := func(names []string) int {
		for _, n := range names {
			if i, ok := cols[n]; ok {
				return i
			}
		}
		return -1
	}
	ic, iq := find(lifetimeCycleCols), find(lifetimeCapacityCols)
	if ic < 0 || iq < 0 {
		return nil, fmt.Errorf("need a cycle column (%s) and a capacity column in Ah (%s); header is %q",
			strings.Join(lifetimeCycleCols, ", "), strings.Join(lifetimeCapacityCols, ", "), strings.Join(head, ","))
	}
	icell, iday, itime := find(lifetimeCellCols), find(lifetimeDaysCols), find(lifetimeTimeCols)

	var out []*lifetimeSeries
	byCell := map[string]*lifetimeSeries{}
	t0 := map[string]time.Time{}
	for line := 2; ; line++ {
		rec, err := cr.Read()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("line %d: %w", line, err)
		}
		if line-1 > maxCapacityRows {
			return nil, fmt.Errorf("line %d: more than %d data rows; a capacity history has one row per cycle or check-up", line, maxCapacityRows)
		}
		field := func(i int) string {
			if i < 0 || i >= len(rec) {
				return ""
			}
			return strings.TrimSpace(rec[i])
		}
		id := field(icell)
		s := byCell[id]
		if s == nil {
			s = &lifetimeSeries{cell: id}
			byCell[id] = s
			out = append(out, s)
		}
		if keep != nil && !keep(func(col string) string {
			if i, ok := cols[col]; ok {
				return field(i)
			}
			return ""
		}) {
			s.skipped++
			continue
		}
		qs := field(iq)
		if qs == "" || strings.EqualFold(qs, "nan") {
			s.skipped++
			continue
		}
		q, err := strconv.ParseFloat(qs, 64)
		if err != nil || math.IsInf(q, 0) {
			return nil, fmt.Errorf("line %d: capacity %q is not a number", line, qs)
		}
		c, err := strconv.ParseFloat(field(ic), 64)
		if err != nil || math.IsNaN(c) || math.IsInf(c, 0) {
			return nil, fmt.Errorf("line %d: cycle index %q is not a number", line, field(ic))
		}
		switch {
		case iday >= 0:
			d, err := strconv.ParseFloat(field(iday), 64)
			if err != nil {
				return nil, fmt.Errorf("line %d: elapsed days %q is not a number", line, field(iday))
			}
			s.days = append(s.days, d)
		case itime >= 0:
			ts, err := parseLifetimeTime(field(itime))
			if err != nil {
				return nil, fmt.Errorf("line %d: %w", line, err)
			}
			if _, ok := t0[id]; !ok {
				t0[id] = ts
			}
			s.days = append(s.days, ts.Sub(t0[id]).Hours()/24)
		}
		s.cycles = append(s.cycles, c)
		s.capacity = append(s.capacity, q)
	}
	if len(out) == 0 {
		return nil, errors.New("no data rows")
	}
	return out, nil
}

// parseLifetimeTime parses an ISO 8601 date-time with or without a zone (a local lab
// time without a zone is read as UTC; only differences matter).
func parseLifetimeTime(s string) (time.Time, error) {
	for _, layout := range []string{time.RFC3339Nano, "2006-01-02T15:04:05.999999999", "2006-01-02 15:04:05.999999999", "2006-01-02"} {
		if t, err := time.Parse(layout, s); err == nil {
			return t, nil
		}
	}
	return time.Time{}, fmt.Errorf("time %q is not ISO 8601", s)
}

// lifetimeInterval is a projected end of life in JSON: absolute cycle index (or elapsed
// day) with its interval. A bound beyond the search horizon is reported as the horizon
// with its *_beyond_horizon flag set, so that every field stays a number.
type lifetimeInterval struct {
	Value              float64 `json:"value"`
	Low                float64 `json:"low"`
	High               float64 `json:"high"`
	ValueBeyondHorizon bool    `json:"value_beyond_horizon,omitempty"`
	LowBeyondHorizon   bool    `json:"low_beyond_horizon,omitempty"`
	HighBeyondHorizon  bool    `json:"high_beyond_horizon,omitempty"`
}

func ptrLifetimeInterval(c ageing.Crossing, horizon float64) *lifetimeInterval {
	v := newLifetimeInterval(c, horizon)
	return &v
}

func newLifetimeInterval(c ageing.Crossing, horizon float64) lifetimeInterval {
	v := lifetimeInterval{Value: c.Value, Low: c.Low, High: c.High}
	if math.IsInf(v.Value, 1) {
		v.Value, v.ValueBeyondHorizon = horizon, true
	}
	if math.IsInf(v.Low, 1) {
		v.Low, v.LowBeyondHorizon = horizon, true
	}
	if math.IsInf(v.High, 1) {
		v.High, v.HighBeyondHorizon = horizon, true
	}
	return v
}

// lifetimeCandidate is one trend law tried, in JSON.
type lifetimeCandidate struct {
	Model             string            `json:"model"`
	Score             *float64          `json:"score,omitempty"`
	Params            []float64         `json:"params,omitempty"`
	CyclesToEndOfLife *lifetimeInterval `json:"cycles_to_end_of_life,omitempty"`
	Error             string            `json:"error,omitempty"`
}

// lifetimeCell is the JSON result for one cell.
type lifetimeCell struct {
	CellID                    string              `json:"cell_id"`
	Error                     string              `json:"error,omitempty"` // why this cell could not be projected; the fields below are then empty
	Rows                      int                 `json:"rows"`
	RowsUsed                  int                 `json:"rows_used"`
	RowsWithoutCapacity       int                 `json:"rows_without_capacity"`
	Outliers                  int                 `json:"outliers"`
	FirstCycle                float64             `json:"first_cycle"`
	LastCycle                 float64             `json:"last_cycle"`
	Model                     string              `json:"model,omitempty"`
	Params                    []float64           `json:"params,omitempty"`
	CycleScale                float64             `json:"cycle_scale,omitempty"`
	ResidualSigmaAmpHours     float64             `json:"residual_sigma_amp_hours,omitempty"`
	ReferenceCapacityAmpHours float64             `json:"reference_capacity_amp_hours,omitempty"`
	ReferenceFromInitial      bool                `json:"reference_from_initial,omitempty"`
	ThresholdAmpHours         float64             `json:"threshold_amp_hours,omitempty"`
	TrendCapacityAmpHours     float64             `json:"trend_capacity_amp_hours,omitempty"`
	StateOfHealth             float64             `json:"state_of_health,omitempty"`
	CyclesToEndOfLife         *lifetimeInterval   `json:"cycles_to_end_of_life,omitempty"`
	ModelOnlyInterval         *lifetimeInterval   `json:"cycles_to_end_of_life_chosen_law_only,omitempty"`
	RemainingCycles           *float64            `json:"remaining_cycles,omitempty"`
	DaysToEndOfLife           *lifetimeInterval   `json:"days_to_end_of_life,omitempty"`
	HorizonCycles             float64             `json:"horizon_cycles,omitempty"`
	ConfidenceLevel           float64             `json:"confidence_level,omitempty"`
	Criterion                 string              `json:"criterion,omitempty"`
	Candidates                []lifetimeCandidate `json:"candidates,omitempty"`
}

// lifetimeReport is the JSON document of `voltcast lifetime --json`.
type lifetimeReport struct {
	EndOfLifeFraction float64 `json:"end_of_life_fraction"`
	Convention        string  `json:"convention"`
	// For a file of one cell, that cell's projection also stands at the top level, so a
	// caller with one cell reads cycles_to_end_of_life directly; the full result is
	// cells[0].
	CyclesToEndOfLife *lifetimeInterval `json:"cycles_to_end_of_life,omitempty"`
	DaysToEndOfLife   *lifetimeInterval `json:"days_to_end_of_life,omitempty"`
	Cells             []lifetimeCell    `json:"cells"`
}

const lifetimeConvention = "cycles_to_end_of_life.value is the cycle index (in the file's own numbering) at which the chosen capacity-fade trend reaches end_of_life_fraction of the reference capacity; " +
	"low/high span the confidence intervals of every fitted trend law (the choice of law dominates the uncertainty); cycles_to_end_of_life_chosen_law_only is the chosen law's own interval; " +
	"a bound beyond horizon_cycles is reported as horizon_cycles with its *_beyond_horizon flag; remaining_cycles counts from the last row used. " +
	"A statistical extrapolation of past fade, not a warranty: the cell maker's datasheet governs."

// lifetimeOptions are the settings of one lifetime projection shared by the command and
// the validation report.
type lifetimeOptions struct {
	fraction  float64
	useFirst  int     // fit only the first N usable rows of each cell; 0 = all
	reference float64 // Ah; 0 = initial capacity
	criterion ageing.Criterion
}

// projectLifetime runs the projection of one series.
func projectLifetime(s *lifetimeSeries, o lifetimeOptions) (ageing.Result, lifetimeCell, error) {
	n := len(s.cycles)
	if o.useFirst > 0 && o.useFirst < n {
		n = o.useFirst
	}
	p := ageing.Problem{Cycles: s.cycles[:n], Capacity: s.capacity[:n], ReferenceAh: o.reference}
	if s.days != nil {
		p.Days = s.days[:n]
	}
	res, err := ageing.Project(p, &ageing.Settings{EndOfLife: o.fraction, Criterion: o.criterion})
	if err != nil {
		return res, lifetimeCell{}, err
	}
	last := p.Cycles[n-1]
	c := lifetimeCell{
		CellID:                    s.cell,
		Rows:                      len(s.cycles) + s.skipped,
		RowsUsed:                  n,
		RowsWithoutCapacity:       s.skipped,
		Outliers:                  res.Outliers,
		FirstCycle:                p.Cycles[0],
		LastCycle:                 last,
		Model:                     string(res.Model),
		Params:                    res.Params,
		CycleScale:                res.Scale,
		ResidualSigmaAmpHours:     res.Sigma,
		ReferenceCapacityAmpHours: res.Reference,
		ReferenceFromInitial:      o.reference == 0,
		ThresholdAmpHours:         res.Threshold,
		TrendCapacityAmpHours:     res.Capacity(last),
		StateOfHealth:             res.Capacity(last) / res.Reference,
		CyclesToEndOfLife:         ptrLifetimeInterval(res.Cycles, res.Horizon),
		ModelOnlyInterval:         ptrLifetimeInterval(res.Parameter, res.Horizon),
		HorizonCycles:             res.Horizon,
		ConfidenceLevel:           res.Level,
		Criterion:                 res.Criterion.String(),
	}
	rem := math.Max(c.CyclesToEndOfLife.Value-last, 0)
	c.RemainingCycles = &rem
	if res.Days != nil {
		d := newLifetimeInterval(*res.Days, res.Day(res.Horizon))
		c.DaysToEndOfLife = &d
	}
	for _, cd := range res.Candidates {
		lc := lifetimeCandidate{Model: string(cd.Model), Params: cd.Params}
		if cd.Err != nil {
			lc.Error = cd.Err.Error()
		} else {
			sc := cd.Score
			lc.Score = &sc
			ci := newLifetimeInterval(cd.Cycles, res.Horizon)
			lc.CyclesToEndOfLife = &ci
		}
		c.Candidates = append(c.Candidates, lc)
	}
	return res, c, nil
}

func runLifetime(_ context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("lifetime", stderr)
	in := fs.String("in", "", "capacity history CSV (header row; columns cycle|cycle_index|discharge_index, capacity_ah|capacity_amp_hours|dis_ah, optional cell_id and elapsed_days or start_time_local)")
	fraction := fs.Float64("end-of-life-fraction", 0.8, "end of life as a fraction of the reference capacity, in (0, 1)")
	useFirst := fs.Int("use-first", 0, "fit only the first N rows with a capacity value of each cell (0: all)")
	ref := fs.Float64("reference-capacity-amp-hours", 0, "reference capacity in Ah, usually the rated capacity (0: each cell's initial capacity, the median of its first 5 kept points)")
	criterion := fs.String("criterion", "aicc", "how the trend law is chosen: aicc, bic or forward")
	asJSON := fs.Bool("json", false, "print JSON instead of a table")
	svg := fs.String("svg", "", "also write a plot of the capacity history, fitted trend and projection to this SVG file")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast lifetime --in CAPACITY.csv [--end-of-life-fraction 0.8] [--use-first N] [--reference-capacity-amp-hours Q] [--json] [--svg FILE]")
		fmt.Fprintln(stderr, "Fits a capacity-fade trend per cell and projects the cycle at which the capacity reaches end of life.")
		fmt.Fprintln(stderr, "Cells that cannot be projected (too few rows, bad data) are reported on stderr and in the output; the")
		fmt.Fprintln(stderr, "command fails only if no cell can be projected. A projection extrapolates past fade: the cell maker's")
		fmt.Fprintln(stderr, "datasheet governs end of life and replacement.")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *in == "" {
		return fmt.Errorf("%w: --in is required", errUsage)
	}
	if !(*fraction > 0 && *fraction < 1) {
		return fmt.Errorf("%w: --end-of-life-fraction must be in (0, 1), got %g", errUsage, *fraction)
	}
	if *useFirst < 0 {
		return fmt.Errorf("%w: --use-first must be ≥ 0, got %d", errUsage, *useFirst)
	}
	if math.IsNaN(*ref) || math.IsInf(*ref, 0) || *ref < 0 {
		return fmt.Errorf("%w: --reference-capacity-amp-hours must be a positive number of Ah, got %g", errUsage, *ref)
	}
	var crit ageing.Criterion
	switch *criterion {
	case "aicc":
		crit = ageing.AICc
	case "bic":
		crit = ageing.BIC
	case "forward":
		crit = ageing.Forward
	default:
		return fmt.Errorf("%w: --criterion must be aicc, bic or forward, got %q", errUsage, *criterion)
	}
	f, err := os.Open(*in)
	if err != nil {
		return err
	}
	defer f.Close()
	series, err := readCapacityTable(f, nil)
	if err != nil {
		return fmt.Errorf("%s: %w", *in, err)
	}
	opt := lifetimeOptions{fraction: *fraction, useFirst: *useFirst, reference: *ref, criterion: crit}
	rep := lifetimeReport{EndOfLifeFraction: *fraction, Convention: lifetimeConvention}
	var plots []lifetimePlotSeries
	var failed []string
	for _, s := range series {
		res, c, err := projectLifetime(s, opt)
		if err != nil {
			// A file of many cells still reports the others; a file of one fails.
			if len(series) == 1 {
				return err
			}
			msg := strings.ReplaceAll(err.Error(), "\n", "; ")
			failed = append(failed, "cell "+s.cell+": "+msg)
			rep.Cells = append(rep.Cells, lifetimeCell{CellID: s.cell, Error: msg,
				Rows: len(s.cycles) + s.skipped, RowsWithoutCapacity: s.skipped})
			continue
		}
		rep.Cells = append(rep.Cells, c)
		plots = append(plots, lifetimePlotSeries{series: s, used: c.RowsUsed, res: res})
	}
	if len(plots) == 0 {
		return fmt.Errorf("no cell could be projected: %s", strings.Join(failed, "; "))
	}
	if len(failed) > 0 {
		fmt.Fprintf(stderr, "voltcast lifetime: skipped %d of %d cells: %s\n", len(failed), len(series), strings.Join(failed, "; "))
	}
	if *svg != "" {
		if err := writeLifetimeSVG(*svg, plots); err != nil {
			return fmt.Errorf("write plot: %w", err)
		}
	}
	if *asJSON {
		if len(rep.Cells) == 1 {
			rep.CyclesToEndOfLife, rep.DaysToEndOfLife = rep.Cells[0].CyclesToEndOfLife, rep.Cells[0].DaysToEndOfLife
		}
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(rep)
	}
	return printLifetimeTable(stdout, rep)
}

func printLifetimeTable(w io.Writer, rep lifetimeReport) error {
	level := 0.0
	for _, c := range rep.Cells {
		level = math.Max(level, c.ConfidenceLevel)
	}
	fmt.Fprintf(w, "end of life at %.0f %% of the reference capacity; interval at %.0f %% confidence over all fitted trend laws\n\n",
		100*rep.EndOfLifeFraction, 100*level)
	fmt.Fprintf(w, "%-8s %6s %5s %-12s %9s %8s %22s %10s\n", "cell", "rows", "used", "model", "ref Ah", "SOH now", "end-of-life cycle", "remaining")
	for _, c := range rep.Cells {
		id := c.CellID
		if id == "" {
			id = "-"
		}
		if c.Error != "" {
			fmt.Fprintf(w, "%-8s %6d %5s not projected: %s\n", id, c.Rows, "-", c.Error)
			continue
		}
		e := c.CyclesToEndOfLife
		fmt.Fprintf(w, "%-8s %6d %5d %-12s %9.4f %7.1f%% %22s %10s\n", id, c.Rows, c.RowsUsed, c.Model,
			c.ReferenceCapacityAmpHours, 100*c.StateOfHealth,
			fmt.Sprintf("%s [%s–%s]", lifetimeNum(e.Value, e.ValueBeyondHorizon), lifetimeNum(e.Low, e.LowBeyondHorizon), lifetimeNum(e.High, e.HighBeyondHorizon)),
			lifetimeNum(*c.RemainingCycles, e.ValueBeyondHorizon))
	}
	for _, c := range rep.Cells {
		if d := c.DaysToEndOfLife; d != nil {
			fmt.Fprintf(w, "cell %s: end of life near day %s [%s–%s] after the first row, at the historical cycling rate\n",
				c.CellID, lifetimeNum(d.Value, d.ValueBeyondHorizon), lifetimeNum(d.Low, d.LowBeyondHorizon), lifetimeNum(d.High, d.HighBeyondHorizon))
		}
	}
	_, err := fmt.Fprintln(w, "\nA statistical extrapolation of past fade: a knee that has not begun cannot be seen. The cell maker's datasheet governs.")
	return err
}

func lifetimeNum(v float64, beyond bool) string {
	if beyond {
		return fmt.Sprintf(">%.0f", v)
	}
	return fmt.Sprintf("%.0f", v)
}

// lifetimePlotSeries is one cell's history and fit for the plot.
type lifetimePlotSeries struct {
	series *lifetimeSeries
	used   int
	res    ageing.Result
}

// writeLifetimeSVG plots each cell's capacity history (fitted points filled, later
// points hollow, rejected outliers as crosses), the fitted trend with its confidence
// band out to the projected end of life, and the end-of-life threshold.
func writeLifetimeSVG(path string, cells []lifetimePlotSeries) error {
	p := plot.New()
	p.Title.Text = "Capacity history and end-of-life projection"
	p.X.Label.Text = "cycle"
	p.Y.Label.Text = "capacity (Ah)"
	p.Legend.Left = true
	xmax, ymin, ymax := 0.0, math.Inf(1), math.Inf(-1)
	for k, c := range cells {
		s, res := c.series, c.res
		col := plotutil.Color(k)
		name := s.cell
		if name == "" {
			name = "cell"
		}
		var fitted, later, outl plotter.XYs
		for i := range s.cycles {
			pt := plotter.XY{X: s.cycles[i], Y: s.capacity[i]}
			switch {
			case i >= c.used:
				later = append(later, pt)
				if pt.Y >= 0.8*res.Threshold {
					ymin, ymax = math.Min(ymin, pt.Y), math.Max(ymax, pt.Y)
				}
			case res.Weights[i] == 0:
				outl = append(outl, pt)
			default:
				fitted = append(fitted, pt)
				ymin, ymax = math.Min(ymin, pt.Y), math.Max(ymax, pt.Y)
			}
			xmax = math.Max(xmax, s.cycles[i])
		}
		ymin = math.Min(ymin, res.Threshold)
		// Draw the trend to the end of the interval, or a quarter past the projection
		// when the interval is open-ended.
		end := res.Cycles.High
		if math.IsInf(end, 1) {
			end = 1.25 * res.Cycles.Value
		}
		if math.IsInf(end, 1) {
			end = 1.5 * s.cycles[len(s.cycles)-1]
		}
		end = math.Min(math.Max(end, s.cycles[len(s.cycles)-1]), res.Horizon)
		xmax = math.Max(xmax, end)
		const steps = 200
		lo, hi, mid := make(plotter.XYs, steps+1), make(plotter.XYs, steps+1), make(plotter.XYs, steps+1)
		x0 := s.cycles[0]
		for j := range steps + 1 {
			x := x0 + (end-x0)*float64(j)/steps
			q, h := res.Band(x)
			mid[j], lo[j], hi[j] = plotter.XY{X: x, Y: q}, plotter.XY{X: x, Y: q - h}, plotter.XY{X: x, Y: q + h}
		}
		if err := addLifetimeScatter(p, fitted, col, draw.CircleGlyph{}, name+" fitted"); err != nil {
			return err
		}
		if err := addLifetimeScatter(p, later, col, draw.RingGlyph{}, name+" not fitted"); err != nil {
			return err
		}
		if err := addLifetimeScatter(p, outl, col, draw.CrossGlyph{}, name+" outlier"); err != nil {
			return err
		}
		ln, err := plotter.NewLine(mid)
		if err != nil {
			return err
		}
		ln.Color, ln.Width = col, vg.Points(1.5)
		p.Add(ln)
		p.Legend.Add(fmt.Sprintf("%s trend (%s) and its band", name, res.Model), ln)
		for _, b := range []plotter.XYs{lo, hi} {
			bl, err := plotter.NewLine(b)
			if err != nil {
				return err
			}
			bl.Color, bl.Dashes = col, []vg.Length{vg.Points(3), vg.Points(3)}
			p.Add(bl)
		}
		thr, err := plotter.NewLine(plotter.XYs{{X: x0, Y: res.Threshold}, {X: end, Y: res.Threshold}})
		if err != nil {
			return err
		}
		thr.Color, thr.Dashes = col, []vg.Length{vg.Points(1), vg.Points(2)}
		p.Add(thr)
		// The projected end-of-life interval (envelope over the laws) as a bar on the threshold.
		if lo, hi := res.Cycles.Low, math.Min(res.Cycles.High, end); lo < hi {
			bar, err := plotter.NewLine(plotter.XYs{{X: lo, Y: res.Threshold}, {X: hi, Y: res.Threshold}})
			if err != nil {
				return err
			}
			bar.Color, bar.Width = col, vg.Points(4)
			p.Add(bar)
			p.Legend.Add(fmt.Sprintf("%s end-of-life interval", name), bar)
		}
	}
	// Outliers and a diverging band would squash the history: frame the kept data and
	// the threshold (lines are clipped to the frame).
	pad := 0.05 * (ymax - ymin)
	p.X.Min, p.X.Max = 0, xmax
	p.Y.Min, p.Y.Max = ymin-pad, ymax+pad
	format := "svg"
	if ext := strings.ToLower(filepath.Ext(path)); ext == ".png" || ext == ".pdf" {
		format = ext[1:] // handy for viewing; the flag documents SVG
	}
	wt, err := p.WriterTo(8*vg.Inch, 5*vg.Inch, format)
	if err != nil {
		return err
	}
	return writeFileFrom(path, wt)
}

func addLifetimeScatter(p *plot.Plot, pts plotter.XYs, col color.Color, g draw.GlyphDrawer, name string) error {
	if len(pts) == 0 {
		return nil
	}
	sc, err := plotter.NewScatter(pts)
	if err != nil {
		return err
	}
	sc.GlyphStyle.Color, sc.GlyphStyle.Shape, sc.GlyphStyle.Radius = col, g, vg.Points(1.5)
	p.Add(sc)
	p.Legend.Add(name, sc)
	return nil
}
