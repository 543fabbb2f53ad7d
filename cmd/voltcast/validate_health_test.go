package main

import (
	"errors"
	"math"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/labdata"
)

// TestHealthValidation runs the whole health validation (it takes well under a second)
// and holds its numbers within the bounds docs/validation.md states. The issue sets no
// numeric target for health; these bounds are ours, set a little outside the measured
// values (Samsung 30Q A +11 %, C +29 %; NASA B0005 −14 %, B0006 +17 %, B0007 −26 %) so that
// a change that makes the projection worse fails here. Sources: samsung30q_cycling (ARTS
// Laboratory, University of South Carolina, CC BY-SA 4.0) and nasa_pcoe_capacity (Saha and
// Goebel 2007, NASA Ames, public domain), both in ../shared/datasets.
func TestHealthValidation(t *testing.T) {
	root, err := labdata.DatasetsDir()
	if errors.Is(err, labdata.ErrNoDatasets) {
		t.Skipf("datasets absent: %v", err)
	}
	if err != nil {
		t.Fatal(err)
	}
	cases, err := healthCases(root)
	if err != nil {
		t.Fatal(err)
	}
	byCell := map[string]healthCase{}
	for _, c := range cases {
		byCell[c.Dataset+"/"+c.Cell] = c
		t.Logf("%s %s: %s, projected %.0f [%.0f, %.0f], observed %.0f, error %.1f %%",
			c.Dataset, c.Cell, c.Kind, c.Projected.Value, c.Projected.Low, c.Projected.High, c.Observed, c.ErrPct)
	}
	// Every cell with an observed crossing after the fitted rows, per dataset: bound on
	// the absolute error, and the interval must hold the observed crossing.
	bounds := []struct {
		key    string
		maxAbs float64 // %
	}{
		{"samsung30q_cycling/A", 20},
		{"samsung30q_cycling/C", 35},
		{"nasa_pcoe_capacity/B0005", 25},
		{"nasa_pcoe_capacity/B0006", 25},
		{"nasa_pcoe_capacity/B0007", 35},
	}
	for _, b := range bounds {
		c, ok := byCell[b.key]
		if !ok {
			t.Errorf("%s: missing from the validation", b.key)
			continue
		}
		if c.Kind != "crossing" {
			t.Errorf("%s: kind %q; want an observed crossing after the fitted rows", b.key, c.Kind)
			continue
		}
		if math.Abs(c.ErrPct) > b.maxAbs {
			t.Errorf("%s: projection error %.1f %%; bound ±%g %%", b.key, c.ErrPct, b.maxAbs)
		}
		if !c.Covered {
			t.Errorf("%s: observed crossing %.0f outside the interval [%.0f, %.0f]", b.key, c.Observed, c.Projected.Low, c.Projected.High)
		}
	}
	core := summariseHealth(cases, "nasa_pcoe_capacity", []string{"B0005", "B0006", "B0007"})
	if core.Crossings != 3 || core.MedianAbsPct > 20 {
		t.Errorf("NASA B0005–B0007: %d crossings, median |error| %.1f %%; want 3 and ≤ 20 %%", core.Crossings, core.MedianAbsPct)
	}
	// Over all NASA cells the projection must at least not contradict the censored
	// records: nearly every cell that never reaches 80 % has an upper bound beyond its record.
	all := summariseHealth(cases, "nasa_pcoe_capacity", nil)
	if all.NotReached == 0 || float64(all.Consistent) < 0.9*float64(all.NotReached) {
		t.Errorf("NASA censored cells: %d of %d with an upper bound beyond the record; want ≥ 90 %%", all.Consistent, all.NotReached)
	}
	md, err := healthValidationSection(root)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"## Health", "samsung30q_cycling", "nasa_pcoe_capacity", "CC BY-SA 4.0", "public domain", "| B0005 |"} {
		if !strings.Contains(md, want) {
			t.Errorf("health section lacks %q", want)
		}
	}
}

// TestHealthObservedCrossing checks the smoothing that defines the observed crossing:
// a single dropout or a short dip does not count, a sustained drop does.
func TestHealthObservedCrossing(t *testing.T) {
	cycles := make([]float64, 60)
	q := make([]float64, 60)
	for i := range q {
		cycles[i] = float64(i + 1)
		q[i] = 2.0
		if i >= 40 {
			q[i] = 1.5
		}
	}
	q[10] = 0   // dropout
	q[20] = 1.0 // short dip of three rows
	q[21] = 1.0
	q[22] = 1.0
	if got := healthObservedCrossing(cycles, q, 1.6); got != 41 {
		t.Errorf("observed crossing = %g; want 41 (the first row of the sustained drop)", got)
	}
	if got := healthObservedCrossing(cycles, q, 1.4); !math.IsNaN(got) {
		t.Errorf("observed crossing below every smoothed value = %g; want NaN", got)
	}
}
