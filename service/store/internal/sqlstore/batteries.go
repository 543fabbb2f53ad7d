package sqlstore

import (
	"context"
	"database/sql"
	"encoding/json"
	"errors"
	"fmt"
	"maps"
	"slices"
	"strings"

	"github.com/voltcast/voltcast/service/store"
)

const batteryCols = `id, type_name, series, parallel, display_name, labels, create_time, update_time, version`

// storedType is the value of batteries.stored_type_name for type name $3: the name
// when it is a registered type, NULL otherwise.
const storedType = `(SELECT name FROM battery_types WHERE tenant = $1 AND name = $3)`

func scanBattery(r scanner) (store.Battery, error) {
	var (
		b      store.Battery
		labels string
	)
	err := r.Scan(&b.ID, &b.TypeName, &b.Series, &b.Parallel, &b.DisplayName, &labels,
		timeCol{&b.CreateTime}, timeCol{&b.UpdateTime}, &b.Version)
	if err != nil {
		return store.Battery{}, err
	}
	if err := json.Unmarshal([]byte(labels), &b.Labels); err != nil {
		return store.Battery{}, fmt.Errorf("decode labels of %s: %w", short(b.ID), err)
	}
	if len(b.Labels) == 0 {
		b.Labels = nil
	}
	return b, nil
}

// encodeLabels returns the stored JSON of labels and a copy of them (nil if empty).
func encodeLabels(labels map[string]string) (string, map[string]string) {
	if len(labels) == 0 {
		return "{}", nil
	}
	j, err := json.Marshal(labels)
	if err != nil {
		panic("sqlstore: marshal labels: " + err.Error()) // a map of strings always marshals
	}
	return string(j), maps.Clone(labels)
}

// writeLabels makes battery_labels of the battery hold exactly labels.
func writeLabels(ctx context.Context, tx tx, tenant, id string, labels map[string]string, replace bool) error {
	if replace {
		if _, err := tx.ExecContext(ctx, `DELETE FROM battery_labels WHERE tenant = $1 AND battery_id = $2`, tenant, id); err != nil {
			return fmt.Errorf("clear labels: %w", err)
		}
	}
	if len(labels) == 0 {
		return nil
	}
	var q strings.Builder
	q.WriteString(`INSERT INTO battery_labels (tenant, battery_id, key, value) VALUES `)
	args := []any{tenant, id}
	for i, k := range slices.Sorted(maps.Keys(labels)) {
		if i > 0 {
			q.WriteString(", ")
		}
		fmt.Fprintf(&q, "($1, $2, $%d, $%d)", len(args)+1, len(args)+2)
		args = append(args, k, labels[k])
	}
	if _, err := tx.ExecContext(ctx, q.String(), args...); err != nil {
		return fmt.Errorf("write labels: %w", err)
	}
	return nil
}

// CreateBattery implements [store.Batteries].
func (s *Store) CreateBattery(ctx context.Context, tenant string, b store.Battery, requestID string) (store.Battery, error) {
	op := "create battery " + short(b.ID)
	if err := precheck(ctx, tenant, validateBattery(&b), checkRequestID(requestID)); err != nil {
		return store.Battery{}, s.fail(ctx, op, err)
	}
	var labels string
	labels, b.Labels = encodeLabels(b.Labels)
	b.CreateTime = now()
	b.UpdateTime = b.CreateTime
	var prev *store.Battery
	err := s.inTx(ctx, func(tx tx) error {
		err := tx.QueryRowContext(ctx, `
			INSERT INTO batteries (tenant, id, type_name, stored_type_name, series, parallel,
				display_name, labels, request_id, create_time, update_time, version)
			VALUES ($1, $2, $3, `+storedType+`, $4, $5, $6, $7, $8, $9, $9, `+s.d.NextVersion+`)
			ON CONFLICT DO NOTHING
			RETURNING version`,
			tenant, b.ID, b.TypeName, b.Series, b.Parallel, b.DisplayName, labels,
			nullString(requestID), s.timeArg(b.CreateTime)).Scan(&b.Version)
		if err != nil && s.d.IsForeignKeyViolation(err) {
			return fmt.Errorf("%w: battery type %s was deleted meanwhile", store.ErrConflict, short(b.TypeName))
		}
		prev, err = replayOrExists(ctx, tx, err, "batteries", batteryCols, tenant, requestID, scanBattery)
		if err != nil || prev != nil {
			return err
		}
		return writeLabels(ctx, tx, tenant, b.ID, b.Labels, false)
	})
	switch {
	case err != nil:
		return store.Battery{}, s.fail(ctx, op, err)
	case prev != nil:
		return *prev, nil
	}
	return b, nil
}

// GetBattery implements [store.Batteries].
func (s *Store) GetBattery(ctx context.Context, tenant, id string) (store.Battery, error) {
	op := "get battery " + short(id)
	if err := precheck(ctx, tenant); err != nil {
		return store.Battery{}, s.fail(ctx, op, err)
	}
	b, err := scanBattery(s.read.QueryRowContext(ctx,
		`SELECT `+batteryCols+` FROM batteries WHERE tenant = $1 AND id = $2`, tenant, id))
	if errors.Is(err, sql.ErrNoRows) {
		err = store.ErrNotFound
	}
	if err != nil {
		return store.Battery{}, s.fail(ctx, op, err)
	}
	return b, nil
}

// ListBatteries implements [store.Batteries].
func (s *Store) ListBatteries(ctx context.Context, tenant string, filter store.BatteryFilter, page store.PageRequest) ([]store.Battery, string, error) {
	const op, list = "list batteries", "batteries"
	if err := precheck(ctx, tenant); err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	if filter.TypeName != "" {
		if err := checkID("battery type name", filter.TypeName); err != nil {
			return nil, "", s.fail(ctx, op, err)
		}
	}
	if err := store.ValidLabels(filter.Labels); err != nil {
		return nil, "", s.fail(ctx, op, invalidf("label filter: %v", err))
	}
	size, err := pageSize(page.Size)
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	fk := filterKey(filter)
	c, err := s.decodeToken(page.Token, list, tenant, fk)
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	var q strings.Builder
	q.WriteString(`SELECT ` + batteryCols + ` FROM batteries b WHERE b.tenant = $1 AND b.id > $2`)
	args := []any{tenant, c.After}
	if filter.TypeName != "" {
		args = append(args, filter.TypeName)
		fmt.Fprintf(&q, ` AND b.type_name = $%d`, len(args))
	}
	for _, k := range slices.Sorted(maps.Keys(filter.Labels)) {
		args = append(args, k, filter.Labels[k])
		fmt.Fprintf(&q, ` AND EXISTS (SELECT 1 FROM battery_labels l WHERE l.tenant = b.tenant
			AND l.battery_id = b.id AND l.key = $%d AND l.value = $%d)`, len(args)-1, len(args))
	}
	args = append(args, size+1)
	fmt.Fprintf(&q, ` ORDER BY b.id LIMIT $%d`, len(args))
	rows, err := s.read.QueryContext(ctx, q.String(), args...)
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	out, err := collect(rows, scanBattery)
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	var next string
	if len(out) > size {
		out = out[:size]
		next = s.encodeToken(cursor{List: list, Tenant: tenant, Filter: fk, After: out[size-1].ID})
	}
	return out, next, nil
}

// UpdateBattery implements [store.Batteries].
func (s *Store) UpdateBattery(ctx context.Context, tenant string, b store.Battery, expectedVersion int64) (store.Battery, error) {
	op := "update battery " + short(b.ID)
	if err := precheck(ctx, tenant, validateBattery(&b), checkExpected(expectedVersion)); err != nil {
		return store.Battery{}, s.fail(ctx, op, err)
	}
	var labels string
	labels, b.Labels = encodeLabels(b.Labels)
	b.UpdateTime = now()
	args := []any{tenant, b.ID, b.TypeName, b.Series, b.Parallel, b.DisplayName, labels, s.timeArg(b.UpdateTime)}
	if expectedVersion != store.AnyVersion {
		args = append(args, expectedVersion)
	}
	err := s.inTx(ctx, func(tx tx) error {
		err := tx.QueryRowContext(ctx, `
			UPDATE batteries SET type_name = $3, stored_type_name = `+storedType+`, series = $4,
				parallel = $5, display_name = $6, labels = $7, update_time = $8,
				version = `+s.d.NextVersion+`
			WHERE tenant = $1 AND id = $2`+versionCond(expectedVersion, 9)+`
			RETURNING create_time, version`, args...).Scan(timeCol{&b.CreateTime}, &b.Version)
		switch {
		case errors.Is(err, sql.ErrNoRows):
			return missingOrMoved(ctx, tx, `SELECT version FROM batteries WHERE tenant = $1 AND id = $2`, tenant, b.ID)
		case err != nil && s.d.IsForeignKeyViolation(err):
			return fmt.Errorf("%w: battery type %s was deleted meanwhile", store.ErrConflict, short(b.TypeName))
		case err != nil:
			return err
		}
		return writeLabels(ctx, tx, tenant, b.ID, b.Labels, true)
	})
	if err != nil {
		return store.Battery{}, s.fail(ctx, op, err)
	}
	return b, nil
}

// DeleteBattery implements [store.Batteries].
func (s *Store) DeleteBattery(ctx context.Context, tenant, id string, expectedVersion int64) error {
	op := "delete battery " + short(id)
	if err := precheck(ctx, tenant, checkExpected(expectedVersion)); err != nil {
		return s.fail(ctx, op, err)
	}
	// The foreign keys cascade to the labels, the state and the health history.
	if err := s.deleteRow(ctx, "batteries", "id", tenant, id, expectedVersion); err != nil {
		return s.fail(ctx, op, err)
	}
	return nil
}
