package demo_test

import (
	"context"
	"log/slog"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service"
	"github.com/voltcast/voltcast/service/demo"
	"github.com/voltcast/voltcast/service/servicetest"
)

// warnings is a slog handler that writes to the test log and keeps every record at
// warning level or above.
type warnings struct {
	slog.Handler
	mu   *sync.Mutex
	msgs *[]string
}

func (w warnings) Handle(ctx context.Context, r slog.Record) error {
	if r.Level >= slog.LevelWarn {
		w.mu.Lock()
		msg := r.Message
		r.Attrs(func(a slog.Attr) bool { msg += " " + a.String(); return true })
		*w.msgs = append(*w.msgs, msg)
		w.mu.Unlock()
	}
	return w.Handler.Handle(ctx, r)
}

func (w warnings) WithAttrs(as []slog.Attr) slog.Handler {
	return warnings{w.Handler.WithAttrs(as), w.mu, w.msgs}
}

func (w warnings) WithGroup(name string) slog.Handler {
	return warnings{w.Handler.WithGroup(name), w.mu, w.msgs}
}

func (w warnings) list() []string {
	w.mu.Lock()
	defer w.mu.Unlock()
	return append([]string(nil), *w.msgs...)
}

// startServer runs the real gRPC server on a loopback port with the embedded store in
// a temporary directory, and returns its address and a client of it.
func startServer(t *testing.T, log *slog.Logger) (string, pb.BatteryServiceClient) {
	t.Helper()
	srv := servicetest.Start(t, servicetest.SQLite(t), service.Options{Logger: log})
	return srv.Addr, pb.NewBatteryServiceClient(srv.Conn)
}

func listAll(t *testing.T, c pb.BatteryServiceClient) []*pb.Battery {
	t.Helper()
	resp, err := c.ListBatteries(context.Background(), &pb.ListBatteriesRequest{PageSize: 1000})
	if err != nil {
		t.Fatalf("ListBatteries: %v", err)
	}
	return resp.GetBatteries()
}

// waitFor polls the batteries until ok accepts them, or fails the test after a while.
func waitFor(t *testing.T, c pb.BatteryServiceClient, what string, ok func([]*pb.Battery) bool) []*pb.Battery {
	t.Helper()
	deadline := time.Now().Add(60 * time.Second)
	for {
		bs := listAll(t, c)
		if ok(bs) {
			return bs
		}
		if time.Now().After(deadline) {
			for _, b := range bs {
				t.Logf("%s: %v", b.GetName(), b.GetState())
			}
			t.Fatalf("timed out waiting for %s", what)
		}
		time.Sleep(20 * time.Millisecond)
	}
}

// TestRunReplaysAndRestarts runs the demo against an in-process server: the fleet
// appears, every battery's tracked state fills in up to the demo's clock, the replay
// stops cleanly when its context ends, a second run on the same store reuses the
// batteries and carries on from where the server is, with nothing refused or
// rejected, and a battery deleted meanwhile leaves the replay.
func TestRunReplaysAndRestarts(t *testing.T) {
	var (
		mu   sync.Mutex
		msgs []string
	)
	logs := warnings{slog.NewTextHandler(t.Output(), &slog.HandlerOptions{Level: slog.LevelInfo}), &mu, &msgs}
	log := slog.New(logs)
	addr, bats := startServer(t, log)

	// The demo's clock stands still at t0 (then at t0 + 30 min), so the replay
	// catches up with it and stops generating: the end state is known exactly.
	t0 := time.Now()
	var now atomic.Pointer[time.Time]
	now.Store(&t0)
	opts := demo.Options{
		Address: addr, Logger: log,
		Speedup: 200000, Tick: 10 * time.Millisecond, History: 90 * time.Minute,
		// Small calls, as a server with low limits needs: several per tick.
		MaxBatchBlocks: 3, MaxBatchSamples: 700,
		Now: func() time.Time { return *now.Load() },
	}
	run := func() (stop func()) {
		ctx, cancel := context.WithCancel(context.Background())
		done := make(chan error, 1)
		go func() { done <- demo.Run(ctx, opts) }()
		return func() {
			cancel()
			select {
			case err := <-done:
				if err != nil {
					t.Errorf("Run() = %v after cancel; want nil", err)
				}
			case <-time.After(10 * time.Second):
				t.Fatal("Run did not return after its context ended")
			}
		}
	}
	// lastGrid is the time of the last 10 s sample at or before the clock, counted
	// from the epoch (90 minutes before creation, truncated to the minute).
	var epoch time.Time
	lastGrid := func(clock time.Time) time.Time {
		return epoch.Add(clock.Sub(epoch).Truncate(10 * time.Second))
	}
	caughtUp := func(clock time.Time) func([]*pb.Battery) bool {
		return func(bs []*pb.Battery) bool {
			if len(bs) == 0 {
				return false
			}
			first := bs[0].GetCreateTime().AsTime()
			for _, b := range bs {
				if ct := b.GetCreateTime().AsTime(); ct.Before(first) {
					first = ct
				}
			}
			epoch = first.Add(-90 * time.Minute).UTC().Truncate(time.Minute)
			want := lastGrid(clock)
			for _, b := range bs {
				if !b.GetState().GetLastSampleTime().AsTime().Equal(want) {
					return false
				}
			}
			return true
		}
	}

	stop := run()
	bs := waitFor(t, bats, "the replay to catch up", caughtUp(t0))
	stop()
	if len(bs) != 8 {
		t.Fatalf("demo fleet has %d batteries; want 8", len(bs))
	}
	first := map[string]int64{}
	for _, b := range bs {
		s := b.GetState()
		if !s.GetInitialized() || s.GetStateOfCharge() < 0 || s.GetStateOfCharge() > 1 || s.GetStateOfChargeStddev() <= 0 || s.GetVoltageVolts() <= 0 {
			t.Errorf("%s: state %v; want an initialised estimate", b.GetName(), s)
		}
		// Sequence numbers default to the sample time in microseconds.
		if got, want := s.GetAppliedSequenceNumber(), lastGrid(t0).UnixMicro(); got != want {
			t.Errorf("%s: applied watermark %d; want %d (the last sample's time)", b.GetName(), got, want)
		}
		if b.GetLabels()["demo"] != "true" {
			t.Errorf("%s: labels %v; want demo=true", b.GetName(), b.GetLabels())
		}
		first[b.GetName()] = s.GetAppliedSequenceNumber()
	}

	// Restart with the clock 30 minutes on: the same batteries, 180 new samples each.
	t1 := t0.Add(30 * time.Minute)
	now.Store(&t1)
	stop = run()
	bs = waitFor(t, bats, "the second replay to catch up", caughtUp(t1))
	if len(bs) != 8 {
		t.Errorf("after a restart the fleet has %d batteries; want 8", len(bs))
	}
	for _, b := range bs {
		if got := b.GetState().GetAppliedSequenceNumber(); got != lastGrid(t1).UnixMicro() || got <= first[b.GetName()] {
			t.Errorf("%s: applied watermark %d after the restart; want %d", b.GetName(), got, lastGrid(t1).UnixMicro())
		}
	}

	// A battery deleted while the replay runs leaves it; the others carry on.
	const deleted = "batteries/vellum-cargo-02"
	if _, err := bats.DeleteBattery(context.Background(), &pb.DeleteBatteryRequest{Name: deleted}); err != nil {
		t.Fatalf("DeleteBattery: %v", err)
	}
	t2 := t1.Add(10 * time.Minute)
	now.Store(&t2)
	bs = waitFor(t, bats, "the replay to carry on without the deleted battery", caughtUp(t2))
	stop()
	if len(bs) != 7 {
		t.Errorf("after a delete the fleet has %d batteries; want 7", len(bs))
	}
	for _, b := range bs {
		if b.GetName() == deleted {
			t.Errorf("%s came back after it was deleted", deleted)
		}
	}
	if w := logs.list(); len(w) > 0 {
		t.Errorf("the demo logged %d warnings; want none:\n%v", len(w), w)
	}
}
