// Package demo loads an invented demo fleet into a running voltcast server and
// replays invented telemetry for it, so that a newcomer sees state-of-charge
// estimates and forecasts through the API as soon as the server starts
// (voltcastd --demo).
//
// # Scenario
//
// Three invented organisations share the fleet (the names are ours; any likeness to a
// real business is accidental):
//
//   - Vellum Street Couriers, a courier cooperative: four cargo e-bikes on 13s4p
//     packs of the generic NMC cell, ridden stop-and-go in two shifts on weekdays and
//     one on Saturday, charged CC-CV every evening, two of them topped up at lunch;
//   - Saltgrain Bakery: a 12 V VRLA block (6s4p of the generic 2 V cell) on
//     bulk/absorption/float and a 12.8 V LFP pack (4s8p) on a gentle standby charge,
//     both carrying the freezers and the till through an occasional mains outage and a
//     weekly self-test;
//   - Cobblefield Survey: a GNSS rover and a laser level on 4 × AA NiMH, used in the
//     field Monday to Thursday and charged at the office in the evening.
//
// The packs' true capacity and resistance differ a little from new, so the server
// has something to find out. This data is for demonstrations only: it is generated
// by the project's own model, so it can never serve as a test oracle.
//
// # How it runs
//
// [Run] talks to the server like any client, over gRPC: it registers the batteries
// (idempotently: existing ones are reused), then replays their telemetry through
// TelemetryService.IngestTelemetry, the same path a telematics pipeline uses. The
// voltages come from the model itself (the pack's equivalent circuit stepped with
// sim.Circuit under the invented currents) plus a little seeded sensor noise.
//
// The replay starts [Options.History] before the fleet was first registered (times
// of day are UTC) and runs [Options.Speedup] times faster than the wall clock until
// it catches up with the present, then in step with it. Sample times are real
// instants and sequence numbers default to them, so the ingest is idempotent. The
// generated history is repeatable: after a restart the replay regenerates it from the
// start without sending, up to each battery's last applied sample, and carries on.
//
// Run stops when its context ends, between two batches.
package demo

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"slices"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

// Options configure [Run]. Address and Logger are required; a zero field of the rest
// takes the default written beside it.
type Options struct {
	// Address is the server's gRPC address (host:port), reached without TLS.
	Address string
	// HTTPAddress is the REST gateway's address, used only in the hint logged once
	// the fleet is loaded; empty means no hint.
	HTTPAddress string
	Logger      *slog.Logger
	// Speedup is how many seconds of the replay pass per second of wall-clock time
	// while it catches up with the present (default 600: a day in 2.4 minutes).
	Speedup float64
	// Tick is the wall-clock time between two ingest batches (default 1 s).
	Tick time.Duration
	// History is how far before the fleet's registration the replay starts
	// (default 48 h).
	History time.Duration
	// SampleInterval is the time between two samples of a battery (default 10 s).
	SampleInterval time.Duration
	// MaxBatchBlocks and MaxBatchSamples bound each IngestTelemetry call; set them to
	// the server's limits when those are lower than the defaults (1000 blocks, 5000
	// samples).
	MaxBatchBlocks  int
	MaxBatchSamples int
	// Seed selects the invented history (default 1).
	Seed uint64
	// Now returns the wall-clock time; nil means time.Now.
	Now func() time.Time
}

func (o Options) withDefaults() Options {
	if o.Speedup <= 0 {
		o.Speedup = 600
	}
	if o.Tick <= 0 {
		o.Tick = time.Second
	}
	if o.History <= 0 {
		o.History = 48 * time.Hour
	}
	if o.SampleInterval <= 0 {
		o.SampleInterval = 10 * time.Second
	}
	if o.MaxBatchBlocks <= 0 {
		o.MaxBatchBlocks = 1000
	}
	if o.MaxBatchSamples <= 0 || o.MaxBatchSamples > 5000 {
		o.MaxBatchSamples = 5000
	}
	if o.Seed == 0 {
		o.Seed = 1
	}
	if o.Now == nil {
		o.Now = time.Now
	}
	return o
}

// Run registers the demo fleet on the server at opts.Address and replays its
// telemetry until ctx ends. It returns nil when ctx ends, and an error when the fleet
// cannot be registered.
func Run(ctx context.Context, opts Options) error {
	if opts.Address == "" || opts.Logger == nil {
		return errors.New("demo: an address and a logger are required")
	}
	opts = opts.withDefaults()
	log := opts.Logger
	conn, err := grpc.NewClient(opts.Address, grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		return fmt.Errorf("demo: connecting to %s: %w", opts.Address, err)
	}
	defer conn.Close()
	r := &replay{opts: opts, log: log, bats: pb.NewBatteryServiceClient(conn), tel: pb.NewTelemetryServiceClient(conn)}
	if err := r.register(ctx); err != nil {
		if ctx.Err() != nil {
			return nil
		}
		return err
	}
	r.loop(ctx)
	return nil
}

// replay is the state of one Run.
type replay struct {
	opts  Options
	log   *slog.Logger
	bats  pb.BatteryServiceClient
	tel   pb.TelemetryServiceClient
	epoch time.Time
	units []*unit
	// pending holds each unit's generated samples not yet acknowledged by the server.
	pending [][]sample
	// gone marks the units whose battery was deleted while the demo ran.
	gone []bool
}

// register creates the fleet's batteries (or finds them from an earlier run), fixes
// the epoch, and fast-forwards each battery's history to its last applied sample.
func (r *replay) register(ctx context.Context) error {
	specs := fleet()
	var (
		created time.Time
		states  = make([]*pb.BatteryState, len(specs))
		skip    = make([]bool, len(specs))
	)
	for k, s := range specs {
		b, err := r.ensure(ctx, s)
		if err != nil {
			if st, ok := status.FromError(err); ok && st.Code() == codes.FailedPrecondition {
				r.log.Warn("demo: skipping a battery that exists with another shape", "battery", "batteries/"+s.id, "error", st.Message())
				skip[k] = true
				continue
			}
			return err
		}
		if ct := b.GetCreateTime().AsTime(); created.IsZero() || ct.Before(created) {
			created = ct
		}
		states[k] = b.GetState()
	}
	r.epoch = created.Add(-r.opts.History).UTC().Truncate(time.Minute)
	for k, s := range specs {
		if skip[k] {
			continue
		}
		u, err := newUnit(s, k, r.opts.Seed, r.epoch)
		if err != nil {
			return err
		}
		// Regenerate what the server already has, without sending it.
		if st := states[k]; st.GetInitialized() && st.GetLastSampleTime() != nil {
			last := st.GetLastSampleTime().AsTime().Sub(r.epoch).Seconds()
			dt := r.opts.SampleInterval.Seconds()
			for u.t+dt <= last {
				u.step(dt)
			}
		}
		r.units = append(r.units, u)
	}
	r.pending = make([][]sample, len(r.units))
	r.gone = make([]bool, len(r.units))
	r.log.Info("demo fleet registered", "batteries", len(r.units), "replay_start", r.epoch.Format(time.RFC3339),
		"speedup", r.opts.Speedup)
	if r.opts.HTTPAddress != "" {
		base := "http://" + r.opts.HTTPAddress
		r.log.Info("demo: try the REST API",
			"list", "curl -s "+base+"/v1/batteries",
			"forecast", "curl -s -X POST "+base+"/v1/batteries/vellum-cargo-01:forecastRuntime -d '{\"load\":{\"powerWatts\":350}}'")
	}
	return nil
}

// ensure creates the battery of s, or returns the existing one when its type and cell
// counts match (FAILED_PRECONDITION when they do not).
func (r *replay) ensure(ctx context.Context, s spec) (*pb.Battery, error) {
	want := &pb.Battery{
		DisplayName:   s.displayName,
		BatteryType:   "batteryTypes/" + s.typeName,
		SeriesCount:   int32(s.series),
		ParallelCount: int32(s.parallel),
		Labels:        s.labels,
	}
	resp, err := r.bats.CreateBattery(ctx, &pb.CreateBatteryRequest{BatteryId: s.id, Battery: want}, grpc.WaitForReady(true))
	if err == nil {
		return resp.GetBattery(), nil
	}
	if status.Code(err) != codes.AlreadyExists {
		return nil, fmt.Errorf("demo: creating batteries/%s: %w", s.id, err)
	}
	got, err := r.bats.GetBattery(ctx, &pb.GetBatteryRequest{Name: "batteries/" + s.id}, grpc.WaitForReady(true))
	if err != nil {
		return nil, fmt.Errorf("demo: reading batteries/%s: %w", s.id, err)
	}
	b := got.GetBattery()
	if b.GetBatteryType() != want.GetBatteryType() || b.GetSeriesCount() != want.GetSeriesCount() || b.GetParallelCount() != want.GetParallelCount() {
		return nil, status.Errorf(codes.FailedPrecondition, "it is a %ds%dp %s, the demo needs a %ds%dp %s",
			b.GetSeriesCount(), b.GetParallelCount(), b.GetBatteryType(), s.series, s.parallel, want.GetBatteryType())
	}
	return b, nil
}

// loop generates and sends a batch every tick until ctx ends.
func (r *replay) loop(ctx context.Context) {
	tick := time.NewTicker(r.opts.Tick)
	defer tick.Stop()
	if len(r.units) == 0 {
		<-ctx.Done()
		return
	}
	dt := r.opts.SampleInterval.Seconds()
	simT := r.units[0].t
	for _, u := range r.units {
		simT = min(simT, u.t)
	}
	caughtUp := false
	for {
		// Advance the replay clock: Speedup times the tick, but never past now.
		now := r.opts.Now().Sub(r.epoch).Seconds()
		next := simT + r.opts.Speedup*r.opts.Tick.Seconds()
		if next >= now {
			next = now
			if !caughtUp {
				caughtUp = true
				r.log.Info("demo replay caught up with the present; continuing in real time")
			}
		}
		simT = max(simT, next)
		for k, u := range r.units {
			if r.gone[k] {
				continue
			}
			// Bound what piles up while the server does not answer (a day of samples).
			for u.t+dt <= simT && len(r.pending[k]) < 86400/int(dt)+1 {
				r.pending[k] = append(r.pending[k], u.step(dt))
			}
			for u.t+dt <= simT { // dropped: the estimator sees a gap
				u.step(dt)
			}
		}
		r.send(ctx)
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
		}
	}
}

// send ingests the pending samples in calls of at most Options.MaxBatchSamples
// samples and Options.MaxBatchBlocks blocks, one block per battery. Samples stay
// pending when their call fails, and are dropped once the server has answered for
// them. A battery deleted meanwhile leaves the replay.
func (r *replay) send(ctx context.Context) {
	for {
		req := &pb.IngestTelemetryRequest{}
		var idx, counts []int
		room := r.opts.MaxBatchSamples
		for k, u := range r.units {
			if len(req.Blocks) == r.opts.MaxBatchBlocks {
				break
			}
			if r.gone[k] {
				continue
			}
			n := min(len(r.pending[k]), room)
			if n == 0 {
				continue
			}
			req.Blocks = append(req.Blocks, r.block(u, r.pending[k][:n]))
			idx, counts = append(idx, k), append(counts, n)
			room -= n
		}
		if len(req.Blocks) == 0 {
			return
		}
		resp, err := r.tel.IngestTelemetry(ctx, req)
		if err != nil {
			if ctx.Err() == nil {
				r.log.Warn("demo: ingest failed; retrying next tick", "error", status.Convert(err).Message())
			}
			return
		}
		if len(resp.GetResults()) != len(idx) {
			r.log.Warn("demo: the server answered a different number of blocks; retrying next tick",
				"sent", len(idx), "answered", len(resp.GetResults()))
			return
		}
		for j, res := range resp.GetResults() {
			k := idx[j]
			r.pending[k] = slices.Delete(r.pending[k], 0, counts[j])
			switch {
			case res.GetError().GetCode() == "NOT_FOUND":
				r.log.Info("demo: battery deleted; it leaves the replay", "battery", res.GetBattery())
				r.gone[k], r.pending[k] = true, nil
			case res.GetError() != nil:
				r.log.Warn("demo: block refused", "battery", res.GetBattery(), "reason", res.GetError().GetReason(), "error", res.GetError().GetMessage())
			case res.GetRejectedCount() > 0:
				first := res.GetRejections()[0]
				r.log.Warn("demo: samples rejected", "battery", res.GetBattery(), "rejected", res.GetRejectedCount(),
					"first_reason", first.GetReason().String(), "first_message", first.GetMessage())
			}
			r.log.Debug("demo: ingested", "battery", res.GetBattery(), "applied", res.GetAppliedCount(),
				"duplicate", res.GetDuplicateCount(), "state_of_charge", res.GetState().GetStateOfCharge())
		}
		if ctx.Err() != nil {
			return
		}
	}
}

// block packs samples of u into a SampleBlock. Sequence numbers are left to the
// server (the sample time in microseconds), which makes a resend harmless.
func (r *replay) block(u *unit, ss []sample) *pb.SampleBlock {
	base := ss[0].t
	b := &pb.SampleBlock{
		Battery:            "batteries/" + u.spec.id,
		BaseTime:           timestamppb.New(r.epoch.Add(time.Duration(base * float64(time.Second)))),
		TimeOffsetsSeconds: make([]float64, len(ss)),
		CurrentAmps:        make([]float64, len(ss)),
		VoltageVolts:       make([]float64, len(ss)),
		TemperatureCelsius: make([]float64, len(ss)),
	}
	for i, s := range ss {
		b.TimeOffsetsSeconds[i] = s.t - base
		b.CurrentAmps[i] = s.amps
		b.VoltageVolts[i] = s.volts
		b.TemperatureCelsius[i] = s.celsius
	}
	return b
}
