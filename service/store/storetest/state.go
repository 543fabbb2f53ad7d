package storetest

import (
	"bytes"
	"errors"
	"fmt"
	"sync"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// sameState reports whether the stored state got holds what put wrote (times
// truncated to microseconds).
func sameState(got, put store.State) bool {
	return bytes.Equal(got.Estimator, put.Estimator) && got.Summary == put.Summary &&
		got.Watermark.Sequence == put.Watermark.Sequence &&
		got.Watermark.Time.Equal(put.Watermark.Time.Truncate(time.Microsecond))
}

// StateTest checks the compare-and-swap of [store.States.PutState].
func StateTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	check(t, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "")))

	_, err := s.GetState(ctx, tenantA, "bike-1")
	wantErr(t, "GetState(none yet)", err, store.ErrNotFound)

	before := time.Now()
	st1 := newState(1, 10, t0)
	v1, err := s.PutState(ctx, tenantA, "bike-1", store.AnyVersion, st1)
	check(t, "PutState(first)", err)
	after := time.Now()
	got, err := s.GetState(ctx, tenantA, "bike-1")
	check(t, "GetState", err)
	if !sameState(got, st1) || got.Version != v1 || v1 <= 0 {
		t.Errorf("GetState = %+v; want %+v at version %d > 0", got, st1, v1)
	}
	between(t, "state UpdateTime", got.UpdateTime, before, after)
	if got.Watermark.Time.Location() != time.UTC || got.Watermark.Time.Nanosecond()%1000 != 0 {
		t.Errorf("watermark time %v; want UTC at microsecond resolution", got.Watermark.Time)
	}

	// A second "first" write conflicts: a state exists.
	_, err = s.PutState(ctx, tenantA, "bike-1", store.AnyVersion, newState(99, 10, t0))
	wantErr(t, "PutState(AnyVersion over existing)", err, store.ErrConflict)

	st2 := newState(2, 11, t0.Add(time.Second))
	v2, err := s.PutState(ctx, tenantA, "bike-1", v1, st2)
	check(t, "PutState(v1)", err)
	if v2 <= v1 {
		t.Errorf("PutState: version %d after %d; want larger", v2, v1)
	}
	// The same expected version again is stale now.
	_, err = s.PutState(ctx, tenantA, "bike-1", v1, newState(99, 12, t0.Add(2*time.Second)))
	wantErr(t, "PutState(stale v1)", err, store.ErrConflict)
	_, err = s.PutState(ctx, tenantA, "bike-1", v2+1000, newState(99, 12, t0.Add(2*time.Second)))
	wantErr(t, "PutState(future version)", err, store.ErrConflict)
	got, err = s.GetState(ctx, tenantA, "bike-1")
	check(t, "GetState(after conflicts)", err)
	if !sameState(got, st2) || got.Version != v2 {
		t.Errorf("GetState after refused writes = %+v; want %+v at version %d", got, st2, v2)
	}

	// A battery that does not exist has no state to write.
	_, err = s.PutState(ctx, tenantA, "bike-404", store.AnyVersion, st1)
	wantErr(t, "PutState(missing battery, AnyVersion)", err, store.ErrNotFound)
	_, err = s.PutState(ctx, tenantA, "bike-404", v2, st1)
	wantErr(t, "PutState(missing battery, v2)", err, store.ErrNotFound)
	// A battery without state, written as if it had one, conflicts.
	check(t, "CreateBattery(bike-2)", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-2", builtinType), "")))
	_, err = s.PutState(ctx, tenantA, "bike-2", v2, st1)
	wantErr(t, "PutState(no state yet, v2)", err, store.ErrConflict)
}

// StateRaceTest starts several writers that all hold the same version and write at
// once: exactly one must win each round and the others get [store.ErrConflict], so
// no write is silently lost.
func StateRaceTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	check(t, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "")))
	version, err := s.PutState(ctx, tenantA, "bike-1", store.AnyVersion, newState(0, 0, t0))
	check(t, "PutState(initial)", err)

	const writers, rounds = 6, 10
	for round := range rounds {
		var (
			wg       sync.WaitGroup
			start    = make(chan struct{})
			versions [writers]int64
			errs     [writers]error
		)
		for w := range writers {
			wg.Go(func() {
				<-start
				st := newState(round*writers+w, int64(round+1), t0.Add(time.Duration(round+1)*time.Second))
				versions[w], errs[w] = s.PutState(ctx, tenantA, "bike-1", version, st)
			})
		}
		close(start)
		wg.Wait()
		winner := -1
		for w := range writers {
			switch {
			case errs[w] == nil && winner >= 0:
				t.Fatalf("round %d: writers %d and %d both won", round, winner, w)
			case errs[w] == nil:
				winner = w
			case !errors.Is(errs[w], store.ErrConflict):
				t.Fatalf("round %d: writer %d: %v; want nil or ErrConflict", round, w, errs[w])
			}
		}
		if winner < 0 {
			t.Fatalf("round %d: no writer won", round)
		}
		got, err := s.GetState(ctx, tenantA, "bike-1")
		check(t, "GetState", err)
		if got.Version != versions[winner] || counter(t, got) != round*writers+winner {
			t.Fatalf("round %d: stored version %d, counter %d; want the winner's %d, %d",
				round, got.Version, counter(t, got), versions[winner], round*writers+winner)
		}
		version = got.Version
	}
}

// ConcurrentWritersTest runs read-modify-write loops that retry on conflict, as
// replicas do: on a shared battery no increment may be lost, and writers on separate
// batteries never conflict with one another.
func ConcurrentWritersTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	const writers, increments = 4, 15
	ids := []string{"shared"}
	for w := range writers {
		ids = append(ids, fmt.Sprintf("own-%d", w))
	}
	for _, id := range ids {
		check(t, "CreateBattery "+id, ignore(s.CreateBattery(ctx, tenantA, newBattery(id, builtinType), "")))
		check(t, "PutState "+id, ignore(s.PutState(ctx, tenantA, id, store.AnyVersion, newState(0, 0, time.Time{}))))
	}
	increment := func(id string) (conflicts int, err error) {
		for {
			st, err := s.GetState(ctx, tenantA, id)
			if err != nil {
				return conflicts, err
			}
			n := counter(t, st)
			next := newState(n+1, st.Watermark.Sequence+1, t0.Add(time.Duration(n+1)*time.Millisecond))
			_, err = s.PutState(ctx, tenantA, id, st.Version, next)
			switch {
			case err == nil:
				return conflicts, nil
			case errors.Is(err, store.ErrConflict):
				conflicts++
			default:
				return conflicts, err
			}
		}
	}
	var (
		wg        sync.WaitGroup
		errs      = make(chan error, 2*writers*increments)
		ownErrors = make(chan string, writers)
	)
	for w := range writers {
		wg.Go(func() {
			for range increments {
				if _, err := increment("shared"); err != nil {
					errs <- err
				}
				conflicts, err := increment(ids[w+1])
				if err != nil {
					errs <- err
				}
				if conflicts > 0 {
					ownErrors <- fmt.Sprintf("writer %d: %d conflicts on its own battery", w, conflicts)
				}
			}
		})
	}
	wg.Wait()
	close(errs)
	close(ownErrors)
	for err := range errs {
		t.Errorf("increment: %v", err)
	}
	for msg := range ownErrors {
		t.Error(msg)
	}
	st, err := s.GetState(ctx, tenantA, "shared")
	check(t, "GetState(shared)", err)
	if n := counter(t, st); n != writers*increments || st.Watermark.Sequence != writers*increments {
		t.Errorf("shared counter %d, sequence %d after %d increments; want both %d (lost updates)",
			n, st.Watermark.Sequence, writers*increments, writers*increments)
	}
	for _, id := range ids[1:] {
		st, err := s.GetState(ctx, tenantA, id)
		check(t, "GetState "+id, err)
		if n := counter(t, st); n != increments {
			t.Errorf("%s counter %d; want %d", id, n, increments)
		}
	}
}

// WatermarksTest checks that the watermark stored with a state never moves back:
// such a write fails with [store.ErrInvalidArgument] and changes nothing, while an
// equal watermark is accepted (a flush without new samples).
func WatermarksTest(t *testing.T, open Opener) {
	s := open(t)
	ctx := t.Context()
	check(t, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery("bike-1", builtinType), "")))

	// No samples yet: sequence 0, zero time.
	v, err := s.PutState(ctx, tenantA, "bike-1", store.AnyVersion, newState(0, 0, time.Time{}))
	check(t, "PutState(initial)", err)
	got, err := s.GetState(ctx, tenantA, "bike-1")
	check(t, "GetState(initial)", err)
	if !got.Watermark.Time.IsZero() || got.Watermark.Sequence != 0 {
		t.Errorf("initial watermark %+v; want zero", got.Watermark)
	}
	v, err = s.PutState(ctx, tenantA, "bike-1", v, newState(1, 10, t0))
	check(t, "PutState(seq 10)", err)
	stored := newState(1, 10, t0)

	for _, tc := range []struct {
		name string
		seq  int64
		at   time.Time
	}{
		{"sequence back", 9, t0.Add(time.Second)},
		{"time back", 11, t0.Add(-time.Microsecond)},
		{"time unset again", 11, time.Time{}},
		{"both back", 1, t0.Add(-time.Hour)},
	} {
		_, err := s.PutState(ctx, tenantA, "bike-1", v, newState(2, tc.seq, tc.at))
		wantErr(t, "PutState("+tc.name+")", err, store.ErrInvalidArgument)
		got, err := s.GetState(ctx, tenantA, "bike-1")
		check(t, "GetState", err)
		if got.Version != v || !sameState(got, stored) {
			t.Errorf("after refused PutState(%s): %+v; want unchanged %+v at version %d", tc.name, got, stored, v)
		}
	}
	// Equal is fine; sub-microsecond differences are below the stored resolution.
	v, err = s.PutState(ctx, tenantA, "bike-1", v, newState(3, 10, t0.Add(-time.Nanosecond*time.Duration(t0.Nanosecond()%1000))))
	check(t, "PutState(same watermark)", err)
	_, err = s.PutState(ctx, tenantA, "bike-1", v, newState(4, 11, t0.Add(time.Minute)))
	check(t, "PutState(forward)", err)
	_, err = s.PutState(ctx, tenantA, "bike-1", v, newState(4, -1, t0.Add(time.Minute)))
	wantErr(t, "PutState(negative sequence)", err, store.ErrInvalidArgument)
}
