package sqlstore

import (
	"bytes"
	"cmp"
	"context"
	"database/sql"
	"errors"
	"fmt"
	"slices"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

const stateCols = `estimator, soc, soc_sigma, capacity_factor, resistance_factor, equivalent_cycles,
	temperature_celsius, voltage_volts, current_amps, last_sequence, last_sample_time, update_time, version`

// GetState implements [store.States].
func (s *Store) GetState(ctx context.Context, tenant, batteryID string) (store.State, error) {
	op := "get state of battery " + short(batteryID)
	if err := precheck(ctx, tenant); err != nil {
		return store.State{}, s.fail(ctx, op, err)
	}
	var st store.State
	m := &st.Summary
	err := s.read.QueryRowContext(ctx, `SELECT `+stateCols+` FROM battery_states
		WHERE tenant = $1 AND battery_id = $2`, tenant, batteryID).Scan(
		&st.Estimator, &m.SOC, &m.SOCSigma, &m.CapacityFactor, &m.ResistanceFactor, &m.EquivalentCycles,
		&m.TemperatureCelsius, &m.VoltageVolts, &m.CurrentAmps, &st.Watermark.Sequence,
		timeCol{&st.Watermark.Time}, timeCol{&st.UpdateTime}, &st.Version)
	if errors.Is(err, sql.ErrNoRows) {
		err = store.ErrNotFound
	}
	if err != nil {
		return store.State{}, s.fail(ctx, op, err)
	}
	return st, nil
}

// PutState implements [store.States].
func (s *Store) PutState(ctx context.Context, tenant, batteryID string, expectedVersion int64, st store.State) (int64, error) {
	op := "put state of battery " + short(batteryID)
	if err := precheck(ctx, tenant, checkExpected(expectedVersion), validateState(&st)); err != nil {
		return 0, s.fail(ctx, op, err)
	}
	v, err := s.putState(ctx, s.write, tenant, batteryID, expectedVersion, st)
	if err != nil {
		return 0, s.fail(ctx, op, err)
	}
	return v, nil
}

// PutStates implements [store.States].
func (s *Store) PutStates(ctx context.Context, tenant string, writes []store.StateWrite) ([]store.StateResult, error) {
	const op = "put states"
	if err := precheck(ctx, tenant); err != nil {
		return nil, s.fail(ctx, op, err)
	}
	if len(writes) > store.MaxStateBatch {
		return nil, s.fail(ctx, op, invalidf("%d writes, more than %d", len(writes), store.MaxStateBatch))
	}
	results := make([]store.StateResult, len(writes))
	// Rows are locked in battery order, so two batches over the same batteries cannot
	// deadlock.
	order := make([]int, 0, len(writes))
	for i := range writes {
		w := &writes[i]
		if err := errors.Join(checkExpected(w.ExpectedVersion), validateState(&w.State)); err != nil {
			results[i].Err = s.fail(ctx, "put state of battery "+short(w.BatteryID), err)
			continue
		}
		order = append(order, i)
	}
	slices.SortStableFunc(order, func(a, b int) int { return cmp.Compare(writes[a].BatteryID, writes[b].BatteryID) })
	if len(order) == 0 {
		return results, nil
	}

	err := s.inTx(ctx, func(tx tx) error {
		for _, i := range order {
			w := &writes[i]
			v, err := s.putState(ctx, tx, tenant, w.BatteryID, w.ExpectedVersion, w.State)
			if err != nil && !perWrite(err) {
				return err
			}
			results[i] = store.StateResult{Version: v}
			if err != nil {
				results[i].Err = s.fail(ctx, "put state of battery "+short(w.BatteryID), err)
			}
		}
		return nil
	})
	switch {
	case err == nil:
		return results, nil
	case ctx.Err() != nil:
		return nil, s.fail(ctx, op, err)
	}
	// The transaction failed as a whole (in PostgreSQL one failed statement, such as a
	// battery deleted meanwhile, aborts it): write one by one instead.
	for _, i := range order {
		w := &writes[i]
		v, err := s.PutState(ctx, tenant, w.BatteryID, w.ExpectedVersion, w.State)
		if err != nil && ctx.Err() != nil {
			return nil, err
		}
		results[i] = store.StateResult{Version: v, Err: err}
	}
	return results, nil
}

// perWrite reports whether err concerns one state write only and left the
// transaction usable, so that a batch can go on. A missing battery is not among
// them: in PostgreSQL its foreign-key violation aborts the transaction, and it is
// rare enough to pay for the one-by-one fallback.
func perWrite(err error) bool {
	return errors.Is(err, store.ErrConflict) || errors.Is(err, store.ErrInvalidArgument)
}

// putState writes a validated state by compare-and-swap through q.
func (s *Store) putState(ctx context.Context, q queryer, tenant, batteryID string, expectedVersion int64, st store.State) (int64, error) {
	m, w := &st.Summary, st.Watermark
	w.Time = normTime(w.Time)
	args := []any{tenant, batteryID, bytes.Clone(st.Estimator), m.SOC, m.SOCSigma, m.CapacityFactor,
		m.ResistanceFactor, m.EquivalentCycles, m.TemperatureCelsius, m.VoltageVolts, m.CurrentAmps,
		w.Sequence, s.timeArg(w.Time), s.timeArg(now())}
	var version int64
	if expectedVersion == store.AnyVersion {
		err := q.QueryRowContext(ctx, `
			INSERT INTO battery_states (tenant, battery_id, `+stateCols+`)
			VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, `+s.d.NextVersion+`)
			ON CONFLICT DO NOTHING
			RETURNING version`, args...).Scan(&version)
		switch {
		case errors.Is(err, sql.ErrNoRows):
			return 0, fmt.Errorf("%w: a state is already stored", store.ErrConflict)
		case err != nil && s.d.IsForeignKeyViolation(err):
			return 0, fmt.Errorf("battery: %w", store.ErrNotFound)
		case err != nil:
			return 0, err
		}
		return version, nil
	}
	// One statement checks the version and the watermark and writes both.
	args = append(args, expectedVersion)
	err := q.QueryRowContext(ctx, `
		UPDATE battery_states SET estimator = $3, soc = $4, soc_sigma = $5, capacity_factor = $6,
			resistance_factor = $7, equivalent_cycles = $8, temperature_celsius = $9,
			voltage_volts = $10, current_amps = $11, last_sequence = $12, last_sample_time = $13,
			update_time = $14, version = `+s.d.NextVersion+`
		WHERE tenant = $1 AND battery_id = $2 AND version = $15
			AND last_sequence <= $12 AND (last_sample_time IS NULL OR last_sample_time <= $13)
		RETURNING version`, args...).Scan(&version)
	if errors.Is(err, sql.ErrNoRows) {
		return 0, s.whyNoPut(ctx, q, tenant, batteryID, expectedVersion, w)
	}
	return version, err
}

// whyNoPut says why a state update matched no row.
func (s *Store) whyNoPut(ctx context.Context, q queryer, tenant, batteryID string, expected int64, w store.Watermark) error {
	var (
		version int64
		seq     int64
		t       time.Time
	)
	err := q.QueryRowContext(ctx, `SELECT version, last_sequence, last_sample_time FROM battery_states
		WHERE tenant = $1 AND battery_id = $2`, tenant, batteryID).Scan(&version, &seq, timeCol{&t})
	switch {
	case errors.Is(err, sql.ErrNoRows):
		ok, err := exists(ctx, q, `SELECT version FROM batteries WHERE tenant = $1 AND id = $2`, tenant, batteryID)
		switch {
		case err != nil:
			return err
		case !ok:
			return fmt.Errorf("battery: %w", store.ErrNotFound)
		}
		return fmt.Errorf("%w: no state is stored", store.ErrConflict)
	case err != nil:
		return err
	case version != expected:
		return fmt.Errorf("%w: stored version %d, expected %d", store.ErrConflict, version, expected)
	}
	return invalidf("watermark (sequence %d, time %s) is behind the stored one (sequence %d, time %s)",
		w.Sequence, w.Time.Format(time.RFC3339Nano), seq, t.Format(time.RFC3339Nano))
}
