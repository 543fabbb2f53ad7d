package storetest

import (
	"errors"
	"fmt"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// benchState returns a state whose estimator blob is about 1 KiB of JSON, the size of
// an extended Kalman filter's state with a few RC branches and its covariance.
func benchState(n int) store.State {
	st := newState(n, int64(n), t0.Add(time.Duration(n)*time.Second))
	st.Estimator = fmt.Appendf(nil, `{"n": %d, "p": [%s]}`, n, strings.TrimSuffix(strings.Repeat("0.0012345678901234, ", 50), ", "))
	return st
}

// PutStateBench measures [store.States.PutState] compare-and-swap writes and reports
// ops/s:
//
//   - serial: one writer, one battery, each write expecting the previous version;
//   - parallel: several writers, each on its own battery (replicas that route each
//     battery to one owner);
//   - contended: several writers on one battery, re-reading and retrying on conflict
//     (no routing at all); ops are successful writes, conflicts/op the retries;
//   - batch-100: PutStates of 100 batteries per call, as a flush does; ops are
//     writes (so ns/op is per write, not per call).
func PutStateBench(b *testing.B, open Opener) {
	b.Run("serial", func(b *testing.B) {
		s := open(b)
		ctx := b.Context()
		check(b, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery("bench", builtinType), "")))
		v := store.AnyVersion
		n := 0
		b.ReportAllocs()
		for b.Loop() {
			n++
			nv, err := s.PutState(ctx, tenantA, "bench", v, benchState(n))
			if err != nil {
				b.Fatal(err)
			}
			v = nv
		}
		b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "ops/s")
	})
	b.Run("parallel", func(b *testing.B) {
		s := open(b)
		ctx := b.Context()
		const batteries = 64
		for i := range batteries {
			check(b, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery(fmt.Sprintf("bench-%d", i), builtinType), "")))
		}
		var next atomic.Int64
		b.SetParallelism(4)
		b.ReportAllocs()
		b.ResetTimer()
		b.RunParallel(func(pb *testing.PB) {
			id := fmt.Sprintf("bench-%d", next.Add(1)-1)
			if next.Load() > batteries {
				panic("storetest: more parallel writers than batteries")
			}
			v := store.AnyVersion
			for n := 1; pb.Next(); n++ {
				nv, err := s.PutState(ctx, tenantA, id, v, benchState(n))
				if err != nil {
					b.Error(err)
					return
				}
				v = nv
			}
		})
		b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "ops/s")
	})
	b.Run("contended", func(b *testing.B) {
		s := open(b)
		ctx := b.Context()
		check(b, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery("bench", builtinType), "")))
		check(b, "PutState", ignore(s.PutState(ctx, tenantA, "bench", store.AnyVersion, benchState(0))))
		var conflicts atomic.Int64
		b.SetParallelism(4)
		b.ReportAllocs()
		b.ResetTimer()
		b.RunParallel(func(pb *testing.PB) {
			for pb.Next() {
				for {
					st, err := s.GetState(ctx, tenantA, "bench")
					if err != nil {
						b.Error(err)
						return
					}
					n := int(st.Watermark.Sequence) + 1
					_, err = s.PutState(ctx, tenantA, "bench", st.Version, benchState(n))
					if err == nil {
						break
					}
					if !errors.Is(err, store.ErrConflict) {
						b.Error(err)
						return
					}
					conflicts.Add(1)
				}
			}
		})
		b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "ops/s")
		b.ReportMetric(float64(conflicts.Load())/float64(b.N), "conflicts/op")
	})
	b.Run("batch-100", func(b *testing.B) {
		s := open(b)
		ctx := b.Context()
		const size = 100
		writes := make([]store.StateWrite, size)
		for i := range writes {
			id := fmt.Sprintf("bench-%d", i)
			check(b, "CreateBattery", ignore(s.CreateBattery(ctx, tenantA, newBattery(id, builtinType), "")))
			writes[i].BatteryID = id
		}
		n := 0
		b.ReportAllocs()
		for b.Loop() {
			n++
			for i := range writes {
				writes[i].State = benchState(n)
			}
			res, err := s.PutStates(ctx, tenantA, writes)
			if err != nil {
				b.Fatal(err)
			}
			for i, r := range res {
				if r.Err != nil {
					b.Fatal(r.Err)
				}
				writes[i].ExpectedVersion = r.Version
			}
		}
		b.ReportMetric(float64(b.N*size)/b.Elapsed().Seconds(), "ops/s")
		b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(b.N*size), "ns/write")
	})
}
