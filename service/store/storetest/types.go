package storetest

import (
	"bytes"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// BatteryTypesTest checks create, get, delete and the in-use rule of battery types.
func BatteryTypesTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()

	before := time.Now()
	in := newType("cargo-cell")
	in.CalibrationID = "fit-1"
	got, err := s.CreateBatteryType(ctx, tenantA, in, "")
	check(t, "CreateBatteryType", err)
	after := time.Now()
	if got.Name != in.Name || got.DisplayName != in.DisplayName || got.Chemistry != in.Chemistry ||
		got.CalibrationID != in.CalibrationID || !bytes.Equal(got.Parameters, in.Parameters) {
		t.Errorf("CreateBatteryType = %+v; want the fields of %+v", got, in)
	}
	between(t, "CreateTime", got.CreateTime, before, after)
	if !got.UpdateTime.Equal(got.CreateTime) || got.Version <= 0 {
		t.Errorf("CreateBatteryType: UpdateTime %v, Version %d; want UpdateTime = CreateTime %v and Version > 0",
			got.UpdateTime, got.Version, got.CreateTime)
	}

	read, err := s.GetBatteryType(ctx, tenantA, in.Name)
	check(t, "GetBatteryType", err)
	if !bytes.Equal(read.Parameters, someParams) {
		t.Errorf("GetBatteryType: parameters %q; want byte for byte %q", read.Parameters, someParams)
	}
	if read.Name != got.Name || read.DisplayName != got.DisplayName || read.Chemistry != got.Chemistry ||
		read.CalibrationID != got.CalibrationID || !read.CreateTime.Equal(got.CreateTime) ||
		!read.UpdateTime.Equal(got.UpdateTime) || read.Version != got.Version {
		t.Errorf("GetBatteryType = %+v; want %+v", read, got)
	}

	_, err = s.CreateBatteryType(ctx, tenantA, newType("cargo-cell"), "")
	wantErr(t, "CreateBatteryType(same name)", err, store.ErrAlreadyExists)
	_, err = s.GetBatteryType(ctx, tenantA, "no-such-type")
	wantErr(t, "GetBatteryType(missing)", err, store.ErrNotFound)

	// A type in use by a battery cannot be deleted; a built-in name is not checked.
	check(t, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-1", "cargo-cell"), "")))
	check(t, "CreateBattery(built-in type)", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-2", builtinType), "")))
	wantErr(t, "DeleteBatteryType(in use)", s.DeleteBatteryType(ctx, tenantA, "cargo-cell", store.AnyVersion), store.ErrInUse)
	// Re-pointing the battery to a built-in type releases the registered one.
	b, err := s.GetBattery(ctx, tenantA, "bike-1")
	check(t, "GetBattery", err)
	b.TypeName = builtinType
	check(t, "UpdateBattery", ignore(s.UpdateBattery(ctx, tenantA, b, b.Version)))

	wantErr(t, "DeleteBatteryType(stale version)", s.DeleteBatteryType(ctx, tenantA, "cargo-cell", got.Version+1000), store.ErrConflict)
	check(t, "DeleteBatteryType", s.DeleteBatteryType(ctx, tenantA, "cargo-cell", got.Version))
	_, err = s.GetBatteryType(ctx, tenantA, "cargo-cell")
	wantErr(t, "GetBatteryType(deleted)", err, store.ErrNotFound)
	wantErr(t, "DeleteBatteryType(deleted)", s.DeleteBatteryType(ctx, tenantA, "cargo-cell", store.AnyVersion), store.ErrNotFound)

	// Creating a battery on a registered type, then deleting the battery, frees it.
	check(t, "CreateBatteryType(again)", ignore(s.CreateBatteryType(ctx, tenantA, newType("cargo-cell"), "")))
	check(t, "CreateBattery(bike-3)", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-3", "cargo-cell"), "")))
	wantErr(t, "DeleteBatteryType(in use again)", s.DeleteBatteryType(ctx, tenantA, "cargo-cell", store.AnyVersion), store.ErrInUse)
	check(t, "DeleteBattery(bike-3)", s.DeleteBattery(ctx, tenantA, "bike-3", store.AnyVersion))
	check(t, "DeleteBatteryType(free)", s.DeleteBatteryType(ctx, tenantA, "cargo-cell", store.AnyVersion))
}

// ignore drops a result and keeps the error.
func ignore[T any](_ T, err error) error { return err }
