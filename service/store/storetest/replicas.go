package storetest

import (
	"errors"
	"fmt"
	"sync"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// PairOpener opens two stores on the same fresh database, as two replicas (or two
// processes) would, and arranges for both to be closed afterwards.
type PairOpener func(t testing.TB) (store.Store, store.Store)

// ReplicasTest checks two stores on one database: each sees the other's writes,
// accepts the other's page tokens, and their compare-and-swap writes to one battery
// never lose an update.
func ReplicasTest(t *testing.T, openPair PairOpener) {
	a, b := openPair(t)
	ctx := t.Context()
	for i := range 5 {
		check(t, "A: CreateBattery", ignore(a.CreateBattery(ctx, tenantA, newBattery(fmt.Sprintf("bike-%d", i), builtinType), "")))
	}
	if _, err := b.GetBattery(ctx, tenantA, "bike-3"); err != nil {
		t.Errorf("B: GetBattery of A's battery: %v", err)
	}
	page, token, err := a.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{Size: 2})
	check(t, "A: ListBatteries", err)
	rest, _, err := b.ListBatteries(ctx, tenantA, store.BatteryFilter{}, store.PageRequest{Size: 10, Token: token})
	check(t, "B: ListBatteries(A's token)", err)
	if len(page)+len(rest) != 5 {
		t.Errorf("A's first page %d + B's rest %d; want 5 in all", len(page), len(rest))
	}

	v, err := a.PutState(ctx, tenantA, "bike-0", store.AnyVersion, newState(0, 0, time.Time{}))
	check(t, "A: PutState", err)
	_, err = b.PutState(ctx, tenantA, "bike-0", store.AnyVersion, newState(0, 0, time.Time{}))
	wantErr(t, "B: PutState(AnyVersion over A's state)", err, store.ErrConflict)
	if _, err := b.PutState(ctx, tenantA, "bike-0", v, newState(1, 1, t0)); err != nil {
		t.Fatalf("B: PutState(A's version): %v", err)
	}
	_, err = a.PutState(ctx, tenantA, "bike-0", v, newState(1, 1, t0))
	wantErr(t, "A: PutState(stale after B wrote)", err, store.ErrConflict)

	// Increment from both replicas at once.
	const perWriter, writers = 10, 4
	var wg sync.WaitGroup
	errs := make(chan error, writers)
	for w := range writers {
		s := a
		if w%2 == 1 {
			s = b
		}
		wg.Go(func() {
			for range perWriter {
				for {
					st, err := s.GetState(ctx, tenantA, "bike-0")
					if err != nil {
						errs <- err
						return
					}
					n := counter(t, st)
					_, err = s.PutState(ctx, tenantA, "bike-0", st.Version, newState(n+1, int64(n+1), t0.Add(time.Duration(n+1)*time.Second)))
					if err == nil {
						break
					}
					if !errors.Is(err, store.ErrConflict) {
						errs <- err
						return
					}
				}
			}
		})
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Errorf("increment: %v", err)
	}
	for name, s := range map[string]store.Store{"A": a, "B": b} {
		st, err := s.GetState(ctx, tenantA, "bike-0")
		check(t, name+": GetState", err)
		if n := counter(t, st); n != 1+writers*perWriter {
			t.Errorf("%s: counter %d after increments from both replicas; want %d", name, n, 1+writers*perWriter)
		}
	}
}
