package storetest

import (
	"maps"
	"sync"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// sameBattery reports whether a and b agree in every field.
func sameBattery(a, b store.Battery) bool {
	return a.ID == b.ID && a.TypeName == b.TypeName && a.Series == b.Series && a.Parallel == b.Parallel &&
		a.DisplayName == b.DisplayName && maps.Equal(a.Labels, b.Labels) && a.CreateTime.Equal(b.CreateTime) &&
		a.UpdateTime.Equal(b.UpdateTime) && a.Version == b.Version
}

// BatteriesTest checks create, get, update and delete of batteries, with etags.
func BatteriesTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()

	before := time.Now()
	in := newBattery("bike-7", builtinType)
	created, err := s.CreateBattery(ctx, tenantA, in, "")
	check(t, "CreateBattery", err)
	after := time.Now()
	between(t, "CreateTime", created.CreateTime, before, after)
	if created.ID != in.ID || created.TypeName != in.TypeName || created.Series != 13 || created.Parallel != 4 ||
		created.DisplayName != in.DisplayName || !maps.Equal(created.Labels, in.Labels) || created.Version <= 0 {
		t.Errorf("CreateBattery = %+v; want the fields of %+v and a positive version", created, in)
	}
	// The store keeps its own copy of the labels.
	in.Labels["fleet"] = "changed"
	got, err := s.GetBattery(ctx, tenantA, "bike-7")
	check(t, "GetBattery", err)
	if !sameBattery(got, created) {
		t.Errorf("GetBattery = %+v; want %+v", got, created)
	}

	_, err = s.CreateBattery(ctx, tenantA, newBattery("bike-7", builtinType), "")
	wantErr(t, "CreateBattery(same id)", err, store.ErrAlreadyExists)
	_, err = s.GetBattery(ctx, tenantA, "bike-8")
	wantErr(t, "GetBattery(missing)", err, store.ErrNotFound)

	// Update with the current version (the etag) succeeds and moves the version.
	up := got
	up.DisplayName = "Cargo bike seven"
	up.Labels = map[string]string{"fleet": "cargo", "depot": "east"}
	updated, err := s.UpdateBattery(ctx, tenantA, up, got.Version)
	check(t, "UpdateBattery", err)
	if updated.Version <= got.Version || !updated.CreateTime.Equal(got.CreateTime) || updated.UpdateTime.Before(got.UpdateTime) {
		t.Errorf("UpdateBattery: version %d -> %d, create %v -> %v, update %v -> %v; want a larger version, same create time, later update time",
			got.Version, updated.Version, got.CreateTime, updated.CreateTime, got.UpdateTime, updated.UpdateTime)
	}
	reread, err := s.GetBattery(ctx, tenantA, "bike-7")
	check(t, "GetBattery(after update)", err)
	if !sameBattery(reread, updated) {
		t.Errorf("GetBattery after update = %+v; want %+v", reread, updated)
	}

	// The old etag is stale now: both update and delete refuse it, and change nothing.
	_, err = s.UpdateBattery(ctx, tenantA, got, got.Version)
	wantErr(t, "UpdateBattery(stale version)", err, store.ErrConflict)
	wantErr(t, "DeleteBattery(stale version)", s.DeleteBattery(ctx, tenantA, "bike-7", got.Version), store.ErrConflict)
	reread, err = s.GetBattery(ctx, tenantA, "bike-7")
	check(t, "GetBattery(after refused writes)", err)
	if !sameBattery(reread, updated) {
		t.Errorf("GetBattery after refused writes = %+v; want unchanged %+v", reread, updated)
	}

	// AnyVersion skips the check; empty labels come back nil.
	up.Labels = map[string]string{}
	forced, err := s.UpdateBattery(ctx, tenantA, up, store.AnyVersion)
	check(t, "UpdateBattery(AnyVersion)", err)
	reread, err = s.GetBattery(ctx, tenantA, "bike-7")
	check(t, "GetBattery(after forced update)", err)
	if reread.Labels != nil || forced.Labels != nil || reread.Version != forced.Version {
		t.Errorf("after clearing labels: stored %+v, returned %+v; want nil labels, same version", reread, forced)
	}

	_, err = s.UpdateBattery(ctx, tenantA, newBattery("bike-8", builtinType), store.AnyVersion)
	wantErr(t, "UpdateBattery(missing)", err, store.ErrNotFound)
	wantErr(t, "DeleteBattery(missing)", s.DeleteBattery(ctx, tenantA, "bike-8", store.AnyVersion), store.ErrNotFound)

	check(t, "DeleteBattery", s.DeleteBattery(ctx, tenantA, "bike-7", forced.Version))
	_, err = s.GetBattery(ctx, tenantA, "bike-7")
	wantErr(t, "GetBattery(deleted)", err, store.ErrNotFound)
}

// RequestIDsTest checks AIP-155 request ids: a repeated create returns the first
// result, also when the repeats race, and without a request id a repeat fails.
func RequestIDsTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()

	first, err := s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "req-1")
	check(t, "CreateBattery(req-1)", err)
	// A retry may carry a different (e.g. server-generated) id: it still gets the first.
	again, err := s.CreateBattery(ctx, tenantA, newBattery("bike-2", builtinType), "req-1")
	check(t, "CreateBattery(req-1 again)", err)
	if !sameBattery(again, first) {
		t.Errorf("repeated CreateBattery = %+v; want the first result %+v", again, first)
	}
	if _, err := s.GetBattery(ctx, tenantA, "bike-2"); err == nil {
		t.Errorf("repeated CreateBattery created bike-2")
	}
	// Same id, new request id: a different request, so the id is taken.
	_, err = s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "req-2")
	wantErr(t, "CreateBattery(bike-1, req-2)", err, store.ErrAlreadyExists)

	typ, err := s.CreateBatteryType(ctx, tenantA, newType("cell-a"), "req-1")
	check(t, "CreateBatteryType(req-1)", err)
	typAgain, err := s.CreateBatteryType(ctx, tenantA, newType("cell-a"), "req-1")
	check(t, "CreateBatteryType(req-1 again)", err)
	if typAgain.Version != typ.Version || !typAgain.CreateTime.Equal(typ.CreateTime) {
		t.Errorf("repeated CreateBatteryType = %+v; want %+v", typAgain, typ)
	}
	cal, err := s.CreateCalibration(ctx, tenantA, store.Calibration{ID: "fit-1", Status: store.CalibrationRunning}, "req-1")
	check(t, "CreateCalibration(req-1)", err)
	calAgain, err := s.CreateCalibration(ctx, tenantA, store.Calibration{ID: "fit-2", Status: store.CalibrationRunning}, "req-1")
	check(t, "CreateCalibration(req-1 again)", err)
	if calAgain.ID != "fit-1" || calAgain.Version != cal.Version {
		t.Errorf("repeated CreateCalibration = %+v; want %+v", calAgain, cal)
	}

	// Racing retries: all get the same battery, and exactly one row exists.
	const n = 8
	var (
		wg      sync.WaitGroup
		results [n]store.Battery
		errs    [n]error
	)
	for i := range n {
		wg.Go(func() {
			results[i], errs[i] = s.CreateBattery(ctx, tenantA, newBattery("racer-"+string(rune('a'+i)), builtinType), "req-race")
		})
	}
	wg.Wait()
	for i := range n {
		if errs[i] != nil {
			t.Fatalf("racing CreateBattery %d: %v", i, errs[i])
		}
		if !sameBattery(results[i], results[0]) {
			t.Errorf("racing CreateBattery %d = %+v; want the same as %+v", i, results[i], results[0])
		}
	}
	list, _, err := s.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{})
	check(t, "ListBatteries", err)
	racers := 0
	for _, b := range list {
		if len(b.ID) > 6 && b.ID[:6] == "racer-" {
			racers++
		}
	}
	if racers != 1 {
		t.Errorf("racing creates with one request id stored %d batteries; want 1", racers)
	}
}
