package sqlstore

import (
	"context"
	"fmt"
	"slices"
	"strings"

	"github.com/voltcast/voltcast/service/store"
)

const healthCols = `time, capacity_factor, resistance_factor, soc, equivalent_cycles`

// AppendHealth implements [store.Health].
func (s *Store) AppendHealth(ctx context.Context, tenant, batteryID string, records []store.HealthRecord) error {
	op := "append health of battery " + short(batteryID)
	if err := precheck(ctx, tenant); err != nil {
		return s.fail(ctx, op, err)
	}
	if len(records) > store.MaxHealthAppend {
		return s.fail(ctx, op, invalidf("%d records, more than %d", len(records), store.MaxHealthAppend))
	}
	if len(records) == 0 {
		return nil
	}
	recs := make([]store.HealthRecord, 0, len(records))
	for i, r := range records {
		if err := validateHealthRecord(&r); err != nil {
			return s.fail(ctx, op, fmt.Errorf("record %d: %w", i, err))
		}
		r.Time = normTime(r.Time)
		recs = append(recs, r)
	}
	// One statement may not touch a row twice, so of records with the same time the
	// last one wins, as it would across calls. Sorting also takes row locks in one
	// order, so concurrent appends cannot deadlock.
	slices.SortStableFunc(recs, func(a, b store.HealthRecord) int { return a.Time.Compare(b.Time) })
	uniq := recs[:1]
	for _, r := range recs[1:] {
		if r.Time.Equal(uniq[len(uniq)-1].Time) {
			uniq[len(uniq)-1] = r
		} else {
			uniq = append(uniq, r)
		}
	}

	var q strings.Builder
	q.WriteString(`INSERT INTO health_records (tenant, battery_id, ` + healthCols + `) VALUES `)
	const cols = 7
	args := make([]any, 0, cols*len(uniq))
	for i, r := range uniq {
		if i > 0 {
			q.WriteString(", ")
		}
		q.WriteByte('(')
		for c := range cols {
			if c > 0 {
				q.WriteString(", ")
			}
			q.WriteString(s.d.Param(len(args) + c + 1))
		}
		q.WriteByte(')')
		args = append(args, tenant, batteryID, s.timeArg(r.Time), r.CapacityFactor, r.ResistanceFactor, r.SOC, r.EquivalentCycles)
	}
	q.WriteString(` ON CONFLICT (tenant, battery_id, time) DO UPDATE SET
		capacity_factor = excluded.capacity_factor, resistance_factor = excluded.resistance_factor,
		soc = excluded.soc, equivalent_cycles = excluded.equivalent_cycles`)
	if _, err := s.write.ExecContext(ctx, q.String(), args...); err != nil {
		if s.d.IsForeignKeyViolation(err) {
			err = fmt.Errorf("battery: %w", store.ErrNotFound)
		}
		return s.fail(ctx, op, err)
	}
	return nil
}

// ListHealth implements [store.Health].
func (s *Store) ListHealth(ctx context.Context, tenant, batteryID string, hq store.HealthQuery) ([]store.HealthRecord, error) {
	op := "list health of battery " + short(batteryID)
	if err := precheck(ctx, tenant, checkTime("start", hq.Start, true), checkTime("end", hq.End, true)); err != nil {
		return nil, s.fail(ctx, op, err)
	}
	limit := hq.Limit
	switch {
	case limit < 0:
		return nil, s.fail(ctx, op, invalidf("limit %d is negative", limit))
	case limit == 0:
		limit = store.DefaultHealthLimit
	case limit > store.MaxHealthLimit:
		limit = store.MaxHealthLimit
	}
	var q strings.Builder
	q.WriteString(`SELECT ` + healthCols + ` FROM health_records WHERE tenant = $1 AND battery_id = $2`)
	args := []any{tenant, batteryID}
	// Bounds are truncated like stored times, so a record appended at T is found from
	// Start T and excluded before End T.
	if !hq.Start.IsZero() {
		args = append(args, s.timeArg(normTime(hq.Start)))
		fmt.Fprintf(&q, ` AND time >= $%d`, len(args))
	}
	if !hq.End.IsZero() {
		args = append(args, s.timeArg(normTime(hq.End)))
		fmt.Fprintf(&q, ` AND time < $%d`, len(args))
	}
	args = append(args, limit)
	fmt.Fprintf(&q, ` ORDER BY time LIMIT $%d`, len(args))
	rows, err := s.read.QueryContext(ctx, q.String(), args...)
	if err != nil {
		return nil, s.fail(ctx, op, err)
	}
	out, err := collect(rows, func(r scanner) (store.HealthRecord, error) {
		var h store.HealthRecord
		err := r.Scan(timeCol{&h.Time}, &h.CapacityFactor, &h.ResistanceFactor, &h.SOC, &h.EquivalentCycles)
		return h, err
	})
	if err != nil {
		return nil, s.fail(ctx, op, err)
	}
	if len(out) == 0 {
		ok, err := exists(ctx, s.read, `SELECT version FROM batteries WHERE tenant = $1 AND id = $2`, tenant, batteryID)
		if err == nil && !ok {
			err = fmt.Errorf("battery: %w", store.ErrNotFound)
		}
		if err != nil {
			return nil, s.fail(ctx, op, err)
		}
	}
	return out, nil
}
