package main

import (
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"strings"

	"github.com/voltcast/voltcast/model/ageing"
)

// Health validation (issue 3, accuracy item 4): from the first 30 % of each cell's
// capacity history, project the cycle at which the capacity reaches 80 % of its initial
// value, and compare with the crossing observed in the rest of the history.

// healthFitFraction is the share of each history's rows that the projection may see.
const healthFitFraction = 0.30

// healthSmoothHalfWidth is the half-width, in rows, of the running median that defines
// the observed crossing (an 11-row window: wide enough to ride over single dropouts and
// the few-cycle capacity regeneration after rests, short against the fade).
const healthSmoothHalfWidth = 5

// healthDataset describes one capacity dataset of ../shared/datasets.
type healthDataset struct {
	name string // folder
	file string // capacity table inside it
	cite string // authors, source, licence, for the report
	// core lists cells summarised on their own as well, with why (empty: none).
	core     []string
	coreNote string
}

// healthDatasets are the capacity histories the report uses, with their attribution
// (from each folder's PROVENANCE.md).
var healthDatasets = []healthDataset{
	{
		name: "samsung30q_cycling", file: "per_cycle_summary.csv",
		cite: "ARTS Laboratory (A. Downey), University of South Carolina, Samsung INR18650-30Q 650-cycle data, GitHub ARTS-Laboratory/Dataset-battery-electro-thermal-characterization @401ff28, CC BY-SA 4.0",
	},
	{
		name: "nasa_pcoe_capacity", file: "capacity_per_discharge.csv",
		cite: "B. Saha and K. Goebel (2007), Battery Data Set, NASA Ames Prognostics Data Repository, US public domain",
		core: []string{"B0005", "B0006", "B0007"},
		coreNote: "the long 24 °C, 2 A constant-current runs that PROVENANCE.md names as best known (B0018, the fourth, is held out); " +
			"the other groups are short (25–47 discharges), start with partial discharges, or are the 4 °C groups whose very low capacities NASA notes as not fully analysed",
	},
}

// healthCase is one cell's row of the health validation.
type healthCase struct {
	Dataset   string
	Cell      string
	Rows      int     // usable rows (with a capacity)
	FitRows   int     // rows the projection saw
	FitLast   float64 // last cycle index seen
	Last      float64 // last cycle index of the record
	Reference float64 // Ah, initial capacity from the fitted rows
	Model     ageing.Model
	Projected ageing.Crossing
	Observed  float64 // first cycle whose smoothed capacity is below the threshold; NaN if none
	Kind      string  // "crossing", "not-reached", "inside-fit" or "too-short"
	ErrPct    float64 // 100·(projected − observed)/observed for Kind "crossing", else NaN
	Covered   bool    // observed crossing inside [low, high] ("crossing"), or high beyond the record ("not-reached")
	Beyond    bool    // "not-reached": the projected value itself lies beyond the record
}

// healthCases runs the validation on every dataset found under root.
func healthCases(root string) ([]healthCase, error) {
	var out []healthCase
	for _, d := range healthDatasets {
		path := filepath.Join(root, d.name, d.file)
		f, err := os.Open(path)
		if err != nil {
			return nil, err
		}
		series, err := readCapacityTable(f, nil)
		f.Close()
		if err != nil {
			return nil, fmt.Errorf("%s: %w", path, err)
		}
		for _, s := range series {
			c, err := healthCaseOf(d.name, s, 0)
			if err != nil {
				return nil, fmt.Errorf("%s cell %s: %w", d.name, s.cell, err)
			}
			out = append(out, c)
		}
	}
	return out, nil
}

// healthCaseOf projects one series from its first rows; reference 0 means the initial
// capacity.
func healthCaseOf(dataset string, s *lifetimeSeries, reference float64) (healthCase, error) {
	n := len(s.cycles)
	fit := int(math.Ceil(healthFitFraction * float64(n)))
	c := healthCase{Dataset: dataset, Cell: s.cell, Rows: n, FitRows: fit, FitLast: s.cycles[fit-1], Last: s.cycles[n-1],
		Observed: math.NaN(), ErrPct: math.NaN()}
	res, _, err := projectLifetime(s, lifetimeOptions{fraction: 0.8, useFirst: fit, reference: reference})
	if errors.Is(err, ageing.ErrTooFew) {
		c.Kind = "too-short"
		return c, nil
	}
	if err != nil {
		return c, err
	}
	c.Reference, c.Model, c.Projected = res.Reference, res.Model, res.Cycles
	c.Observed = healthObservedCrossing(s.cycles, s.capacity, res.Threshold)
	switch {
	case math.IsNaN(c.Observed):
		c.Kind = "not-reached"
		c.Covered = c.Projected.High > c.Last
		c.Beyond = c.Projected.Value > c.Last
	case c.Observed <= c.FitLast:
		c.Kind = "inside-fit"
	default:
		c.Kind = "crossing"
		c.ErrPct = 100 * (c.Projected.Value - c.Observed) / c.Observed
		c.Covered = c.Projected.Low <= c.Observed && c.Observed <= c.Projected.High
	}
	return c, nil
}

// healthObservedCrossing returns the first cycle index at which the running median (half
// width healthSmoothHalfWidth rows, cut at the ends) of the capacity is below threshold,
// or NaN if it never is.
func healthObservedCrossing(cycles, capacity []float64, threshold float64) float64 {
	win := make([]float64, 0, 2*healthSmoothHalfWidth+1)
	for i := range capacity {
		lo, hi := max(0, i-healthSmoothHalfWidth), min(len(capacity), i+healthSmoothHalfWidth+1)
		win = append(win[:0], capacity[lo:hi]...)
		sort.Float64s(win)
		m := win[len(win)/2]
		if len(win)%2 == 0 {
			m = 0.5 * (win[len(win)/2-1] + win[len(win)/2])
		}
		if m < threshold {
			return cycles[i]
		}
	}
	return math.NaN()
}

// healthSummary aggregates the cases with an observed crossing after the fitted rows.
type healthSummary struct {
	Crossings    int     // cells with an observed crossing after the fitted rows
	MedianAbsPct float64 // median |error| % over them (a projection beyond the horizon counts as +Inf)
	Within20     int     // of them, how many are within ±20 %
	Covered      int     // of them, how many have the observed crossing inside the interval
	NotReached   int     // cells whose record never reached the threshold
	Beyond       int     // of them, how many have the projected value beyond the record
	Consistent   int     // of them, how many have at least the upper bound beyond the record
	InsideFit    int     // cells that crossed within the fitted rows (not a projection test)
	TooShort     int     // cells with too few usable rows to fit
}

// summariseHealth aggregates the cases of one dataset, restricted to the listed cells
// when cells is not empty.
func summariseHealth(cases []healthCase, dataset string, cells []string) healthSummary {
	var s healthSummary
	var abs []float64
	for _, c := range cases {
		if c.Dataset != dataset || (len(cells) > 0 && !slices.Contains(cells, c.Cell)) {
			continue
		}
		switch c.Kind {
		case "crossing":
			s.Crossings++
			a := math.Abs(c.ErrPct)
			abs = append(abs, a)
			if a <= 20 {
				s.Within20++
			}
			if c.Covered {
				s.Covered++
			}
		case "not-reached":
			s.NotReached++
			if c.Beyond {
				s.Beyond++
			}
			if c.Covered {
				s.Consistent++
			}
		case "inside-fit":
			s.InsideFit++
		case "too-short":
			s.TooShort++
		}
	}
	s.MedianAbsPct = math.NaN()
	if len(abs) > 0 {
		sort.Float64s(abs)
		s.MedianAbsPct = abs[len(abs)/2]
		if len(abs)%2 == 0 {
			s.MedianAbsPct = 0.5 * (abs[len(abs)/2-1] + abs[len(abs)/2])
		}
	}
	return s
}

// markdown writes the summary as one sentence.
func (s healthSummary) markdown(b *strings.Builder, label string) {
	fmt.Fprintf(b, "- %s: %d cells with an observed crossing after the fitted rows: median |error| %s %%, %d within ±20 %%, %d inside the interval.",
		label, s.Crossings, healthPct(s.MedianAbsPct), s.Within20, s.Covered)
	if s.NotReached > 0 {
		fmt.Fprintf(b, " %d never reach 80 %% in their record (projection beyond the record: %d; upper bound beyond it: %d).", s.NotReached, s.Beyond, s.Consistent)
	}
	if s.InsideFit > 0 {
		fmt.Fprintf(b, " %d cross inside the fitted rows (no projection to test).", s.InsideFit)
	}
	if s.TooShort > 0 {
		fmt.Fprintf(b, " %d have too few rows to fit.", s.TooShort)
	}
	b.WriteString("\n")
}

// healthValidationSection returns the markdown section on health (capacity fade) for
// docs/validation.md, computed from the datasets under root (../shared/datasets by
// default; see VOLTCAST_DATASETS). It starts with a level-2 heading.
func healthValidationSection(root string) (string, error) {
	cases, err := healthCases(root)
	if err != nil {
		return "", err
	}
	var b strings.Builder
	b.WriteString("## Health: cycles to 80 % capacity from the first 30 % of the history\n\n")
	b.WriteString("Method: for each cell, `voltcast lifetime --end-of-life-fraction 0.8 --use-first N` with N = ceil(0.3 × rows with a capacity value), " +
		"reference = initial capacity (median of the first 5 points the outlier filter keeps), default settings (robust fit, law chosen by AICc, 95 % interval). " +
		"Observed crossing: first cycle at which the 11-row running median of the full measured history is below 80 % of the same reference. " +
		"Error = (projected − observed) / observed. \"covered\": the observed crossing lies in [low, high]. " +
		"Cells that never reach 80 % are censored: the projection is consistent if its upper bound lies beyond the end of the record.\n\n")
	for _, d := range healthDatasets {
		fmt.Fprintf(&b, "### %s\n\nSource: %s.\n\n", d.name, d.cite)
		if len(d.core) > 0 {
			summariseHealth(cases, d.name, d.core).markdown(&b, strings.Join(d.core, ", ")+" ("+d.coreNote+")")
		}
		summariseHealth(cases, d.name, nil).markdown(&b, "all cells")
		b.WriteString("\n")
		b.WriteString(healthTableHead)
		for _, c := range cases {
			if c.Dataset != d.name {
				continue
			}
			healthRow(&b, c, c.Cell)
		}
		b.WriteString("\n")
	}
	variants, err := healthVariantCases(root)
	if err != nil {
		return "", err
	}
	b.WriteString("### Sensitivity of the headline cells\n\nThe same projection with one choice changed (reference changes move the threshold, so the observed crossing moves too).\n\n")
	b.WriteString(healthTableHead)
	for k, v := range healthVariants {
		for _, c := range variants[k] {
			healthRow(&b, c, c.Dataset+" "+c.Cell+", "+v.label)
		}
	}
	b.WriteString("\n")
	b.WriteString(healthReading)
	return b.String(), nil
}

const healthTableHead = "| cell | rows | fitted rows (to cycle) | ref Ah | law | projected [low, high] | observed | error % | status |\n" +
	"|---|---|---|---|---|---|---|---|---|\n"

// healthReading explains the health numbers; it names no figure, so it stays true when
// they are regenerated.
const healthReading = "Reading the numbers. The fitted third of a history shows the early fade. In the Samsung cells it slows with cycling " +
	"(square-root-like) and later runs closer to linear, then speeds up (a \"knee\", strongest in cell C), so laws that follow the early curvature come out late; " +
	"in the NASA cells the early third is short and noisy, and a power law with an accelerating exponent can come out early. " +
	"No law fitted to the early third can see a knee that has not begun, and the laws agree on the fitted data while parting in extrapolation, " +
	"so the error is dominated by the choice of law rather than by noise. That is why the interval spans every fitted law " +
	"(the chosen law's own 95 % band, `cycles_to_end_of_life_chosen_law_only` in the JSON, is conditional on the law and much narrower); " +
	"its upper end is often open (\"beyond horizon\": some law never reaches 80 % within ten times the fitted span). " +
	"A rated-capacity reference puts the threshold nearer the fitted data, so the extrapolation is shorter and the error smaller. " +
	"NASA specifics: capacity regenerates for a few cycles after long rests (absorbed by the robust fit and by the running median); " +
	"several 4 °C cells contain long runs of near-zero capacities that NASA lists as not fully analysed, so their \"observed crossing\" " +
	"is a test anomaly rather than fade; and cells that start with partial discharges get a poor initial reference. " +
	"Cells whose record ends above 80 % give no error, only a consistency check against the end of the record.\n\n"

// healthRow writes one table row for a case, labelled label.
func healthRow(b *strings.Builder, c healthCase, label string) {
	obs := "not reached by " + strconv.FormatFloat(c.Last, 'f', 0, 64)
	if !math.IsNaN(c.Observed) {
		obs = strconv.FormatFloat(c.Observed, 'f', 0, 64)
	}
	status := c.Kind
	switch c.Kind {
	case "crossing":
		status = "outside interval"
		if c.Covered {
			status = "covered"
		}
	case "not-reached":
		switch {
		case c.Beyond:
			status = "not reached; projection beyond record"
		case c.Covered:
			status = "not reached; only the upper bound beyond record"
		default:
			status = "not reached; projection and interval too early"
		}
	case "inside-fit":
		status = "crossed inside fitted rows"
	case "too-short":
		status = "too few rows to fit"
	}
	fmt.Fprintf(b, "| %s | %d | %d (%.0f) | %.3f | %s | %s [%s, %s] | %s | %s | %s |\n",
		label, c.Rows, c.FitRows, c.FitLast, c.Reference, c.Model,
		healthCycle(c.Projected.Value), healthCycle(c.Projected.Low), healthCycle(c.Projected.High),
		obs, healthPct(c.ErrPct), status)
}

func healthCycle(v float64) string {
	if math.IsInf(v, 1) {
		return "beyond horizon"
	}
	return strconv.FormatFloat(v, 'f', 0, 64)
}

func healthPct(v float64) string {
	if math.IsNaN(v) {
		return "–"
	}
	if math.IsInf(v, 0) {
		return "never (beyond horizon)"
	}
	return strconv.FormatFloat(v, 'f', 1, 64)
}

// healthVariant is a sensitivity check of the headline cells: the same projection with
// one choice changed.
type healthVariant struct {
	label     string
	dataset   string
	cells     []string
	reference float64 // Ah; 0 = initial capacity
	keep      func(field func(col string) string) bool
}

var healthVariants = []healthVariant{
	{
		label: "complete discharges only (PROVENANCE.md: end voltage 2.4–2.6 V)", dataset: "samsung30q_cycling", cells: []string{"A", "C"},
		keep: func(field func(string) string) bool {
			v, err := strconv.ParseFloat(field("dis_v_end_v"), 64)
			return err == nil && v >= 2.4 && v <= 2.6
		},
	},
	{label: "reference = rated 3.0 Ah (PROVENANCE.md)", dataset: "samsung30q_cycling", cells: []string{"A", "C"}, reference: 3.0},
	{label: "reference = rated 2.0 Ah (PROVENANCE.md)", dataset: "nasa_pcoe_capacity", cells: []string{"B0005", "B0006", "B0007"}, reference: 2.0},
}

// healthVariantCases runs the sensitivity checks.
func healthVariantCases(root string) ([][]healthCase, error) {
	var out [][]healthCase
	for _, v := range healthVariants {
		var d healthDataset
		for _, x := range healthDatasets {
			if x.name == v.dataset {
				d = x
			}
		}
		f, err := os.Open(filepath.Join(root, d.name, d.file))
		if err != nil {
			return nil, err
		}
		series, err := readCapacityTable(f, v.keep)
		f.Close()
		if err != nil {
			return nil, err
		}
		var cs []healthCase
		for _, s := range series {
			if !slices.Contains(v.cells, s.cell) {
				continue
			}
			c, err := healthCaseOf(d.name, s, v.reference)
			if err != nil {
				return nil, fmt.Errorf("%s cell %s (%s): %w", d.name, s.cell, v.label, err)
			}
			cs = append(cs, c)
		}
		out = append(out, cs)
	}
	return out, nil
}
