// Package labdata reads battery lab test records from CSV files and finds the shared
// datasets the project is validated against.
//
// # File format
//
// A record is a CSV file with a header row. Columns are recognised by name (case and
// surrounding spaces ignored); other columns are ignored:
//
//	time_s         time in seconds, strictly increasing (within one profile)
//	current_a      current in amperes, POSITIVE = DISCHARGE (current leaving the cell);
//	               data using the other convention are converted with [ChargePositive]
//	voltage_v      terminal voltage in volts
//	temp_cell_c    temperature in °C; temperature_c or temp_c are accepted instead
//	               (optional when [Options.DefaultCelsius] is set)
//	discharged_ah  optional: the tester's own charge counter in Ah, net charge removed
//	               since the start of the record (negative while charging)
//	profile        optional: an integer profile number; a file may hold several
//	               profiles, each with its own time axis (see [Record.Profiles])
//
// # Validation policy
//
// Reading stops at the first bad row with an error naming the file, line and column:
// a value that is not a number, NaN or infinite; time that goes backwards or repeats
// (a duplicated timestamp is an error, not a sample to average, because it usually means
// two files were concatenated or the logger clock jumped); a voltage outside 0 to
// [Options.MaxVolts]; a current beyond ±[Options.MaxAmps]; a temperature outside −60
// to 100 °C. Missing required columns are reported together. The bounds are generic:
// whether a current is plausible for a given cell (a current logged in mA read as A) is
// checked later against the cell's capacity by the fitter.
package labdata

import (
	"bufio"
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
)

// ErrFormat is wrapped by every error about the content of a lab file.
var ErrFormat = errors.New("bad lab data")

// ErrDuplicateTime is wrapped (besides [ErrFormat]) by the error about a repeated
// timestamp, which [Options.KeepLastDuplicate] resolves.
var ErrDuplicateTime = errors.New("duplicated timestamp")

// CurrentSign states which current direction a file calls positive.
type CurrentSign int

const (
	// DischargePositive is the project's convention: positive current leaves the cell.
	DischargePositive CurrentSign = iota
	// ChargePositive marks data whose positive current charges the cell; reading it
	// flips the sign of current_a and discharged_ah.
	ChargePositive
)

// ParseCurrentSign parses the command-line spelling of a sign convention:
// "discharge-positive" or "charge-positive".
func ParseCurrentSign(s string) (CurrentSign, error) {
	switch s {
	case "discharge-positive", "":
		return DischargePositive, nil
	case "charge-positive":
		return ChargePositive, nil
	}
	return 0, fmt.Errorf("unknown current sign %q (want discharge-positive or charge-positive)", s)
}

// Options control reading. The zero value reads the project's convention with the
// default bounds.
type Options struct {
	// Sign is the current convention of the file; the record always uses
	// discharge-positive.
	Sign CurrentSign
	// DefaultCelsius, when not nil, is used as the temperature of every row of a file
	// that has no temperature column. When nil such a file is an error.
	DefaultCelsius *float64
	// MaxAmps bounds |current_a|; 0 means 5000 A.
	MaxAmps float64
	// MaxVolts bounds voltage_v (which must be positive); 0 means 1500 V.
	MaxVolts float64
	// KeepLastDuplicate, when set, resolves a repeated timestamp by keeping the later
	// row and dropping the earlier one, counting it in [Record.DroppedDuplicates]. Some
	// testers log the step-end event with a timestamp rounded onto the previous sample's
	// (dmegc_inr18650 does at the end of each random profile). The default treats a
	// repeated timestamp as an error.
	KeepLastDuplicate bool
	// MaxRows bounds the data rows read into memory; 0 means [DefaultMaxRows]. A larger
	// file is an error rather than an exhausted machine.
	MaxRows int
}

// DefaultMaxRows is the default of [Options.MaxRows]: 20 million rows (about 1 GB in
// memory), more than a day logged at 200 Hz.
const DefaultMaxRows = 20_000_000

func (o *Options) maxRows() int {
	if o == nil || o.MaxRows <= 0 {
		return DefaultMaxRows
	}
	return o.MaxRows
}

func (o *Options) maxAmps() float64 {
	if o == nil || o.MaxAmps == 0 {
		return 5000
	}
	return o.MaxAmps
}

func (o *Options) maxVolts() float64 {
	if o == nil || o.MaxVolts == 0 {
		return 1500
	}
	return o.MaxVolts
}

// Record is one lab test as parallel columns. All slices have the same length; the
// optional ones are nil when the file lacks the column.
type Record struct {
	Name         string    // file name (base) and, for a split profile, "#profile"
	Time         []float64 // s, strictly increasing within each profile
	Current      []float64 // A, positive = discharge
	Voltage      []float64 // V
	Celsius      []float64 // °C
	DischargedAh []float64 // Ah removed since the start (nil if absent)
	Profile      []int     // profile number (nil if absent)
	// TemperatureDefaulted reports that the file had no temperature column and
	// Celsius holds [Options.DefaultCelsius].
	TemperatureDefaulted bool
	// DroppedDuplicates counts rows dropped under [Options.KeepLastDuplicate].
	DroppedDuplicates int
}

// Len returns the number of samples.
func (r *Record) Len() int { return len(r.Time) }

// Kelvin returns the temperatures in kelvin (a new slice).
func (r *Record) Kelvin() []float64 {
	k := make([]float64, len(r.Celsius))
	for i, c := range r.Celsius {
		k[i] = c + 273.15
	}
	return k
}

// Slice returns the samples [i, j) as a record sharing storage with r.
func (r *Record) Slice(i, j int) *Record {
	s := &Record{Name: r.Name, Time: r.Time[i:j], Current: r.Current[i:j], Voltage: r.Voltage[i:j],
		Celsius: r.Celsius[i:j], TemperatureDefaulted: r.TemperatureDefaulted}
	if r.DischargedAh != nil {
		s.DischargedAh = r.DischargedAh[i:j]
	}
	if r.Profile != nil {
		s.Profile = r.Profile[i:j]
	}
	return s
}

// Profiles splits a record with a profile column into one record per profile, in file
// order, named "name#N". A record without the column is returned alone.
func (r *Record) Profiles() []*Record {
	if r.Profile == nil {
		return []*Record{r}
	}
	var out []*Record
	start := 0
	for i := 1; i <= r.Len(); i++ {
		if i == r.Len() || r.Profile[i] != r.Profile[start] {
			p := r.Slice(start, i)
			p.Name = fmt.Sprintf("%s#%d", r.Name, r.Profile[start])
			out = append(out, p)
			start = i
		}
	}
	return out
}

func (r *Record) truncate(n int) {
	r.Time, r.Current, r.Voltage, r.Celsius = r.Time[:n], r.Current[:n], r.Voltage[:n], r.Celsius[:n]
	if r.DischargedAh != nil {
		r.DischargedAh = r.DischargedAh[:n]
	}
	if r.Profile != nil {
		r.Profile = r.Profile[:n]
	}
}

// column names recognised, in order of preference for the temperature.
var (
	tempNames = []string{"temp_cell_c", "temperature_c", "temp_c"}
	required  = []string{"time_s", "current_a", "voltage_v"}
)

// ReadFile reads the CSV file at path. The record is named after the file's base name.
func ReadFile(path string, opt *Options) (*Record, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	r, err := Read(f, filepath.Base(path), opt)
	if err != nil {
		return nil, err
	}
	return r, nil
}

// Read reads a CSV record from rd; name is used in errors and as the record's name.
func Read(rd io.Reader, name string, opt *Options) (*Record, error) {
	cr := csv.NewReader(bufio.NewReader(rd))
	cr.ReuseRecord = true
	cr.FieldsPerRecord = -1
	head, err := cr.Read()
	if err == io.EOF {
		return nil, fmt.Errorf("%s: %w: empty file (no header row)", name, ErrFormat)
	}
	if err != nil {
		return nil, fmt.Errorf("%s: %w: %v", name, ErrFormat, err)
	}
	head = append([]string(nil), head...) // ReuseRecord: the rows below would overwrite it
	col := map[string]int{}
	for i, h := range head {
		h = strings.ToLower(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")))
		if _, dup := col[h]; dup && h != "" {
			return nil, fmt.Errorf("%s: %w: column %q appears twice", name, ErrFormat, h)
		}
		col[h] = i
	}
	var missing []string
	for _, n := range required {
		if _, ok := col[n]; !ok {
			missing = append(missing, n)
		}
	}
	tcol := -1
	for _, n := range tempNames {
		if i, ok := col[n]; ok {
			tcol = i
			break
		}
	}
	if tcol < 0 && (opt == nil || opt.DefaultCelsius == nil) {
		missing = append(missing, "temp_cell_c (or temperature_c, temp_c)")
	}
	if len(missing) > 0 {
		return nil, fmt.Errorf("%s: %w: missing column(s) %s (have %s)", name, ErrFormat,
			strings.Join(missing, ", "), strings.Join(head, ","))
	}
	ahCol, hasAh := col["discharged_ah"]
	profCol, hasProf := col["profile"]
	sign := 1.0
	if opt != nil && opt.Sign == ChargePositive {
		sign = -1
	}
	maxA, maxV, maxRows := opt.maxAmps(), opt.maxVolts(), opt.maxRows()

	rec := &Record{Name: name, TemperatureDefaulted: tcol < 0}
	line := 1
	for {
		row, err := cr.Read()
		line++
		if err == io.EOF {
			break
		}
		if err != nil {
			return nil, fmt.Errorf("%s: %w: %v", name, ErrFormat, err)
		}
		if len(row) == 1 && strings.TrimSpace(row[0]) == "" {
			continue
		}
		if len(rec.Time) >= maxRows {
			return nil, fmt.Errorf("%s:%d: %w: more than %d data rows; split the file", name, line, ErrFormat, maxRows)
		}
		num := func(c int, what string) (float64, error) {
			if c >= len(row) {
				return 0, fmt.Errorf("%s:%d: %w: row has %d fields, no %s", name, line, ErrFormat, len(row), what)
			}
			v, err := strconv.ParseFloat(strings.TrimSpace(row[c]), 64)
			if err != nil {
				return 0, fmt.Errorf("%s:%d: %w: %s %q is not a number", name, line, ErrFormat, what, row[c])
			}
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return 0, fmt.Errorf("%s:%d: %w: %s is %v", name, line, ErrFormat, what, v)
			}
			return v, nil
		}
		t, err := num(col["time_s"], "time_s")
		if err != nil {
			return nil, err
		}
		i, err := num(col["current_a"], "current_a")
		if err != nil {
			return nil, err
		}
		v, err := num(col["voltage_v"], "voltage_v")
		if err != nil {
			return nil, err
		}
		var c float64
		if tcol >= 0 {
			if c, err = num(tcol, head[tcol]); err != nil {
				return nil, err
			}
		} else {
			c = *opt.DefaultCelsius
		}
		prof := 0
		if hasProf {
			p, err := num(profCol, "profile")
			if err != nil {
				return nil, err
			}
			if p != math.Trunc(p) || math.Abs(p) > 1e9 {
				return nil, fmt.Errorf("%s:%d: %w: profile %g is not an integer", name, line, ErrFormat, p)
			}
			prof = int(p)
		}
		if math.Abs(i) > maxA {
			return nil, fmt.Errorf("%s:%d: %w: current %g A exceeds ±%g A (wrong unit?)", name, line, ErrFormat, i, maxA)
		}
		if v <= 0 || v > maxV {
			return nil, fmt.Errorf("%s:%d: %w: voltage %g V is outside (0, %g] V", name, line, ErrFormat, v, maxV)
		}
		if c < -60 || c > 100 {
			return nil, fmt.Errorf("%s:%d: %w: temperature %g °C is outside -60 to 100 °C", name, line, ErrFormat, c)
		}
		if n := len(rec.Time); n > 0 && (!hasProf || rec.Profile[n-1] == prof) {
			switch prev := rec.Time[n-1]; {
			case t < prev:
				return nil, fmt.Errorf("%s:%d: %w: time goes backwards (%g s after %g s)", name, line, ErrFormat, t, prev)
			case t == prev && opt != nil && opt.KeepLastDuplicate:
				rec.truncate(n - 1)
				rec.DroppedDuplicates++
			case t == prev:
				return nil, fmt.Errorf("%s:%d: %w: %w %g s", name, line, ErrFormat, ErrDuplicateTime, t)
			}
		}
		rec.Time = append(rec.Time, t)
		rec.Current = append(rec.Current, sign*i)
		rec.Voltage = append(rec.Voltage, v)
		rec.Celsius = append(rec.Celsius, c)
		if hasAh {
			ah, err := num(ahCol, "discharged_ah")
			if err != nil {
				return nil, err
			}
			rec.DischargedAh = append(rec.DischargedAh, sign*ah)
		}
		if hasProf {
			rec.Profile = append(rec.Profile, prof)
		}
	}
	if len(rec.Time) == 0 {
		return nil, fmt.Errorf("%s: %w: no data rows", name, ErrFormat)
	}
	return rec, nil
}
