package main

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/labdata"
)

// runLifetimeCLI runs `voltcast lifetime args...` in process and returns the exit code,
// standard output and standard error.
func runLifetimeCLI(t *testing.T, args ...string) (int, string, string) {
	t.Helper()
	var out, errb bytes.Buffer
	code := run(context.Background(), append([]string{"lifetime"}, args...), &out, &errb)
	return code, out.String(), errb.String()
}

// writeLifetimeCSV writes rows under header into a temporary file and returns its path.
func writeLifetimeCSV(t *testing.T, header string, rows []string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), "capacity.csv")
	if err := os.WriteFile(p, []byte(header+"\n"+strings.Join(rows, "\n")+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

// lineRows returns rows "cell,cycle,capacity" of the exact line q = q0 − slope·n for
// n = step, 2·step, …, count·step.
func lineRows(cell string, q0, slope float64, count, step int) []string {
	var rows []string
	for k := 1; k <= count; k++ {
		n := k * step
		rows = append(rows, cell+","+strconv.Itoa(n)+","+strconv.FormatFloat(q0-slope*float64(n), 'f', 9, 64))
	}
	return rows
}

// TestLifetimeJSONContract checks the JSON the acceptance checks read, on exact lines
// whose end of life is arithmetic: with the reference 2.0 Ah, 2.0 − 0.001·n reaches
// 1.6 Ah at n = 400, and 3.0 − 0.002·n reaches 2.4 Ah (80 % of 3.0 Ah) at n = 300.
func TestLifetimeJSONContract(t *testing.T) {
	rows := append(lineRows("P1", 2.0, 0.001, 40, 5), lineRows("P2", 3.0, 0.002, 40, 5)...)
	in := writeLifetimeCSV(t, "cell_id,cycle,capacity_ah", rows)
	code, out, errs := runLifetimeCLI(t, "--in", in, "--end-of-life-fraction", "0.8", "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	var rep struct {
		Cells []struct {
			CellID            string `json:"cell_id"`
			RowsUsed          int    `json:"rows_used"`
			Model             string `json:"model"`
			CyclesToEndOfLife *struct {
				Value *float64 `json:"value"`
				Low   *float64 `json:"low"`
				High  *float64 `json:"high"`
			} `json:"cycles_to_end_of_life"`
			Reference float64 `json:"reference_capacity_amp_hours"`
		} `json:"cells"`
	}
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatalf("output is not JSON: %v\n%s", err, out)
	}
	if len(rep.Cells) != 2 || rep.Cells[0].CellID != "P1" || rep.Cells[1].CellID != "P2" {
		t.Fatalf("cells = %+v; want P1 and P2", rep.Cells)
	}
	// The reference is the initial capacity, the median of the first 5 points (at cycle
	// 15): 2.0 − 0.001·15 and 3.0 − 0.002·15; the line reaches 80 % of it at
	wants := []float64{(2.0 - 0.8*(2.0-0.001*15)) / 0.001, (3.0 - 0.8*(3.0-0.002*15)) / 0.002}
	for k, c := range rep.Cells {
		e := c.CyclesToEndOfLife
		if e == nil || e.Value == nil || e.Low == nil || e.High == nil {
			t.Fatalf("cell %s: cycles_to_end_of_life with value, low and high missing: %s", c.CellID, out)
		}
		if math.Abs(*e.Value-wants[k]) > 0.01*wants[k] {
			t.Errorf("cell %s: end of life %g (%s); want %g", c.CellID, *e.Value, c.Model, wants[k])
		}
		if !(*e.Low <= *e.Value && *e.Value <= *e.High) {
			t.Errorf("cell %s: interval %g ≤ %g ≤ %g is not ordered", c.CellID, *e.Low, *e.Value, *e.High)
		}
		if c.RowsUsed != 40 {
			t.Errorf("cell %s: rows_used %d; want 40", c.CellID, c.RowsUsed)
		}
	}
}

// TestLifetimeJSONSingleCell checks that a file of one cell (no cell_id column) also
// carries that cell's cycles_to_end_of_life at the top level, equal to the entry in
// cells, and that a file of several cells does not: 2.0 − 0.001·n reaches 80 % of the
// initial 1.985 Ah (median of the first five points, at n = 15) at n = 412.
func TestLifetimeJSONSingleCell(t *testing.T) {
	var rows []string
	for _, r := range lineRows("", 2.0, 0.001, 40, 5) {
		rows = append(rows, strings.TrimPrefix(r, ","))
	}
	in := writeLifetimeCSV(t, "cycle,capacity_ah", rows)
	code, out, errs := runLifetimeCLI(t, "--in", in, "--json")
	if code != 0 {
		t.Fatalf("exit %d: %s", code, errs)
	}
	type interval struct{ Value, Low, High float64 }
	var rep struct {
		Top   *interval `json:"cycles_to_end_of_life"`
		Cells []struct {
			C *interval `json:"cycles_to_end_of_life"`
		} `json:"cells"`
	}
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatal(err)
	}
	if rep.Top == nil || len(rep.Cells) != 1 || rep.Cells[0].C == nil || *rep.Top != *rep.Cells[0].C {
		t.Fatalf("single cell: top-level %+v, cells %+v; want the same interval in both", rep.Top, rep.Cells)
	}
	if want := (2.0 - 0.8*(2.0-0.001*15)) / 0.001; math.Abs(rep.Top.Value-want) > 0.01*want {
		t.Errorf("end of life %g; want %g", rep.Top.Value, want)
	}
	two := writeLifetimeCSV(t, "cell_id,cycle,capacity_ah", append(lineRows("P1", 2.0, 0.001, 40, 5), lineRows("P2", 3.0, 0.002, 40, 5)...))
	_, out, _ = runLifetimeCLI(t, "--in", two, "--json")
	rep.Top = nil
	if err := json.Unmarshal([]byte(out), &rep); err != nil || rep.Top != nil {
		t.Errorf("two cells: top-level cycles_to_end_of_life = %+v (err %v); want none", rep.Top, err)
	}
}

func TestLifetimeOptions(t *testing.T) {
	// lineRows emits a leading cell column; this table has none.
	rows := lineRows("", 2.0, 0.001, 40, 5)
	for i, r := range rows {
		rows[i] = strings.TrimPrefix(r, ",")
	}
	in := writeLifetimeCSV(t, "cycle,dis_ah", rows)
	t.Run("use-first and reference", func(t *testing.T) {
		code, out, errs := runLifetimeCLI(t, "--in", in, "--use-first", "12", "--reference-capacity-amp-hours", "2.0",
			"--end-of-life-fraction", "0.7", "--json")
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errs)
		}
		var rep lifetimeReport
		if err := json.Unmarshal([]byte(out), &rep); err != nil {
			t.Fatal(err)
		}
		c := rep.Cells[0]
		// 2.0 − 0.001·n = 0.7·2.0 at n = 600.
		if c.RowsUsed != 12 || c.LastCycle != 60 || math.Abs(c.CyclesToEndOfLife.Value-600) > 1 || c.ReferenceCapacityAmpHours != 2.0 {
			t.Errorf("rows_used %d, last_cycle %g, end of life %g, reference %g; want 12, 60, 600, 2.0",
				c.RowsUsed, c.LastCycle, c.CyclesToEndOfLife.Value, c.ReferenceCapacityAmpHours)
		}
	})
	t.Run("table and svg", func(t *testing.T) {
		svg := filepath.Join(t.TempDir(), "fade.svg")
		code, out, errs := runLifetimeCLI(t, "--in", in, "--svg", svg)
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errs)
		}
		if !strings.Contains(out, "end-of-life cycle") || !strings.Contains(out, "datasheet") {
			t.Errorf("table output lacks its header or caution:\n%s", out)
		}
		b, err := os.ReadFile(svg)
		if err != nil || !bytes.Contains(b, []byte("<svg")) {
			t.Errorf("--svg wrote %d bytes (%v); want an SVG document", len(b), err)
		}
	})
	t.Run("days from start time", func(t *testing.T) {
		var rows []string
		for k := 1; k <= 30; k++ {
			ts := "2008-04-" + strconv.Itoa(1+k/2) + "T12:00:00"
			if 1+k/2 < 10 {
				ts = "2008-04-0" + strconv.Itoa(1+k/2) + "T12:00:00"
			}
			rows = append(rows, "B1,"+strconv.Itoa(k)+","+ts+","+strconv.FormatFloat(2.0-0.01*float64(k), 'f', 6, 64))
		}
		in := writeLifetimeCSV(t, "cell_id,discharge_index,start_time_local,capacity_ah", rows)
		code, out, errs := runLifetimeCLI(t, "--in", in, "--json")
		if code != 0 {
			t.Fatalf("exit %d: %s", code, errs)
		}
		var rep lifetimeReport
		if err := json.Unmarshal([]byte(out), &rep); err != nil {
			t.Fatal(err)
		}
		d := rep.Cells[0].DaysToEndOfLife
		// Two discharges a day: the day is half the cycle index, less the first day offset.
		if d == nil || math.Abs(d.Value-(rep.Cells[0].CyclesToEndOfLife.Value-1)/2) > 0.6 {
			t.Errorf("days_to_end_of_life = %+v for end-of-life cycle %g; want about half of it", d, rep.Cells[0].CyclesToEndOfLife.Value)
		}
	})
}

func TestLifetimeErrors(t *testing.T) {
	good := lineRows("", 2.0, 0.001, 20, 5)
	for i, r := range good {
		good[i] = strings.TrimPrefix(r, ",")
	}
	tests := []struct {
		name   string
		header string
		rows   []string
		args   []string
		code   int
		want   string
	}{
		{"no --in", "", nil, []string{}, 2, "--in is required"},
		{"missing file", "", nil, []string{"--in", "/nonexistent/x.csv"}, 1, "no such file"},
		{"fraction", "cycle,capacity_ah", good, []string{"--end-of-life-fraction", "1.2"}, 2, "end-of-life-fraction"},
		{"use-first", "cycle,capacity_ah", good, []string{"--use-first", "-3"}, 2, "use-first"},
		{"reference", "cycle,capacity_ah", good, []string{"--reference-capacity-amp-hours", "NaN"}, 2, "reference-capacity"},
		{"criterion", "cycle,capacity_ah", good, []string{"--criterion", "vote"}, 2, "criterion"},
		{"columns", "time_s,voltage_v", good, nil, 1, "need a cycle column"},
		{"bad number", "cycle,capacity_ah", append([]string{"1,2.0", "2,abc"}, good[2:]...), nil, 1, "line 3"},
		{"nan cycle", "cycle,capacity_ah", append([]string{"NaN,2.0"}, good[1:]...), nil, 1, "cycle index"},
		{"cycle backwards", "cycle,capacity_ah", append(append([]string{}, good...), "3,1.9"), nil, 1, "must increase"},
		{"too few", "cycle,capacity_ah", good[:3], nil, 1, "too few"},
		{"use-first too few", "cycle,capacity_ah", good, []string{"--use-first", "3"}, 1, "too few"},
		{"empty", "", nil, nil, 1, "empty file"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			args := tc.args
			if tc.name != "no --in" && tc.name != "missing file" {
				var p string
				if tc.name == "empty" {
					p = filepath.Join(t.TempDir(), "empty.csv")
					os.WriteFile(p, nil, 0o644)
				} else {
					p = writeLifetimeCSV(t, tc.header, tc.rows)
				}
				args = append([]string{"--in", p}, args...)
			}
			code, _, errs := runLifetimeCLI(t, args...)
			if code != tc.code {
				t.Errorf("exit %d; want %d (stderr %q)", code, tc.code, errs)
			}
			if strings.Count(strings.TrimRight(errs, "\n"), "\n") > 0 && tc.code == 1 {
				t.Errorf("error is not one line: %q", errs)
			}
			if !strings.Contains(errs, tc.want) {
				t.Errorf("stderr %q; want it to mention %q", errs, tc.want)
			}
		})
	}
}

// TestLifetimeReadsDatasets reads both capacity tables of ../shared/datasets through the
// command and checks the row accounting against their PROVENANCE.md: samsung30q_cycling
// per_cycle_summary.csv holds cells A and C (669 rows each, a few without a discharge
// file), nasa_pcoe_capacity holds 33 cells (B0018 is held out) with time stamps.
func TestLifetimeReadsDatasets(t *testing.T) {
	root, err := labdata.DatasetsDir()
	if errors.Is(err, labdata.ErrNoDatasets) {
		t.Skipf("datasets absent: %v", err)
	}
	if err != nil {
		t.Fatal(err)
	}
	code, out, errs := runLifetimeCLI(t, "--in", filepath.Join(root, "samsung30q_cycling", "per_cycle_summary.csv"), "--use-first", "200", "--json")
	if code != 0 {
		t.Fatalf("samsung: exit %d: %s", code, errs)
	}
	var rep lifetimeReport
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatal(err)
	}
	if len(rep.Cells) != 2 || rep.Cells[0].CellID != "A" || rep.Cells[1].CellID != "C" {
		t.Fatalf("samsung cells = %d; want A and C", len(rep.Cells))
	}
	for _, c := range rep.Cells {
		if c.Rows != 669 || c.RowsUsed != 200 || c.RowsWithoutCapacity == 0 {
			t.Errorf("cell %s: rows %d, used %d, without capacity %d; want 669, 200, > 0", c.CellID, c.Rows, c.RowsUsed, c.RowsWithoutCapacity)
		}
	}
	code, out, errs = runLifetimeCLI(t, "--in", filepath.Join(root, "nasa_pcoe_capacity", "capacity_per_discharge.csv"), "--json")
	if code != 0 {
		t.Fatalf("nasa: exit %d: %s", code, errs)
	}
	rep = lifetimeReport{}
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatal(err)
	}
	if len(rep.Cells) != 33 {
		t.Errorf("nasa: %d cells; want 33", len(rep.Cells))
	}
	// One NASA cell (B0052) has only 4 discharges with a capacity: it is reported, with
	// its reason, on one line of stderr and in the JSON, and the other cells still are.
	if !strings.Contains(errs, "cell B0052") || strings.Count(strings.TrimRight(errs, "\n"), "\n") != 0 {
		t.Errorf("nasa: stderr %q; want one line naming cell B0052", errs)
	}
	for _, c := range rep.Cells {
		if c.CellID == "B0052" && c.Error == "" || c.CellID == "B0005" && (c.Error != "" || c.DaysToEndOfLife == nil) {
			t.Errorf("nasa cell %s: error %q, days %v", c.CellID, c.Error, c.DaysToEndOfLife)
		}
	}
}

// FuzzReadCapacityTable feeds arbitrary text to the capacity table reader and the
// projection: errors are fine, panics are not.
func FuzzReadCapacityTable(f *testing.F) {
	f.Add("cell_id,cycle,capacity_ah\nA,1,2.0\nA,2,1.99\n")
	f.Add("discharge_index,capacity_ah,start_time_local\n1,1.8,2008-04-02T15:25:41.593\n2,,2008-04-03T15:25:41\n")
	f.Add("cycle,dis_ah\n1,NaN\n2,Inf\n\"3\",\"x\n")
	f.Fuzz(func(t *testing.T, text string) {
		series, err := readCapacityTable(strings.NewReader(text), nil)
		if err != nil {
			return
		}
		for _, s := range series {
			_, _, _ = projectLifetime(s, lifetimeOptions{fraction: 0.8})
		}
	})
}

// TestReadCapacityTableRowLimit checks that an oversized capacity history is refused
// with a clear error instead of being read whole.
func TestReadCapacityTableRowLimit(t *testing.T) {
	defer func(n int) { maxCapacityRows = n }(maxCapacityRows)
	maxCapacityRows = 3
	text := "cycle,capacity_ah\n1,2.0\n2,1.99\n3,1.98\n"
	if _, err := readCapacityTable(strings.NewReader(text), nil); err != nil {
		t.Fatalf("3 rows with a limit of 3: %v", err)
	}
	_, err := readCapacityTable(strings.NewReader(text+"4,1.97\n"), nil)
	if err == nil || !strings.Contains(err.Error(), "line 5: more than 3 data rows") {
		t.Errorf("4 rows with a limit of 3: %v; want a row-limit error at line 5", err)
	}
}
