package storetest

import (
	"errors"
	"fmt"
	"math"
	"slices"
	"sync"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// PutStatesTest checks the batched write: every write is its own compare-and-swap
// with its own result, failures of some (conflict, bad input, missing battery) leave
// the others written, and concurrent batches over the same batteries in opposite
// orders lose no update.
func PutStatesTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	versions := map[string]int64{}
	for _, id := range []string{"a", "b", "c", "d", "e"} {
		check(t, "CreateBattery "+id, ignore(s.CreateBattery(ctx, tenantA, newBattery(id, builtinType), "")))
		if id == "c" {
			continue // c has no state yet
		}
		v, err := s.PutState(ctx, tenantA, id, store.AnyVersion, newState(1, 10, t0))
		check(t, "PutState "+id, err)
		versions[id] = v
	}
	bad := newState(2, 11, t0.Add(time.Second))
	bad.Summary.SOC = math.NaN()
	for _, withMissing := range []bool{false, true} {
		writes := []store.StateWrite{
			{BatteryID: "e", ExpectedVersion: versions["e"], State: newState(2, 9, t0)}, // watermark back
			{BatteryID: "a", ExpectedVersion: versions["a"], State: newState(2, 11, t0.Add(time.Second))},
			{BatteryID: "b", ExpectedVersion: versions["b"] + 1000, State: newState(2, 11, t0.Add(time.Second))}, // stale
			{BatteryID: "c", ExpectedVersion: versions["c"], State: newState(2, 11, t0.Add(time.Second))},        // AnyVersion in round 1
			{BatteryID: "d", ExpectedVersion: versions["d"], State: bad},
		}
		want := []error{store.ErrInvalidArgument, nil, store.ErrConflict, nil, store.ErrInvalidArgument}
		if withMissing {
			// A missing battery in the middle; the rest must still be written.
			writes = slices.Insert(writes, 2, store.StateWrite{BatteryID: "b-404", State: newState(2, 11, t0)})
			want = slices.Insert(want, 2, store.ErrNotFound)
		}
		res, err := s.PutStates(ctx, tenantA, writes)
		check(t, fmt.Sprintf("PutStates(missing %v)", withMissing), err)
		if len(res) != len(writes) {
			t.Fatalf("PutStates: %d results for %d writes", len(res), len(writes))
		}
		for i, r := range res {
			id := writes[i].BatteryID
			switch {
			case want[i] == nil && r.Err != nil:
				t.Errorf("PutStates(missing %v) write %d (%s): %v; want success", withMissing, i, id, r.Err)
			case want[i] != nil && !errors.Is(r.Err, want[i]):
				t.Errorf("PutStates(missing %v) write %d (%s): %v; want %v", withMissing, i, id, r.Err, want[i])
			case want[i] == nil:
				st, err := s.GetState(ctx, tenantA, id)
				check(t, "GetState "+id, err)
				if st.Version != r.Version || counter(t, st) != 2 {
					t.Errorf("%s after PutStates: version %d, counter %d; want %d, 2", id, st.Version, counter(t, st), r.Version)
				}
				versions[id] = r.Version
			}
		}
		for _, id := range []string{"b", "d", "e"} {
			st, err := s.GetState(ctx, tenantA, id)
			check(t, "GetState "+id, err)
			if st.Version != versions[id] || counter(t, st) != 1 {
				t.Errorf("%s after its refused write: version %d, counter %d; want unchanged %d, 1", id, st.Version, counter(t, st), versions[id])
			}
		}
		// Next round: a and c move on from their new versions, c now has a state.
		if !withMissing {
			for _, id := range []string{"a", "c"} {
				check(t, "PutState(reset) "+id, ignore(s.PutState(ctx, tenantA, id, versions[id], newState(1, 11, t0.Add(time.Second)))))
				st, _ := s.GetState(ctx, tenantA, id)
				versions[id] = st.Version
			}
		}
	}

	// Two writes to one battery expecting the same version: the first in the batch wins.
	res, err := s.PutStates(ctx, tenantA, []store.StateWrite{
		{BatteryID: "a", ExpectedVersion: versions["a"], State: newState(7, 20, t0.Add(time.Minute))},
		{BatteryID: "a", ExpectedVersion: versions["a"], State: newState(8, 20, t0.Add(time.Minute))},
	})
	check(t, "PutStates(duplicate)", err)
	if res[0].Err != nil || !errors.Is(res[1].Err, store.ErrConflict) {
		t.Errorf("PutStates(duplicate) = %v, %v; want success then ErrConflict", res[0].Err, res[1].Err)
	}

	if res, err := s.PutStates(ctx, tenantA, nil); err != nil || len(res) != 0 {
		t.Errorf("PutStates(nil) = %v, %v; want no results, nil", res, err)
	}
	_, err = s.PutStates(ctx, tenantA, make([]store.StateWrite, store.MaxStateBatch+1))
	wantErr(t, "PutStates(too many)", err, store.ErrInvalidArgument)
	res, err = s.PutStates(ctx, tenantB, []store.StateWrite{{BatteryID: "a", ExpectedVersion: versions["a"], State: newState(9, 30, t0)}})
	if err != nil || !errors.Is(res[0].Err, store.ErrNotFound) {
		t.Errorf("PutStates(other tenant) = %v, %v; want ErrNotFound for the write", res, err)
	}

	// Concurrent batches over the same batteries, in opposite orders, retrying the
	// writes that conflict: no deadlock, no lost increment.
	ids := []string{"p", "q", "r", "s"}
	for _, id := range ids {
		check(t, "CreateBattery "+id, ignore(s.CreateBattery(ctx, tenantA, newBattery(id, builtinType), "")))
		check(t, "PutState "+id, ignore(s.PutState(ctx, tenantA, id, store.AnyVersion, newState(0, 0, time.Time{}))))
	}
	const rounds = 8
	var wg sync.WaitGroup
	errs := make(chan error, 2)
	for w := range 2 {
		order := slices.Clone(ids)
		if w == 1 {
			slices.Reverse(order)
		}
		wg.Go(func() {
			for range rounds {
				todo := slices.Clone(order)
				for len(todo) > 0 {
					writes := make([]store.StateWrite, len(todo))
					for i, id := range todo {
						st, err := s.GetState(ctx, tenantA, id)
						if err != nil {
							errs <- err
							return
						}
						n := counter(t, st) + 1
						writes[i] = store.StateWrite{BatteryID: id, ExpectedVersion: st.Version, State: newState(n, int64(n), t0.Add(time.Duration(n)*time.Second))}
					}
					res, err := s.PutStates(ctx, tenantA, writes)
					if err != nil {
						errs <- err
						return
					}
					var again []string
					for i, r := range res {
						switch {
						case errors.Is(r.Err, store.ErrConflict):
							again = append(again, todo[i])
						case r.Err != nil:
							errs <- r.Err
							return
						}
					}
					todo = again
				}
			}
		})
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Errorf("concurrent PutStates: %v", err)
	}
	for _, id := range ids {
		st, err := s.GetState(ctx, tenantA, id)
		check(t, "GetState "+id, err)
		if n := counter(t, st); n != 2*rounds {
			t.Errorf("%s after concurrent batches: counter %d; want %d", id, n, 2*rounds)
		}
	}
}
