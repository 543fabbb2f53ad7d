package labdata

import (
	"errors"
	"strings"
	"testing"
)

// FuzzRead checks that the reader never panics and that every accepted record keeps its
// invariants (equal column lengths, time increasing within a profile, bounded values).
func FuzzRead(f *testing.F) {
	f.Add("time_s,current_a,voltage_v,temp_cell_c,discharged_ah\n0,0,4.1,25,0\n1,1.5,4.0,25,0.0004\n")
	f.Add("profile,time_s,current_a,voltage_v,temp_c\n1,0,0,4.1,25\n2,0,1,4.0,25\n")
	f.Add("time_s,current_a,voltage_v,temp_c\n0,NaN,4,25\n")
	f.Add("\ufefftime_s;current_a\n")
	f.Fuzz(func(t *testing.T, in string) {
		r, err := Read(strings.NewReader(in), "f.csv", &Options{KeepLastDuplicate: len(in)%2 == 0})
		if err != nil {
			if !errors.Is(err, ErrFormat) {
				t.Fatalf("error %v does not wrap ErrFormat", err)
			}
			return
		}
		n := r.Len()
		if n == 0 || len(r.Current) != n || len(r.Voltage) != n || len(r.Celsius) != n ||
			(r.DischargedAh != nil && len(r.DischargedAh) != n) || (r.Profile != nil && len(r.Profile) != n) {
			t.Fatalf("inconsistent record: %+v", r)
		}
		for k := 1; k < n; k++ {
			if (r.Profile == nil || r.Profile[k] == r.Profile[k-1]) && !(r.Time[k] > r.Time[k-1]) {
				t.Fatalf("time not increasing at %d: %v", k, r.Time)
			}
		}
		for k := range n {
			if !(r.Voltage[k] > 0) || r.Celsius[k] < -60 || r.Celsius[k] > 100 {
				t.Fatalf("value out of bounds at %d", k)
			}
		}
	})
}
