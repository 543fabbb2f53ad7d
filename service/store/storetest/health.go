package storetest

import (
	"math"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

func record(at time.Time, capacity float64) store.HealthRecord {
	return store.HealthRecord{Time: at, CapacityFactor: capacity, ResistanceFactor: 2 - capacity, SOC: 0.6, EquivalentCycles: 100 * (1 - capacity)}
}

func capacities(rs []store.HealthRecord) []float64 {
	out := make([]float64, len(rs))
	for i, r := range rs {
		out[i] = r.CapacityFactor
	}
	return out
}

func sameFloats(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] { // stored as IEEE doubles, so they come back exactly
			return false
		}
	}
	return true
}

// HealthTest checks the health history: ordered range queries with limits, replays
// that replace instead of duplicating, all-or-nothing appends, and missing batteries.
func HealthTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	check(t, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "")))

	got, err := s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{})
	if err != nil || len(got) != 0 {
		t.Errorf("ListHealth(no records) = %v, %v; want empty, nil", got, err)
	}

	day := 24 * time.Hour
	// Out of order on purpose.
	in := []store.HealthRecord{record(t0.Add(2*day), 0.98), record(t0, 1.0), record(t0.Add(4*day), 0.96),
		record(t0.Add(day), 0.99), record(t0.Add(3*day), 0.97)}
	check(t, "AppendHealth", s.AppendHealth(ctx, tenantA, "bike-1", in))
	got, err = s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{})
	check(t, "ListHealth", err)
	if want := []float64{1.0, 0.99, 0.98, 0.97, 0.96}; !sameFloats(capacities(got), want) {
		t.Errorf("ListHealth = %v; want capacities %v oldest first", got, want)
	}
	if len(got) > 0 && (!got[0].Time.Equal(t0.Truncate(time.Microsecond)) || got[0].Time.Location() != time.UTC ||
		got[0].ResistanceFactor != 1 || got[0].SOC != 0.6 || got[0].EquivalentCycles != 0) {
		t.Errorf("first record %+v; want %+v at µs resolution in UTC", got[0], in[1])
	}

	for _, tc := range []struct {
		name string
		q    store.HealthQuery
		want []float64
	}{
		{"from day 1", store.HealthQuery{Start: t0.Add(day)}, []float64{0.99, 0.98, 0.97, 0.96}},
		{"before day 2", store.HealthQuery{End: t0.Add(2 * day)}, []float64{1.0, 0.99}},
		{"days 1 to 3", store.HealthQuery{Start: t0.Add(day), End: t0.Add(3 * day)}, []float64{0.99, 0.98}},
		{"limit 2", store.HealthQuery{Limit: 2}, []float64{1.0, 0.99}},
		{"from day 2, limit 1", store.HealthQuery{Start: t0.Add(2 * day), Limit: 1}, []float64{0.98}},
		// Bounds are truncated to microseconds like the stored times: within t0's
		// microsecond a start still includes t0's record and an end still excludes it;
		// one microsecond on, they do the opposite.
		{"start in t0's µs", store.HealthQuery{Start: t0.Add(time.Nanosecond), End: t0.Add(day)}, []float64{1.0}},
		{"end in t0's µs", store.HealthQuery{End: t0.Add(time.Nanosecond)}, nil},
		{"start 1 µs after t0", store.HealthQuery{Start: t0.Add(time.Microsecond), End: t0.Add(day)}, nil},
		{"end 1 µs after t0", store.HealthQuery{End: t0.Add(time.Microsecond)}, []float64{1.0}},
		{"empty range", store.HealthQuery{Start: t0.Add(10 * day)}, nil},
	} {
		got, err := s.ListHealth(ctx, tenantA, "bike-1", tc.q)
		check(t, "ListHealth("+tc.name+")", err)
		if !sameFloats(capacities(got), tc.want) {
			t.Errorf("ListHealth(%s) = %v; want capacities %v", tc.name, capacities(got), tc.want)
		}
	}

	// A replay replaces; within one call the last record of a time wins.
	check(t, "AppendHealth(replay)", s.AppendHealth(ctx, tenantA, "bike-1",
		[]store.HealthRecord{record(t0.Add(day), 0.5), record(t0.Add(day), 0.995), record(t0.Add(5*day), 0.95)}))
	got, err = s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{})
	check(t, "ListHealth(after replay)", err)
	if want := []float64{1.0, 0.995, 0.98, 0.97, 0.96, 0.95}; !sameFloats(capacities(got), want) {
		t.Errorf("ListHealth after replay = %v; want %v", capacities(got), want)
	}

	// One bad record refuses the whole call.
	bad := []store.HealthRecord{record(t0.Add(6*day), 0.94), record(t0.Add(7*day), math.NaN())}
	wantErr(t, "AppendHealth(NaN)", s.AppendHealth(ctx, tenantA, "bike-1", bad), store.ErrInvalidArgument)
	wantErr(t, "AppendHealth(zero time)", s.AppendHealth(ctx, tenantA, "bike-1", []store.HealthRecord{record(time.Time{}, 0.9)}), store.ErrInvalidArgument)
	wantErr(t, "AppendHealth(year 10000)", s.AppendHealth(ctx, tenantA, "bike-1",
		[]store.HealthRecord{record(time.Date(10000, 1, 1, 0, 0, 0, 0, time.UTC), 0.9)}), store.ErrInvalidArgument)
	wantErr(t, "AppendHealth(too many)", s.AppendHealth(ctx, tenantA, "bike-1", make([]store.HealthRecord, store.MaxHealthAppend+1)), store.ErrInvalidArgument)
	if got, _ := s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{}); len(got) != 6 {
		t.Errorf("after refused appends: %d records; want 6", len(got))
	}
	_, err = s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{Limit: -1})
	wantErr(t, "ListHealth(limit -1)", err, store.ErrInvalidArgument)

	// A full-size append works.
	many := make([]store.HealthRecord, store.MaxHealthAppend)
	for i := range many {
		many[i] = record(t0.Add(time.Duration(100+i)*day), 0.9)
	}
	check(t, "AppendHealth(max)", s.AppendHealth(ctx, tenantA, "bike-1", many))
	if got, _ := s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{Limit: store.MaxHealthLimit}); len(got) != 6+store.MaxHealthAppend {
		t.Errorf("after a full-size append: %d records; want %d", len(got), 6+store.MaxHealthAppend)
	}

	wantErr(t, "AppendHealth(missing battery)", s.AppendHealth(ctx, tenantA, "bike-404", in), store.ErrNotFound)
	_, err = s.ListHealth(ctx, tenantA, "bike-404", store.HealthQuery{})
	wantErr(t, "ListHealth(missing battery)", err, store.ErrNotFound)
}
