package storetest

import (
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// TenantIsolationTest checks that one tenant can neither see nor change another
// tenant's rows, and that the same ids in two tenants are independent.
func TenantIsolationTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()

	// Tenant A's world.
	typ, err := s.CreateBatteryType(ctx, tenantA, newType("cell-a"), "req-a")
	check(t, "A: CreateBatteryType", err)
	bat, err := s.CreateBattery(ctx, tenantA, newBattery("bike-1", "cell-a"), "req-a")
	check(t, "A: CreateBattery", err)
	sv, err := s.PutState(ctx, tenantA, "bike-1", store.AnyVersion, newState(7, 70, t0))
	check(t, "A: PutState", err)
	check(t, "A: AppendHealth", s.AppendHealth(ctx, tenantA, "bike-1", []store.HealthRecord{record(t0, 0.99)}))
	cal, err := s.CreateCalibration(ctx, tenantA, store.Calibration{ID: "fit-1", Status: store.CalibrationRunning}, "req-a")
	check(t, "A: CreateCalibration", err)

	// Tenant B sees nothing of it.
	_, err = s.GetBatteryType(ctx, tenantB, "cell-a")
	wantErr(t, "B: GetBatteryType", err, store.ErrNotFound)
	_, err = s.GetBattery(ctx, tenantB, "bike-1")
	wantErr(t, "B: GetBattery", err, store.ErrNotFound)
	_, err = s.GetState(ctx, tenantB, "bike-1")
	wantErr(t, "B: GetState", err, store.ErrNotFound)
	_, err = s.ListHealth(ctx, tenantB, "bike-1", store.HealthQuery{})
	wantErr(t, "B: ListHealth", err, store.ErrNotFound)
	_, err = s.GetCalibration(ctx, tenantB, "fit-1")
	wantErr(t, "B: GetCalibration", err, store.ErrNotFound)
	if l, _, err := s.ListBatteryTypes(ctx, tenantB, store.PageRequest{}); err != nil || len(l) != 0 {
		t.Errorf("B: ListBatteryTypes = %v, %v; want empty", l, err)
	}
	if l, _, err := s.ListBatteries(ctx, tenantB, store.BatteryFilter{Labels: map[string]string{"fleet": "cargo"}}, store.PageRequest{}); err != nil || len(l) != 0 {
		t.Errorf("B: ListBatteries = %v, %v; want empty", l, err)
	}
	if l, _, err := s.ListCalibrations(ctx, tenantB, store.PageRequest{}); err != nil || len(l) != 0 {
		t.Errorf("B: ListCalibrations = %v, %v; want empty", l, err)
	}

	// Tenant B cannot change it, even with the right versions.
	b := bat
	b.DisplayName = "hijacked"
	_, err = s.UpdateBattery(ctx, tenantB, b, bat.Version)
	wantErr(t, "B: UpdateBattery", err, store.ErrNotFound)
	wantErr(t, "B: DeleteBattery", s.DeleteBattery(ctx, tenantB, "bike-1", bat.Version), store.ErrNotFound)
	wantErr(t, "B: DeleteBatteryType", s.DeleteBatteryType(ctx, tenantB, "cell-a", typ.Version), store.ErrNotFound)
	_, err = s.PutState(ctx, tenantB, "bike-1", sv, newState(666, 71, t0.Add(time.Second)))
	wantErr(t, "B: PutState", err, store.ErrNotFound)
	_, err = s.PutState(ctx, tenantB, "bike-1", store.AnyVersion, newState(666, 71, t0.Add(time.Second)))
	wantErr(t, "B: PutState(AnyVersion)", err, store.ErrNotFound)
	wantErr(t, "B: AppendHealth", s.AppendHealth(ctx, tenantB, "bike-1", []store.HealthRecord{record(t0, 0.1)}), store.ErrNotFound)
	_, err = s.UpdateCalibration(ctx, tenantB, store.Calibration{ID: "fit-1", Status: store.CalibrationFailed}, cal.Version)
	wantErr(t, "B: UpdateCalibration", err, store.ErrNotFound)
	wantErr(t, "B: DeleteCalibration", s.DeleteCalibration(ctx, tenantB, "fit-1", cal.Version), store.ErrNotFound)

	// A request id of tenant A means nothing in tenant B.
	bb, err := s.CreateBattery(ctx, tenantB, newBattery("bike-2", builtinType), "req-a")
	check(t, "B: CreateBattery(req-a)", err)
	if bb.ID != "bike-2" {
		t.Errorf("B: CreateBattery with A's request id returned %s; want its own bike-2", bb.ID)
	}

	// Tenant B may use the same ids; a type of A does not count as registered in B.
	check(t, "B: CreateBatteryType", ignore(s.CreateBatteryType(ctx, tenantB, newType("cell-a"), "")))
	check(t, "B: CreateBattery(bike-1)", ignore(s.CreateBattery(ctx, tenantB, newBattery("bike-1", builtinType), "")))
	check(t, "B: PutState", ignore(s.PutState(ctx, tenantB, "bike-1", store.AnyVersion, newState(1, 1, t0))))
	check(t, "B: DeleteBatteryType", s.DeleteBatteryType(ctx, tenantB, "cell-a", store.AnyVersion))
	check(t, "B: DeleteBattery", s.DeleteBattery(ctx, tenantB, "bike-1", store.AnyVersion))

	// A's world is untouched.
	gotB, err := s.GetBattery(ctx, tenantA, "bike-1")
	check(t, "A: GetBattery", err)
	if !sameBattery(gotB, bat) {
		t.Errorf("A: battery %+v; want unchanged %+v", gotB, bat)
	}
	gotS, err := s.GetState(ctx, tenantA, "bike-1")
	check(t, "A: GetState", err)
	if gotS.Version != sv || counter(t, gotS) != 7 {
		t.Errorf("A: state %+v; want unchanged version %d", gotS, sv)
	}
	if _, err := s.GetBatteryType(ctx, tenantA, "cell-a"); err != nil {
		t.Errorf("A: GetBatteryType: %v", err)
	}
	wantErr(t, "A: DeleteBatteryType(still in use in A)", s.DeleteBatteryType(ctx, tenantA, "cell-a", store.AnyVersion), store.ErrInUse)
	if h, err := s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{}); err != nil || len(h) != 1 || h[0].CapacityFactor != 0.99 {
		t.Errorf("A: ListHealth = %v, %v; want the one record of A", h, err)
	}
	if c, err := s.GetCalibration(ctx, tenantA, "fit-1"); err != nil || c.Version != cal.Version {
		t.Errorf("A: GetCalibration = %+v, %v; want unchanged", c, err)
	}
}

// DeleteCascadeTest checks that deleting a battery removes its state, health history
// and labels, and that a battery re-created under the same id starts empty.
func DeleteCascadeTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	check(t, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "")))
	check(t, "CreateBattery(neighbour)", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-2", builtinType), "")))
	for _, id := range []string{"bike-1", "bike-2"} {
		check(t, "PutState", ignore(s.PutState(ctx, tenantA, id, store.AnyVersion, newState(1, 5, t0))))
		check(t, "AppendHealth", s.AppendHealth(ctx, tenantA, id, []store.HealthRecord{record(t0, 0.99), record(t0.Add(time.Hour), 0.98)}))
	}
	check(t, "DeleteBattery", s.DeleteBattery(ctx, tenantA, "bike-1", store.AnyVersion))

	_, err := s.GetState(ctx, tenantA, "bike-1")
	wantErr(t, "GetState(deleted battery)", err, store.ErrNotFound)
	_, err = s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{})
	wantErr(t, "ListHealth(deleted battery)", err, store.ErrNotFound)

	// Re-created: no state, no history, no old labels.
	fresh := newBattery("bike-1", builtinType)
	fresh.Labels = map[string]string{"fleet": "new"}
	check(t, "CreateBattery(again)", ignore(s.CreateBattery(ctx, tenantA, fresh, "")))
	_, err = s.GetState(ctx, tenantA, "bike-1")
	wantErr(t, "GetState(re-created)", err, store.ErrNotFound)
	if h, err := s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{}); err != nil || len(h) != 0 {
		t.Errorf("ListHealth(re-created) = %v, %v; want empty", h, err)
	}
	ids, _ := listAll(t, s, tenantA, store.BatteryFilter{Labels: map[string]string{"site": "harbour"}}, 0)
	if len(ids) != 1 || ids[0] != "bike-2" {
		t.Errorf("label filter after re-create finds %v; want only bike-2", ids)
	}

	// The neighbour is untouched.
	if st, err := s.GetState(ctx, tenantA, "bike-2"); err != nil || counter(t, st) != 1 {
		t.Errorf("neighbour state = %+v, %v; want intact", st, err)
	}
	if h, err := s.ListHealth(ctx, tenantA, "bike-2", store.HealthQuery{}); err != nil || len(h) != 2 {
		t.Errorf("neighbour history = %v, %v; want 2 records", h, err)
	}
}

// VersionsTest checks that versions are never reused: after a battery is deleted and
// re-created, every version of the old one is stale for the new one, so a writer
// that missed the re-creation cannot overwrite it (the ABA problem).
func VersionsTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	old, err := s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "")
	check(t, "CreateBattery", err)
	oldState, err := s.PutState(ctx, tenantA, "bike-1", store.AnyVersion, newState(1, 1, t0))
	check(t, "PutState", err)
	check(t, "DeleteBattery", s.DeleteBattery(ctx, tenantA, "bike-1", old.Version))

	renewed, err := s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "")
	check(t, "CreateBattery(again)", err)
	if renewed.Version <= oldState || renewed.Version <= old.Version {
		t.Errorf("re-created battery version %d; want above every earlier version (%d, %d)", renewed.Version, old.Version, oldState)
	}
	// Walk the new state through as many versions as the old one had.
	v, err := s.PutState(ctx, tenantA, "bike-1", store.AnyVersion, newState(2, 1, t0))
	check(t, "PutState(new)", err)
	if v == oldState {
		t.Errorf("new state version %d equals the deleted state's", v)
	}
	_, err = s.PutState(ctx, tenantA, "bike-1", oldState, newState(3, 2, t0))
	wantErr(t, "PutState(version of deleted state)", err, store.ErrConflict)
	_, err = s.UpdateBattery(ctx, tenantA, renewed, old.Version)
	wantErr(t, "UpdateBattery(etag of deleted battery)", err, store.ErrConflict)

	// Versions increase across resources and writes.
	seen := map[int64]bool{old.Version: true, oldState: true, renewed.Version: true, v: true}
	last := v
	for i := range 5 {
		next, err := s.PutState(ctx, tenantA, "bike-1", last, newState(4+i, int64(3+i), t0))
		check(t, "PutState(chain)", err)
		if next <= last || seen[next] {
			t.Errorf("PutState chain: version %d after %d; want strictly larger and unused", next, last)
		}
		seen[next] = true
		last = next
	}
}
