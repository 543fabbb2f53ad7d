package labdata

import (
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestReadColumnsByName(t *testing.T) {
	// Columns in any order, extra columns ignored, alternative temperature name.
	in := "voltage_v,extra,Time_S,current_a,temperature_c,discharged_ah\n" +
		"4.1,x,0,0,25,0\n" +
		"4.0,y,1,1.5,25.5,0.000417\n"
	r, err := Read(strings.NewReader(in), "t.csv", nil)
	if err != nil {
		t.Fatal(err)
	}
	if r.Len() != 2 || r.Time[1] != 1 || r.Current[1] != 1.5 || r.Voltage[0] != 4.1 || r.Celsius[1] != 25.5 {
		t.Errorf("Read = %+v", r)
	}
	if r.DischargedAh == nil || math.Abs(r.DischargedAh[1]-0.000417) > 1e-12 {
		t.Errorf("discharged_ah = %v", r.DischargedAh)
	}
	if k := r.Kelvin(); math.Abs(k[0]-298.15) > 1e-12 {
		t.Errorf("Kelvin()[0] = %g; want 298.15", k[0])
	}
}

// TestReadMaxRows checks that a file longer than Options.MaxRows is refused with a
// clear error instead of being read whole.
func TestReadMaxRows(t *testing.T) {
	in := "time_s,current_a,voltage_v,temp_c\n0,1,3.7,25\n1,1,3.7,25\n2,1,3.7,25\n"
	if _, err := Read(strings.NewReader(in), "t.csv", &Options{MaxRows: 3}); err != nil {
		t.Fatalf("3 rows with MaxRows 3: %v", err)
	}
	_, err := Read(strings.NewReader(in), "t.csv", &Options{MaxRows: 2})
	if !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "t.csv:4: bad lab data: more than 2 data rows") {
		t.Errorf("3 rows with MaxRows 2: %v; want a row-limit error at line 4", err)
	}
}

func TestReadChargePositive(t *testing.T) {
	in := "time_s,current_a,voltage_v,temp_c,discharged_ah\n0,-2,3.9,20,0\n1,3,4.0,20,-0.001\n"
	r, err := Read(strings.NewReader(in), "t.csv", &Options{Sign: ChargePositive})
	if err != nil {
		t.Fatal(err)
	}
	if r.Current[0] != 2 || r.Current[1] != -3 || r.DischargedAh[1] != 0.001 {
		t.Errorf("charge-positive conversion: current %v, Ah %v", r.Current, r.DischargedAh)
	}
	if s, err := ParseCurrentSign("charge-positive"); err != nil || s != ChargePositive {
		t.Errorf("ParseCurrentSign = %v, %v", s, err)
	}
	if _, err := ParseCurrentSign("positive"); err == nil {
		t.Error("ParseCurrentSign(positive) accepted")
	}
}

func TestReadDefaultTemperature(t *testing.T) {
	in := "time_s,current_a,voltage_v\n0,0,3.9\n"
	if _, err := Read(strings.NewReader(in), "t.csv", nil); err == nil || !strings.Contains(err.Error(), "temp_cell_c") {
		t.Errorf("missing temperature column: err = %v", err)
	}
	c := 24.0
	r, err := Read(strings.NewReader(in), "t.csv", &Options{DefaultCelsius: &c})
	if err != nil {
		t.Fatal(err)
	}
	if !r.TemperatureDefaulted || r.Celsius[0] != 24 {
		t.Errorf("default temperature not applied: %+v", r)
	}
}

func TestReadBadInput(t *testing.T) {
	const h = "time_s,current_a,voltage_v,temp_cell_c\n"
	for _, tc := range []struct {
		name, in, want string
	}{
		{"empty", "", "empty file"},
		{"no rows", h, "no data rows"},
		{"missing columns", "time_s,volts\n0,1\n", "missing column(s) current_a, voltage_v"},
		{"duplicate column", "time_s,time_s,current_a,voltage_v,temp_c\n", "appears twice"},
		{"NaN", h + "0,NaN,3.7,25\n", "current_a is NaN"},
		{"Inf", h + "0,1,+Inf,25\n", "voltage_v is +Inf"},
		{"not a number", h + "0,1,abc,25\n", `voltage_v "abc" is not a number`},
		{"time backwards", h + "0,1,3.7,25\n2,1,3.7,25\n1,1,3.7,25\n", "t.csv:4: bad lab data: time goes backwards"},
		{"duplicated timestamp", h + "0,1,3.7,25\n1,1,3.7,25\n1,1,3.7,25\n", "duplicated timestamp 1 s"},
		{"milliamps as amps", h + "0,2500,3.7,25\n1,2600,3.7,25\n", ""}, // plausible generically; the fitter checks C-rate
		{"huge current", h + "0,25000,3.7,25\n", "exceeds ±5000 A"},
		{"negative voltage", h + "0,1,-3.7,25\n", "outside (0, 1500]"},
		{"millivolts", h + "0,1,3700,25\n", "outside (0, 1500]"},
		{"kelvin as celsius", h + "0,1,3.7,298\n", "outside -60 to 100"},
		{"short row", h + "0,1\n", "row has 2 fields"},
		// The temperature column is named from the header, not from a later row.
		{"temperature NaN", h + "0,1,3.7,25\n1,1,3.7,NaN\n", "temp_cell_c is NaN"},
		{"temperature not a number", h + "0,1,3.7,25\n1,1,3.7,hot\n", `temp_cell_c "hot" is not a number`},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Read(strings.NewReader(tc.in), "t.csv", nil)
			if tc.want == "" {
				if err != nil {
					t.Errorf("Read: %v; want no error", err)
				}
				return
			}
			if err == nil || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("Read error = %v; want it to contain %q", err, tc.want)
			}
			if err != nil && !errors.Is(err, ErrFormat) {
				t.Errorf("error %v does not wrap ErrFormat", err)
			}
		})
	}
}

func TestProfiles(t *testing.T) {
	// Time restarts per profile; that is not "time going backwards".
	in := "profile,time_s,current_a,voltage_v,temp_cell_c\n1,0,0,4.1,25\n1,10,1,4.0,25\n2,0,0,4.1,25\n2,10,2,3.9,25\n2,20,2,3.8,25\n"
	r, err := Read(strings.NewReader(in), "p.csv", nil)
	if err != nil {
		t.Fatal(err)
	}
	ps := r.Profiles()
	if len(ps) != 2 || ps[0].Len() != 2 || ps[1].Len() != 3 || ps[1].Name != "p.csv#2" || ps[1].Current[2] != 2 {
		t.Errorf("Profiles = %d records: %+v", len(ps), ps)
	}
	dup := "profile,time_s,current_a,voltage_v,temp_cell_c\n1,0,0,4.1,25\n1,10,1,4.0,25\n1,10,1,3.9,25\n2,0,0,4.1,25\n"
	r, err = Read(strings.NewReader(dup), "p.csv", &Options{KeepLastDuplicate: true})
	if err != nil {
		t.Fatal(err)
	}
	if r.Len() != 3 || r.DroppedDuplicates != 1 || r.Voltage[1] != 3.9 {
		t.Errorf("KeepLastDuplicate: %d rows, %d dropped, voltage %v; want 3, 1, last row kept", r.Len(), r.DroppedDuplicates, r.Voltage)
	}
	bad := "profile,time_s,current_a,voltage_v,temp_cell_c\n1,0,0,4.1,25\n1,0,1,4.0,25\n"
	if _, err := Read(strings.NewReader(bad), "p.csv", nil); err == nil {
		t.Error("duplicate timestamp within a profile accepted")
	}
}

func TestDatasetsDirEnv(t *testing.T) {
	d := t.TempDir()
	t.Setenv(EnvDatasets, d)
	got, err := DatasetsDir()
	if err != nil || got != d {
		t.Errorf("DatasetsDir() = %q, %v; want %q", got, err, d)
	}
	if _, err := Dataset("nope"); !errors.Is(err, ErrNoDatasets) {
		t.Errorf("Dataset(nope) error = %v; want ErrNoDatasets", err)
	}
	t.Setenv(EnvDatasets, filepath.Join(d, "missing"))
	if _, err := DatasetsDir(); !errors.Is(err, ErrNoDatasets) {
		t.Errorf("DatasetsDir() with a missing folder: %v; want ErrNoDatasets", err)
	}
}

// TestReadSharedDatasets reads every CSV of the shared datasets (the open datasets named
// in each folder's PROVENANCE.md), which all follow the format, to make sure the reader
// accepts real files and recovers the lab's own sign convention and counters.
func TestReadSharedDatasets(t *testing.T) {
	root, err := DatasetsDir()
	if err != nil {
		t.Skipf("skipping: %v", err)
	}
	files, _ := filepath.Glob(filepath.Join(root, "*", "*.csv"))
	def := 25.0 // nissan_leaf_2013_cell has no temperature column (PROVENANCE.md)
	n := 0
	for _, f := range files {
		base := filepath.Base(f)
		if strings.Contains(f, "nasa_pcoe") || base == "per_cycle_summary.csv" || base == "index.csv" {
			continue // capacity summaries, not time series
		}
		// dmegc_inr18650 repeats the timestamp of the cut-off row of each random profile.
		r, err := ReadFile(f, &Options{DefaultCelsius: &def, KeepLastDuplicate: true})
		if err != nil {
			t.Errorf("ReadFile(%s): %v", f, err)
			continue
		}
		n++
		if r.DischargedAh == nil {
			t.Errorf("%s: no discharged_ah column", f)
		}
	}
	if n == 0 {
		t.Skip("skipping: no time-series CSV found")
	}
	// pan18650pf C/20 test: PROVENANCE.md says the discharge removes 2.997 Ah and the lab
	// counter starts at −0.030 Ah.
	r, err := ReadFile(filepath.Join(root, "pan18650pf", "ocv_c20_25degC.csv"), nil)
	if err != nil {
		t.Skipf("skipping: %v", err)
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, a := range r.DischargedAh {
		lo, hi = math.Min(lo, a), math.Max(hi, a)
	}
	if math.Abs(lo-(-0.030)) > 0.001 || math.Abs(hi-lo-2.997) > 0.002 {
		t.Errorf("pan18650pf C/20: counter %g..%g Ah; want -0.030 and a 2.997 Ah discharge (PROVENANCE.md)", lo, hi)
	}
}

func TestReadFileMissing(t *testing.T) {
	if _, err := ReadFile(filepath.Join(t.TempDir(), "none.csv"), nil); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("ReadFile(missing) = %v; want not-exist", err)
	}
}
