package service

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sync"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/estimate"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service/store"
)

// The tracker keeps the estimator of every active battery in memory and persists it
// write-behind: after PersistEverySamples applied samples, when PersistInterval has
// passed (checked after each block and by [Service.Run]'s ticker), when a stream
// closes, and on shutdown ([Service.Flush]). A crash loses at most the samples above
// the durable watermark, which every reply reports; a pipeline that resends from the
// durable watermark loses nothing.
//
// Writes are compare-and-swap on the state's version: when another replica wrote the
// battery's state in between, the write fails with ErrConflict, the in-memory entry is
// dropped, and the next block reloads the state from the store (the caller gets
// ABORTED and resends from the durable watermark).

// estimatorSettings are the estimator settings of every tracked battery: the package
// defaults, with the slow state-of-health states on so that capacity and resistance
// relative to new are tracked.
var estimatorSettings = estimate.Settings{Health: true}

// savedState is the JSON the service stores as a battery's estimator state.
type savedState struct {
	// Initialized says whether the estimate has been initialised (from a given state
	// of charge or a first voltage).
	Initialized bool           `json:"initialized"`
	Filter      estimate.State `json:"filter"`
	// EquivalentCycles is the discharged charge so far over the rated capacity.
	EquivalentCycles float64 `json:"equivalent_cycles"`
	// Last sample, pack values.
	LastCurrentAmps   float64 `json:"last_current_amps"`
	LastVoltageVolts  float64 `json:"last_voltage_volts"`
	LastTemperatureC  float64 `json:"last_temperature_celsius"`
	LastSampleUnixSec float64 `json:"last_sample_unix_seconds"`
}

// entry is one tracked battery. Its mutex serialises the blocks of the battery.
type entry struct {
	mu   sync.Mutex
	id   string
	pack cell.Pack
	ekf  *estimate.EKF
	st   savedState // everything but Filter, which lives in ekf

	version     int64           // version of the stored state; AnyVersion if none
	applied     store.Watermark // last applied sample
	durable     store.Watermark // last persisted sample
	pending     int             // samples applied since the last persist
	lastPersist time.Time
	gone        bool // dropped from the tracker; reload before use
}

type tracker struct {
	mu      sync.Mutex
	entries map[string]*entry // by battery id (one tenant for now)
}

// forget drops a battery's in-memory state (on delete).
func (s *Service) forget(id string) {
	s.tr.mu.Lock()
	defer s.tr.mu.Unlock()
	if e, ok := s.tr.entries[id]; ok {
		e.gone = true
		delete(s.tr.entries, id)
		s.metrics.activeBatteries.Add(context.Background(), -1)
	}
}

// acquire returns the battery's entry, loaded from the store if needed, locked. The
// caller must unlock it.
func (s *Service) acquire(ctx context.Context, id string) (*entry, error) {
	for {
		s.tr.mu.Lock()
		e, ok := s.tr.entries[id]
		s.tr.mu.Unlock()
		if !ok {
			var err error
			if e, err = s.load(ctx, id); err != nil {
				return nil, err
			}
			s.tr.mu.Lock()
			if prev, ok := s.tr.entries[id]; ok {
				e = prev // another goroutine loaded it first
			} else {
				s.tr.entries[id] = e
				s.metrics.activeBatteries.Add(ctx, 1)
			}
			s.tr.mu.Unlock()
		}
		e.mu.Lock()
		if !e.gone {
			return e, nil
		}
		e.mu.Unlock()
	}
}

// load builds an entry from the stored battery and state.
func (s *Service) load(ctx context.Context, id string) (*entry, error) {
	b, err := s.getBattery(ctx, id)
	if err != nil {
		return nil, err
	}
	t, err := s.lookupType(ctx, "battery", batteryTypeName(b.TypeName))
	if err != nil {
		return nil, fmt.Errorf("battery %s: loading its type: %w", id, err)
	}
	pack, err := cell.NewPack(t, b.Series, b.Parallel)
	if err != nil {
		return nil, fmt.Errorf("battery %s: %w", id, err)
	}
	ekf, err := estimate.NewEKF(pack, 0.5, &estimatorSettings)
	if err != nil {
		return nil, fmt.Errorf("battery %s: creating estimator: %w", id, err)
	}
	e := &entry{id: id, pack: pack, ekf: ekf, version: store.AnyVersion, lastPersist: s.now()}
	start := time.Now()
	stored, err := s.store.GetState(ctx, tenant(ctx), id)
	s.metrics.observeStore(ctx, "GetState", start)
	switch {
	case errors.Is(err, store.ErrNotFound):
		return e, nil
	case err != nil:
		return nil, resourceErr(err, batteryName(id))
	}
	var saved savedState
	if err := json.Unmarshal(stored.Estimator, &saved); err != nil {
		return nil, fmt.Errorf("battery %s: decoding stored state: %w", id, err)
	}
	if err := ekf.Restore(saved.Filter); err != nil {
		return nil, fmt.Errorf("battery %s: restoring stored state: %w", id, err)
	}
	e.st = saved
	e.version = stored.Version
	e.applied = stored.Watermark
	e.durable = stored.Watermark
	return e, nil
}

// persist writes the entry's state by compare-and-swap. The entry must be locked.
func (s *Service) persist(ctx context.Context, e *entry) error {
	e.st.Filter = e.ekf.State()
	blob, err := json.Marshal(&e.st)
	if err != nil {
		return fmt.Errorf("battery %s: encoding state: %w", e.id, err)
	}
	sum := e.summary()
	sum.EquivalentCycles, sum.TemperatureCelsius = e.st.EquivalentCycles, e.st.LastTemperatureC
	sum.VoltageVolts, sum.CurrentAmps = e.st.LastVoltageVolts, e.st.LastCurrentAmps
	start := time.Now()
	v, err := s.store.PutState(ctx, tenant(ctx), e.id, e.version, store.State{Estimator: blob, Summary: sum, Watermark: e.applied})
	s.metrics.observeStore(ctx, "PutState", start)
	if err != nil {
		if errors.Is(err, store.ErrConflict) || errors.Is(err, store.ErrNotFound) {
			// Another replica wrote the state, or the battery was deleted: this
			// copy is stale. Drop it; the next block reloads.
			s.forgetLocked(e)
		}
		return resourceErr(err, batteryName(e.id))
	}
	e.version = v
	e.durable = e.applied
	e.pending = 0
	e.lastPersist = s.now()
	if e.st.Initialized && !e.applied.Time.IsZero() {
		rec := store.HealthRecord{Time: e.applied.Time, CapacityFactor: sum.CapacityFactor,
			ResistanceFactor: sum.ResistanceFactor, SOC: sum.SOC, EquivalentCycles: sum.EquivalentCycles}
		start := time.Now()
		err := s.store.AppendHealth(ctx, tenant(ctx), e.id, []store.HealthRecord{rec})
		s.metrics.observeStore(ctx, "AppendHealth", start)
		if err != nil {
			// The state is safe; a missing history point only thins the trend.
			s.log.WarnContext(ctx, "appending health record", "battery", e.id, "error", err.Error())
		}
	}
	return nil
}

func (s *Service) forgetLocked(e *entry) {
	s.tr.mu.Lock()
	defer s.tr.mu.Unlock()
	if cur, ok := s.tr.entries[e.id]; ok && cur == e {
		delete(s.tr.entries, e.id)
		s.metrics.activeBatteries.Add(context.Background(), -1)
	}
	e.gone = true
}

// initState stores a fresh estimate at state of charge soc for a new battery.
func (s *Service) initState(ctx context.Context, id string, pack cell.Pack, soc float64) error {
	ekf, err := estimate.NewEKF(pack, soc, &estimatorSettings)
	if err != nil {
		return fmt.Errorf("battery %s: creating estimator: %w", id, err)
	}
	e := &entry{id: id, pack: pack, ekf: ekf, version: store.AnyVersion}
	e.st.Initialized = true
	e.st.LastTemperatureC = 25
	return s.persist(ctx, e)
}

// Flush persists every battery state with samples not yet persisted. It returns the
// first error after trying all.
func (s *Service) Flush(ctx context.Context) error {
	return s.flush(ctx, false)
}

// flush persists dirty entries: all of them, or with due set only those whose
// persist interval has passed.
func (s *Service) flush(ctx context.Context, due bool) error {
	s.tr.mu.Lock()
	entries := make([]*entry, 0, len(s.tr.entries))
	for _, e := range s.tr.entries {
		entries = append(entries, e)
	}
	s.tr.mu.Unlock()
	var first error
	for _, e := range entries {
		e.mu.Lock()
		if !e.gone && e.pending > 0 && (!due || s.now().Sub(e.lastPersist) >= s.limits.PersistInterval) {
			if err := s.persist(ctx, e); err != nil && first == nil {
				first = err
			}
		}
		e.mu.Unlock()
	}
	return first
}

// Run persists due battery states every second, and every half calibration lease
// marks the calibrations of dead servers failed ([Service.RecoverCalibrations]), until
// ctx ends. The server runs it in the background; shutdown calls [Service.Flush]
// afterwards.
func (s *Service) Run(ctx context.Context) {
	tick := time.NewTicker(time.Second)
	defer tick.Stop()
	sweep := time.NewTicker(s.limits.CalibrationLease / 2)
	defer sweep.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
			if err := s.flush(ctx, true); err != nil && ctx.Err() == nil {
				s.log.WarnContext(ctx, "persisting battery state", "error", err.Error())
			}
		case <-sweep.C:
			if _, err := s.RecoverCalibrations(ctx, s.now().Add(-s.limits.CalibrationLease)); err != nil && ctx.Err() == nil {
				s.log.WarnContext(ctx, "sweeping lost calibrations", "error", err.Error())
			}
		}
	}
}

// batteryState returns the tracked state of a battery: from memory when it is active,
// else from the store.
func (s *Service) batteryState(ctx context.Context, id string) (*pb.BatteryState, error) {
	s.tr.mu.Lock()
	e, ok := s.tr.entries[id]
	s.tr.mu.Unlock()
	if ok {
		e.mu.Lock()
		defer e.mu.Unlock()
		if !e.gone {
			return e.stateToPB(), nil
		}
	}
	start := time.Now()
	stored, err := s.store.GetState(ctx, tenant(ctx), id)
	s.metrics.observeStore(ctx, "GetState", start)
	if errors.Is(err, store.ErrNotFound) {
		return &pb.BatteryState{CapacityFraction: 1, ResistanceFraction: 1, TemperatureCelsius: 25}, nil
	}
	if err != nil {
		return nil, resourceErr(err, batteryName(id))
	}
	var saved savedState
	if err := json.Unmarshal(stored.Estimator, &saved); err != nil {
		return nil, fmt.Errorf("battery %s: decoding stored state: %w", id, err)
	}
	return stateToPB(saved, stored.Summary, stored.Watermark, stored.Watermark), nil
}

func (e *entry) stateToPB() *pb.BatteryState {
	return stateToPB(e.st, e.summary(), e.applied, e.durable)
}

// summary is the estimator's part of the entry's stored summary: state of charge
// (clamped to [0, 1]) with its standard deviation, and the health factors.
func (e *entry) summary() store.Summary {
	est := e.ekf.State()
	return store.Summary{
		SOC:              clamp01(est.SOC),
		SOCSigma:         math.Sqrt(math.Max(est.Covariance[0][0], 0)),
		CapacityFactor:   est.CapacityFactor,
		ResistanceFactor: est.ResistanceFactor,
	}
}

func stateToPB(saved savedState, sum store.Summary, applied, durable store.Watermark) *pb.BatteryState {
	out := &pb.BatteryState{
		Initialized:           saved.Initialized,
		StateOfCharge:         sum.SOC,
		StateOfChargeStddev:   sum.SOCSigma,
		CapacityFraction:      sum.CapacityFactor,
		ResistanceFraction:    sum.ResistanceFactor,
		EquivalentFullCycles:  saved.EquivalentCycles,
		TemperatureCelsius:    saved.LastTemperatureC,
		VoltageVolts:          saved.LastVoltageVolts,
		CurrentAmps:           saved.LastCurrentAmps,
		AppliedSequenceNumber: applied.Sequence,
		DurableSequenceNumber: durable.Sequence,
	}
	if !applied.Time.IsZero() {
		out.LastSampleTime = timestamppb.New(applied.Time)
	}
	if !saved.Initialized {
		out.TemperatureCelsius = 25
	}
	return out
}

func clamp01(z float64) float64 { return math.Min(1, math.Max(0, z)) }
