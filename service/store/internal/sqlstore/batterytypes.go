package sqlstore

import (
	"bytes"
	"context"
	"database/sql"
	"errors"
	"fmt"

	"github.com/voltcast/voltcast/service/store"
)

const typeCols = `name, display_name, chemistry, parameters, calibration_id, create_time, update_time, version`

type scanner interface{ Scan(dst ...any) error }

func scanBatteryType(r scanner) (store.BatteryType, error) {
	var t store.BatteryType
	err := r.Scan(&t.Name, &t.DisplayName, &t.Chemistry, &t.Parameters, &t.CalibrationID,
		timeCol{&t.CreateTime}, timeCol{&t.UpdateTime}, &t.Version)
	return t, err
}

// CreateBatteryType implements [store.BatteryTypes].
func (s *Store) CreateBatteryType(ctx context.Context, tenant string, t store.BatteryType, requestID string) (store.BatteryType, error) {
	op := "create battery type " + short(t.Name)
	if err := precheck(ctx, tenant); err != nil {
		return store.BatteryType{}, s.fail(ctx, op, err)
	}
	if err := validateBatteryType(&t, requestID); err != nil {
		return store.BatteryType{}, s.fail(ctx, op, err)
	}
	t.Parameters = bytes.Clone(t.Parameters)
	t.CreateTime = now()
	t.UpdateTime = t.CreateTime
	err := s.write.QueryRowContext(ctx, `
		INSERT INTO battery_types (tenant, name, display_name, chemistry, parameters, calibration_id,
			request_id, create_time, update_time, version)
		VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $8, `+s.d.NextVersion+`)
		ON CONFLICT DO NOTHING
		RETURNING version`,
		tenant, t.Name, t.DisplayName, t.Chemistry, t.Parameters, t.CalibrationID,
		nullString(requestID), s.timeArg(t.CreateTime)).Scan(&t.Version)
	prev, err := replayOrExists(ctx, s.write, err, "battery_types", typeCols, tenant, requestID, scanBatteryType)
	switch {
	case err != nil:
		return store.BatteryType{}, s.fail(ctx, op, err)
	case prev != nil:
		return *prev, nil
	}
	return t, nil
}

// GetBatteryType implements [store.BatteryTypes].
func (s *Store) GetBatteryType(ctx context.Context, tenant, name string) (store.BatteryType, error) {
	op := "get battery type " + short(name)
	if err := precheck(ctx, tenant); err != nil {
		return store.BatteryType{}, s.fail(ctx, op, err)
	}
	t, err := scanBatteryType(s.read.QueryRowContext(ctx,
		`SELECT `+typeCols+` FROM battery_types WHERE tenant = $1 AND name = $2`, tenant, name))
	if errors.Is(err, sql.ErrNoRows) {
		err = store.ErrNotFound
	}
	if err != nil {
		return store.BatteryType{}, s.fail(ctx, op, err)
	}
	return t, nil
}

// ListBatteryTypes implements [store.BatteryTypes].
func (s *Store) ListBatteryTypes(ctx context.Context, tenant string, page store.PageRequest) ([]store.BatteryType, string, error) {
	const op, list = "list battery types", "battery-types"
	if err := precheck(ctx, tenant); err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	size, err := pageSize(page.Size)
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	c, err := s.decodeToken(page.Token, list, tenant, "")
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	rows, err := s.read.QueryContext(ctx, `SELECT `+typeCols+` FROM battery_types
		WHERE tenant = $1 AND name > $2 ORDER BY name LIMIT $3`, tenant, c.After, size+1)
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	out, err := collect(rows, scanBatteryType)
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	var next string
	if len(out) > size {
		out = out[:size]
		next = s.encodeToken(cursor{List: list, Tenant: tenant, After: out[size-1].Name})
	}
	return out, next, nil
}

// DeleteBatteryType implements [store.BatteryTypes].
func (s *Store) DeleteBatteryType(ctx context.Context, tenant, name string, expectedVersion int64) error {
	op := "delete battery type " + short(name)
	if err := precheck(ctx, tenant, checkExpected(expectedVersion)); err != nil {
		return s.fail(ctx, op, err)
	}
	err := s.deleteRow(ctx, "battery_types", "name", tenant, name, expectedVersion)
	if err != nil && s.d.IsForeignKeyViolation(err) {
		err = fmt.Errorf("%w: batteries refer to it", store.ErrInUse)
	}
	if err != nil {
		return s.fail(ctx, op, err)
	}
	return nil
}

// collect scans all rows with scan and closes them.
func collect[T any](rows *sql.Rows, scan func(scanner) (T, error)) ([]T, error) {
	defer rows.Close()
	var out []T
	for rows.Next() {
		v, err := scan(rows)
		if err != nil {
			return nil, err
		}
		out = append(out, v)
	}
	if err := rows.Err(); err != nil {
		return nil, err
	}
	return out, nil
}
