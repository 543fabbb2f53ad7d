package storetest

import (
	"bytes"
	"cmp"
	"fmt"
	"slices"
	"testing"

	"github.com/voltcast/voltcast/service/store"
)

// CalibrationsTest checks calibration runs: create with input, status updates by
// compare-and-swap, lists newest first without the input, delete.
func CalibrationsTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	input := []byte(`{"samples": [[0, 3.7, 1.0]], "settings": {"rc_branches": 2}}`)
	c, err := s.CreateCalibration(ctx, tenantA, store.Calibration{
		ID: "fit-1", DisplayName: "Lab run 1", Status: store.CalibrationRunning, Input: input}, "")
	check(t, "CreateCalibration", err)
	if c.Version <= 0 || c.CreateTime.IsZero() || c.Report != nil || c.Error != "" {
		t.Errorf("CreateCalibration = %+v; want version > 0, create time set, no report or error", c)
	}
	_, err = s.CreateCalibration(ctx, tenantA, store.Calibration{ID: "fit-1", Status: store.CalibrationPending}, "")
	wantErr(t, "CreateCalibration(same id)", err, store.ErrAlreadyExists)

	got, err := s.GetCalibration(ctx, tenantA, "fit-1")
	check(t, "GetCalibration", err)
	if !bytes.Equal(got.Input, input) || got.Status != store.CalibrationRunning || got.DisplayName != "Lab run 1" || got.Version != c.Version {
		t.Errorf("GetCalibration = %+v; want %+v", got, c)
	}

	report := []byte(`{"voltage_rmse_volts": 0.012}`)
	done := got
	done.Status, done.Report, done.TypeName = store.CalibrationSucceeded, report, "fitted-cell"
	done.Input = nil // ignored: the input is kept
	updated, err := s.UpdateCalibration(ctx, tenantA, done, got.Version)
	check(t, "UpdateCalibration", err)
	if updated.Version <= got.Version || !bytes.Equal(updated.Input, input) || !bytes.Equal(updated.Report, report) ||
		updated.TypeName != "fitted-cell" || !updated.CreateTime.Equal(got.CreateTime) {
		t.Errorf("UpdateCalibration = %+v; want a new version, input kept, report and type set", updated)
	}
	_, err = s.UpdateCalibration(ctx, tenantA, store.Calibration{ID: "fit-1", Status: store.CalibrationFailed, Error: "late"}, got.Version)
	wantErr(t, "UpdateCalibration(stale)", err, store.ErrConflict)
	got, err = s.GetCalibration(ctx, tenantA, "fit-1")
	check(t, "GetCalibration(after update)", err)
	if got.Status != store.CalibrationSucceeded || !bytes.Equal(got.Report, report) || got.Error != "" || got.Version != updated.Version {
		t.Errorf("GetCalibration after update = %+v; want %+v", got, updated)
	}
	_, err = s.UpdateCalibration(ctx, tenantA, store.Calibration{ID: "fit-404", Status: store.CalibrationFailed}, store.AnyVersion)
	wantErr(t, "UpdateCalibration(missing)", err, store.ErrNotFound)

	// Newest first; ids break ties of equal creation times.
	for i := 2; i <= 7; i++ {
		check(t, "CreateCalibration", ignore(s.CreateCalibration(ctx, tenantA, store.Calibration{
			ID: fmt.Sprintf("fit-%d", i), Status: store.CalibrationPending, Input: input}, "")))
	}
	var all []store.Calibration
	token := ""
	for {
		page, next, err := s.ListCalibrations(ctx, tenantA, store.PageRequest{Size: 2, Token: token})
		check(t, "ListCalibrations", err)
		all = append(all, page...)
		if next == "" {
			break
		}
		token = next
	}
	if len(all) != 7 {
		t.Fatalf("ListCalibrations returned %d runs; want 7", len(all))
	}
	sorted := slices.IsSortedFunc(all, func(a, b store.Calibration) int {
		if c := b.CreateTime.Compare(a.CreateTime); c != 0 {
			return c
		}
		return cmp.Compare(b.ID, a.ID)
	})
	seen := map[string]bool{}
	for _, c := range all {
		seen[c.ID] = true
		if c.Input != nil {
			t.Errorf("ListCalibrations: %s has its input; want it left out of lists", c.ID)
		}
	}
	if !sorted || len(seen) != 7 {
		t.Errorf("ListCalibrations order %v; want 7 distinct runs, newest first", ids(all))
	}

	wantErr(t, "DeleteCalibration(stale)", s.DeleteCalibration(ctx, tenantA, "fit-1", c.Version), store.ErrConflict)
	check(t, "DeleteCalibration", s.DeleteCalibration(ctx, tenantA, "fit-1", updated.Version))
	_, err = s.GetCalibration(ctx, tenantA, "fit-1")
	wantErr(t, "GetCalibration(deleted)", err, store.ErrNotFound)
	wantErr(t, "DeleteCalibration(deleted)", s.DeleteCalibration(ctx, tenantA, "fit-1", store.AnyVersion), store.ErrNotFound)
}

func ids(cs []store.Calibration) []string {
	out := make([]string, len(cs))
	for i, c := range cs {
		out[i] = c.ID + "@" + c.CreateTime.Format("15:04:05.000000")
	}
	return out
}
