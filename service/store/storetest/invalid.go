package storetest

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// InvalidArgumentsTest checks that the store refuses what it must not keep, with
// [store.ErrInvalidArgument], and stores nothing.
func InvalidArgumentsTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	check(t, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "")))
	v, err := s.PutState(ctx, tenantA, "bike-1", store.AnyVersion, newState(1, 1, t0))
	check(t, "PutState", err)

	bat := func(f func(*store.Battery)) error {
		b := newBattery("bike-new", builtinType)
		f(&b)
		_, err := s.CreateBattery(ctx, tenantA, b, "")
		return err
	}
	typ := func(f func(*store.BatteryType)) error {
		ty := newType("type-new")
		f(&ty)
		_, err := s.CreateBatteryType(ctx, tenantA, ty, "")
		return err
	}
	state := func(f func(*store.State)) error {
		st := newState(2, 2, t0.Add(time.Second))
		f(&st)
		_, err := s.PutState(ctx, tenantA, "bike-1", v, st)
		return err
	}
	cal := func(f func(*store.Calibration)) error {
		c := store.Calibration{ID: "fit-new", Status: store.CalibrationPending}
		f(&c)
		_, err := s.CreateCalibration(ctx, tenantA, c, "")
		return err
	}
	cases := map[string]error{
		"tenant empty":         ignore(s.GetBattery(ctx, "", "bike-1")),
		"tenant upper case":    ignore(s.GetBattery(ctx, "Default", "bike-1")),
		"tenant with slash":    ignore(s.CreateBattery(ctx, "a/b", newBattery("bike-2", builtinType), "")),
		"battery id empty":     bat(func(b *store.Battery) { b.ID = "" }),
		"battery id upper":     bat(func(b *store.Battery) { b.ID = "Bike" }),
		"battery id hyphen":    bat(func(b *store.Battery) { b.ID = "bike-" }),
		"battery id digit":     bat(func(b *store.Battery) { b.ID = "1bike" }),
		"battery id too long":  bat(func(b *store.Battery) { b.ID = "b" + strings.Repeat("x", store.MaxIDBytes) }),
		"battery id path":      bat(func(b *store.Battery) { b.ID = "batteries/x" }),
		"battery type empty":   bat(func(b *store.Battery) { b.TypeName = "" }),
		"series zero":          bat(func(b *store.Battery) { b.Series = 0 }),
		"parallel negative":    bat(func(b *store.Battery) { b.Parallel = -1 }),
		"series too many":      bat(func(b *store.Battery) { b.Series = store.MaxCellCount + 1 }),
		"display name long":    bat(func(b *store.Battery) { b.DisplayName = strings.Repeat("x", store.MaxDisplayNameBytes+1) }),
		"display name NUL":     bat(func(b *store.Battery) { b.DisplayName = "a\x00b" }),
		"display name UTF-8":   bat(func(b *store.Battery) { b.DisplayName = "\xc3\x28" }),
		"request id NUL":       ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-3", builtinType), "r\x00")),
		"request id long":      ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-3", builtinType), strings.Repeat("r", store.MaxRequestIDBytes+1))),
		"parameters empty":     typ(func(ty *store.BatteryType) { ty.Parameters = nil }),
		"parameters not JSON":  typ(func(ty *store.BatteryType) { ty.Parameters = []byte(`{"a":`) }),
		"parameters bad UTF-8": typ(func(ty *store.BatteryType) { ty.Parameters = []byte("\"\xff\"") }),
		"parameters too big":   typ(func(ty *store.BatteryType) { ty.Parameters = bigJSON(store.MaxBlobBytes + 1) }),
		"chemistry long":       typ(func(ty *store.BatteryType) { ty.Chemistry = strings.Repeat("x", store.MaxChemistryBytes+1) }),
		"type calibration id":  typ(func(ty *store.BatteryType) { ty.CalibrationID = "Fit 1" }),
		"estimator empty":      state(func(st *store.State) { st.Estimator = nil }),
		"estimator not JSON":   state(func(st *store.State) { st.Estimator = []byte("NaN") }),
		"soc NaN":              state(func(st *store.State) { st.Summary.SOC = math.NaN() }),
		"sigma negative":       state(func(st *store.State) { st.Summary.SOCSigma = -0.1 }),
		"capacity zero":        state(func(st *store.State) { st.Summary.CapacityFactor = 0 }),
		"resistance Inf":       state(func(st *store.State) { st.Summary.ResistanceFactor = math.Inf(1) }),
		"cycles negative":      state(func(st *store.State) { st.Summary.EquivalentCycles = -1 }),
		"temperature NaN":      state(func(st *store.State) { st.Summary.TemperatureCelsius = math.NaN() }),
		"voltage -Inf":         state(func(st *store.State) { st.Summary.VoltageVolts = math.Inf(-1) }),
		"current NaN":          state(func(st *store.State) { st.Summary.CurrentAmps = math.NaN() }),
		"watermark year 0":     state(func(st *store.State) { st.Watermark.Time = time.Date(0, 1, 1, 0, 0, 0, 0, time.UTC) }),
		"expected negative":    ignore(s.PutState(ctx, tenantA, "bike-1", -1, newState(2, 2, t0))),
		"delete expected neg":  s.DeleteBattery(ctx, tenantA, "bike-1", -5),
		"status empty":         cal(func(c *store.Calibration) { c.Status = "" }),
		"status unknown":       cal(func(c *store.Calibration) { c.Status = "done" }),
		"report not JSON":      cal(func(c *store.Calibration) { c.Report = []byte("{") }),
		"cal type name":        cal(func(c *store.Calibration) { c.TypeName = "Cell A" }),
		"cal error too long":   cal(func(c *store.Calibration) { c.Error = strings.Repeat("e", store.MaxErrorBytes+1) }),
		"list type filter":     ignore3(s.ListBatteries(ctx, tenantA, store.BatteryFilter{TypeName: "Bad Name"}, store.PageRequest{})),
		"list label filter":    ignore3(s.ListBatteries(ctx, tenantA, store.BatteryFilter{Labels: map[string]string{"A": "b"}}, store.PageRequest{})),
		"list page size":       ignore3(s.ListBatteryTypes(ctx, tenantA, store.PageRequest{Size: -3})),
		"health start year":    ignore(s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{Start: time.Date(12000, 1, 1, 0, 0, 0, 0, time.UTC)})),
	}
	for name, err := range cases {
		wantErr(t, name, err, store.ErrInvalidArgument)
	}

	// Nothing was stored, and the state is as it was.
	if _, err := s.GetBattery(ctx, tenantA, "bike-new"); !errors.Is(err, store.ErrNotFound) {
		t.Errorf("GetBattery(bike-new) after refused creates: %v; want ErrNotFound", err)
	}
	if _, err := s.GetBatteryType(ctx, tenantA, "type-new"); !errors.Is(err, store.ErrNotFound) {
		t.Errorf("GetBatteryType(type-new) after refused creates: %v; want ErrNotFound", err)
	}
	if _, err := s.GetCalibration(ctx, tenantA, "fit-new"); !errors.Is(err, store.ErrNotFound) {
		t.Errorf("GetCalibration(fit-new) after refused creates: %v; want ErrNotFound", err)
	}
	if st, err := s.GetState(ctx, tenantA, "bike-1"); err != nil || st.Version != v || counter(t, st) != 1 {
		t.Errorf("state after refused writes: %+v, %v; want unchanged at version %d", st, err, v)
	}
	if _, err := s.GetBattery(ctx, tenantA, "bike-1"); err != nil {
		t.Errorf("bike-1 after a refused delete: %v", err)
	}

	// Values at the limits are accepted and come back exactly.
	edge := newBattery("b"+strings.Repeat("x", store.MaxIDBytes-1), builtinType)
	edge.Series, edge.Parallel = store.MaxCellCount, 1
	edge.DisplayName = strings.Repeat("ü", store.MaxDisplayNameBytes/2)
	got, err := s.CreateBattery(ctx, tenantA, edge, strings.Repeat("r", store.MaxRequestIDBytes))
	check(t, "CreateBattery(at the limits)", err)
	if read, err := s.GetBattery(ctx, tenantA, edge.ID); err != nil || !sameBattery(read, got) {
		t.Errorf("GetBattery(at the limits) = %+v, %v; want %+v", read, err, got)
	}
}

// LargeBlobTest checks that a blob of exactly [store.MaxBlobBytes] is stored and
// comes back whole. It moves 16 MiB, so -short skips it (InvalidArgumentsTest still
// checks that one byte more is refused).
func LargeBlobTest(t *testing.T, open Opener) {
	if testing.Short() {
		t.Skip("moves a 16 MiB blob; skipped with -short")
	}
	s := open(t)
	ctx := t.Context()
	bigType := newType("big-type")
	bigType.Parameters = bigJSON(store.MaxBlobBytes)
	bigType.Parameters[1] = 'a'
	bigType.Parameters[len(bigType.Parameters)-2] = 'z'
	check(t, "CreateBatteryType(largest blob)", ignore(s.CreateBatteryType(ctx, tenantA, bigType, "")))
	read, err := s.GetBatteryType(ctx, tenantA, "big-type")
	check(t, "GetBatteryType(largest blob)", err)
	if !bytes.Equal(read.Parameters, bigType.Parameters) {
		t.Errorf("GetBatteryType(largest blob): %d bytes back, equal %v; want the %d bytes stored",
			len(read.Parameters), bytes.Equal(read.Parameters, bigType.Parameters), store.MaxBlobBytes)
	}
}

func ignore3[T any](_ T, _ string, err error) error { return err }

// bigJSON returns a valid JSON string of exactly n bytes (n ≥ 2).
func bigJSON(n int) []byte {
	b := make([]byte, n)
	for i := range b {
		b[i] = 'x'
	}
	b[0], b[n-1] = '"', '"'
	return b
}

// ContextCancelTest checks that every method honours its context: with a context
// that has ended it fails with an error wrapping the context's error, and writes cut
// short mid-flight leave the store consistent and usable.
func ContextCancelTest(t *testing.T, open Opener) {
	s := open(t)
	check(t, "CreateBattery", ignore(s.CreateBattery(t.Context(), tenantA, newBattery("bike-1", builtinType), "")))
	v, err := s.PutState(t.Context(), tenantA, "bike-1", store.AnyVersion, newState(1, 1, t0))
	check(t, "PutState", err)

	cancelled, cancel := context.WithCancel(t.Context())
	cancel()
	expired, cancel2 := context.WithDeadline(t.Context(), time.Now().Add(-time.Second))
	defer cancel2()
	for _, tc := range []struct {
		ctx  context.Context
		want error
	}{{cancelled, context.Canceled}, {expired, context.DeadlineExceeded}} {
		ctx := tc.ctx
		calls := map[string]error{
			"CreateBatteryType": ignore(s.CreateBatteryType(ctx, tenantA, newType("cell-x"), "")),
			"GetBatteryType":    ignore(s.GetBatteryType(ctx, tenantA, "cell-x")),
			"ListBatteryTypes":  ignore3(s.ListBatteryTypes(ctx, tenantA, store.PageRequest{})),
			"DeleteBatteryType": s.DeleteBatteryType(ctx, tenantA, "cell-x", store.AnyVersion),
			"CreateBattery":     ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-2", builtinType), "")),
			"GetBattery":        ignore(s.GetBattery(ctx, tenantA, "bike-1")),
			"ListBatteries":     ignore3(s.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{})),
			"UpdateBattery":     ignore(s.UpdateBattery(ctx, tenantA, newBattery("bike-1", builtinType), store.AnyVersion)),
			"DeleteBattery":     s.DeleteBattery(ctx, tenantA, "bike-1", store.AnyVersion),
			"GetState":          ignore(s.GetState(ctx, tenantA, "bike-1")),
			"PutState":          ignore(s.PutState(ctx, tenantA, "bike-1", v, newState(2, 2, t0))),
			"PutStates":         ignore(s.PutStates(ctx, tenantA, []store.StateWrite{{BatteryID: "bike-1", ExpectedVersion: v, State: newState(2, 2, t0)}})),
			"AppendHealth":      s.AppendHealth(ctx, tenantA, "bike-1", []store.HealthRecord{record(t0, 0.9)}),
			"ListHealth":        ignore(s.ListHealth(ctx, tenantA, "bike-1", store.HealthQuery{})),
			"CreateCalibration": ignore(s.CreateCalibration(ctx, tenantA, store.Calibration{ID: "fit-1", Status: store.CalibrationPending}, "")),
			"GetCalibration":    ignore(s.GetCalibration(ctx, tenantA, "fit-1")),
			"ListCalibrations":  ignore3(s.ListCalibrations(ctx, tenantA, store.PageRequest{})),
			"UpdateCalibration": ignore(s.UpdateCalibration(ctx, tenantA, store.Calibration{ID: "fit-1", Status: store.CalibrationFailed}, store.AnyVersion)),
			"DeleteCalibration": s.DeleteCalibration(ctx, tenantA, "fit-1", store.AnyVersion),
			"Ping":              s.Ping(ctx),
		}
		for name, err := range calls {
			wantErr(t, fmt.Sprintf("%s(%v)", name, tc.want), err, tc.want)
		}
	}
	if st, err := s.GetState(t.Context(), tenantA, "bike-1"); err != nil || st.Version != v {
		t.Fatalf("state after cancelled calls: %+v, %v; want unchanged at version %d", st, err, v)
	}

	// Cancel while writers are queued or running. A write cut short may or may not
	// have happened (the commit can race the cancellation), but never half: afterwards
	// each battery holds either the last acknowledged state or the one write after it,
	// and the store keeps working.
	const writers = 12
	for i := range writers {
		id := fmt.Sprintf("w-%d", i)
		check(t, "CreateBattery "+id, ignore(s.CreateBattery(t.Context(), tenantA, newBattery(id, builtinType), "")))
	}
	type ack struct {
		version int64
		n       int
	}
	ctx, cancel3 := context.WithCancel(t.Context())
	var (
		wg   sync.WaitGroup
		mu   sync.Mutex
		acks = map[string]ack{}
	)
	for i := range writers {
		wg.Go(func() {
			id := fmt.Sprintf("w-%d", i)
			prev := store.AnyVersion
			for n := 0; ; n++ {
				nv, err := s.PutState(ctx, tenantA, id, prev, newState(n, int64(n), t0))
				switch {
				case err == nil:
					prev = nv
					mu.Lock()
					acks[id] = ack{nv, n}
					mu.Unlock()
				case errors.Is(err, context.Canceled):
					return
				default:
					t.Errorf("PutState(%s) while cancelling: %v; want nil or context.Canceled", id, err)
					return
				}
			}
		})
	}
	time.Sleep(20 * time.Millisecond)
	cancel3()
	wg.Wait()
	check(t, "Ping after cancellation", s.Ping(t.Context()))
	for i := range writers {
		id := fmt.Sprintf("w-%d", i)
		a, acked := acks[id]
		st, err := s.GetState(t.Context(), tenantA, id)
		switch {
		case errors.Is(err, store.ErrNotFound) && !acked:
		case err != nil:
			t.Errorf("GetState(%s) after cancellation: %v", id, err)
		case !acked && counter(t, st) != 0:
			t.Errorf("%s after cancellation: counter %d; want 0 (the one unacknowledged write)", id, counter(t, st))
		case acked && counter(t, st) == a.n && st.Version != a.version:
			t.Errorf("%s after cancellation: version %d; want the acknowledged %d", id, st.Version, a.version)
		case acked && counter(t, st) != a.n && counter(t, st) != a.n+1:
			t.Errorf("%s after cancellation: counter %d; want the acknowledged %d or the next", id, counter(t, st), a.n)
		}
	}
	check(t, "PutState after cancellation", ignore(s.PutState(t.Context(), tenantA, "bike-1", v, newState(5, 5, t0))))
}
