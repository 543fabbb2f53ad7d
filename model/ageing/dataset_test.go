package ageing

import (
	"encoding/csv"
	"os"
	"path/filepath"
	"strconv"
	"testing"
)

// datasetsDir returns the shared datasets folder (VOLTCAST_DATASETS, or ../shared/datasets
// beside the repository root) or skips the test when it is absent.
func datasetsDir(t *testing.T) string {
	t.Helper()
	d := os.Getenv("VOLTCAST_DATASETS")
	if d == "" {
		d = filepath.Join("..", "..", "..", "shared", "datasets")
	}
	if _, err := os.Stat(d); err != nil {
		t.Skipf("datasets not found at %s (set VOLTCAST_DATASETS): %v", d, err)
	}
	return d
}

// readColumns reads the named numeric columns of a CSV file with a header row, keeping
// only rows for which keep (given the row by column name) returns true. Rows with an
// empty value in a requested column are skipped.
func readColumns(t *testing.T, path string, keep func(row map[string]string) bool, names ...string) [][]float64 {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Skipf("dataset file missing: %v", err)
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("read %s: %v", path, err)
	}
	idx := map[string]int{}
	for i, h := range recs[0] {
		idx[h] = i
	}
	out := make([][]float64, len(names))
	row := map[string]string{}
rows:
	for _, r := range recs[1:] {
		for h, i := range idx {
			row[h] = r[i]
		}
		if keep != nil && !keep(row) {
			continue
		}
		vals := make([]float64, len(names))
		for k, n := range names {
			i, ok := idx[n]
			if !ok {
				t.Fatalf("%s: no column %q", path, n)
			}
			if r[i] == "" {
				continue rows
			}
			v, err := strconv.ParseFloat(r[i], 64)
			if err != nil {
				t.Fatalf("%s: column %s: %v", path, n, err)
			}
			vals[k] = v
		}
		for k := range names {
			out[k] = append(out[k], vals[k])
		}
	}
	return out
}
