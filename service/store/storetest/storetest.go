// Package storetest is the contract every [store.Store] implementation must meet, as
// test functions that an implementation's own tests call with a way to open a fresh,
// empty store:
//
//	func TestContract(t *testing.T) {
//		storetest.Run(t, func(t testing.TB) store.Store { … })
//	}
//
// The reference for every check is the documentation of package store (the contract
// itself), plus AIP-155 (request ids), AIP-158 (pagination) and AIP-154 (etags) for
// the API conventions the store supports. Run the suite with -race: several tests
// start concurrent writers.
package storetest

import (
	"encoding/json"
	"errors"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// Opener opens a fresh, empty store for one test and arranges (with t.Cleanup) for
// it to be closed and discarded afterwards.
type Opener func(t testing.TB) store.Store

// Run runs every contract test as a parallel subtest, each on its own store.
func Run(t *testing.T, open Opener) {
	tests := []struct {
		name string
		fn   func(*testing.T, Opener)
	}{
		{"BatteryTypes", BatteryTypesTest},
		{"Batteries", BatteriesTest},
		{"RequestIDs", RequestIDsTest},
		{"Pagination", PaginationTest},
		{"PageTokens", PageTokensTest},
		{"Labels", LabelsTest},
		{"State", StateTest},
		{"StateRace", StateRaceTest},
		{"ConcurrentWriters", ConcurrentWritersTest},
		{"PutStates", PutStatesTest},
		{"Watermarks", WatermarksTest},
		{"Health", HealthTest},
		{"Calibrations", CalibrationsTest},
		{"TenantIsolation", TenantIsolationTest},
		{"DeleteCascade", DeleteCascadeTest},
		{"Versions", VersionsTest},
		{"InvalidArguments", InvalidArgumentsTest},
		{"LargeBlob", LargeBlobTest},
		{"ContextCancel", ContextCancelTest},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			t.Parallel()
			tc.fn(t, open)
		})
	}
}

const (
	tenantA = store.DefaultTenant
	tenantB = "other-tenant"
)

// someParams is an invented parameter set, with spacing and key order that a
// re-encoding JSON column would change, to check the blob comes back byte for byte.
var someParams = []byte(`{"capacity_amp_hours": 2.5,  "chemistry":"nmc",
	"ocv": [3.0, 3.6, 4.2], "a": {"z": 1, "b": null}}`)

func newType(name string) store.BatteryType {
	return store.BatteryType{
		Name:        name,
		DisplayName: "Type " + name,
		Chemistry:   "nmc",
		Parameters:  someParams,
	}
}

func newBattery(id, typeName string) store.Battery {
	return store.Battery{
		ID:          id,
		TypeName:    typeName,
		Series:      13,
		Parallel:    4,
		DisplayName: "Cargo bike " + id,
		Labels:      map[string]string{"fleet": "cargo", "site": "harbour"},
	}
}

// builtinType names a built-in catalogue type, which the store never holds.
const builtinType = "generic-nmc-18650"

// newState returns a state whose blob carries n and whose watermark is sequence seq
// at t.
func newState(n int, seq int64, t time.Time) store.State {
	blob, _ := json.Marshal(map[string]any{"n": n, "x": []float64{0.5, 0.001}})
	return store.State{
		Estimator: blob,
		Summary: store.Summary{
			SOC: 0.5, SOCSigma: 0.02, CapacityFactor: 0.97, ResistanceFactor: 1.1,
			EquivalentCycles: 120.5, TemperatureCelsius: 21.5, VoltageVolts: 48.1, CurrentAmps: -3.2,
		},
		Watermark: store.Watermark{Sequence: seq, Time: t},
	}
}

// counter returns the n a state blob of newState carries.
func counter(t testing.TB, st store.State) int {
	t.Helper()
	var v struct{ N int }
	if err := json.Unmarshal(st.Estimator, &v); err != nil {
		t.Fatalf("decode estimator blob %q: %v", st.Estimator, err)
	}
	return v.N
}

// t0 is an arbitrary instant with a sub-microsecond part, which the store truncates.
var t0 = time.Date(2025, 3, 14, 9, 26, 53, 589793238, time.UTC)

func check(t testing.TB, what string, err error) {
	t.Helper()
	if err != nil {
		t.Fatalf("%s: %v", what, err)
	}
}

// wantErr fails the test unless err wraps want.
func wantErr(t testing.TB, what string, err, want error) {
	t.Helper()
	if !errors.Is(err, want) {
		t.Errorf("%s: error = %v; want %v", what, err, want)
	}
}

// between checks that got lies within [lo truncated to µs, hi].
func between(t testing.TB, what string, got, lo, hi time.Time) {
	t.Helper()
	if got.Before(lo.Truncate(time.Microsecond)) || got.After(hi) || got.Location() != time.UTC {
		t.Errorf("%s = %v; want UTC within [%v, %v]", what, got, lo, hi)
	}
}
