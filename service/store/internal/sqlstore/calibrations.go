package sqlstore

import (
	"bytes"
	"context"
	"database/sql"
	"errors"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

// calCols lists a run's columns; calListCols the same without the input, which can be
// large and is left out of lists.
const (
	calCols     = `id, display_name, status, input, report, type_name, error, create_time, update_time, version`
	calListCols = `id, display_name, status, NULL, report, type_name, error, create_time, update_time, version`
)

func scanCalibration(r scanner) (store.Calibration, error) {
	var (
		c      store.Calibration
		status string
	)
	err := r.Scan(&c.ID, &c.DisplayName, &status, &c.Input, &c.Report, &c.TypeName, &c.Error,
		timeCol{&c.CreateTime}, timeCol{&c.UpdateTime}, &c.Version)
	c.Status = store.CalibrationStatus(status)
	return c, err
}

// CreateCalibration implements [store.Calibrations].
func (s *Store) CreateCalibration(ctx context.Context, tenant string, c store.Calibration, requestID string) (store.Calibration, error) {
	op := "create calibration " + short(c.ID)
	if err := precheck(ctx, tenant, validateCalibration(&c), checkRequestID(requestID)); err != nil {
		return store.Calibration{}, s.fail(ctx, op, err)
	}
	c.Input, c.Report = cloneBlob(c.Input), cloneBlob(c.Report)
	c.CreateTime = now()
	c.UpdateTime = c.CreateTime
	err := s.write.QueryRowContext(ctx, `
		INSERT INTO calibrations (tenant, id, display_name, status, input, report, type_name, error,
			request_id, create_time, update_time, version)
		VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $10, `+s.d.NextVersion+`)
		ON CONFLICT DO NOTHING
		RETURNING version`,
		tenant, c.ID, c.DisplayName, string(c.Status), nullBlob(c.Input), nullBlob(c.Report), c.TypeName,
		c.Error, nullString(requestID), s.timeArg(c.CreateTime)).Scan(&c.Version)
	prev, err := replayOrExists(ctx, s.write, err, "calibrations", calCols, tenant, requestID, scanCalibration)
	switch {
	case err != nil:
		return store.Calibration{}, s.fail(ctx, op, err)
	case prev != nil:
		return *prev, nil
	}
	return c, nil
}

// GetCalibration implements [store.Calibrations].
func (s *Store) GetCalibration(ctx context.Context, tenant, id string) (store.Calibration, error) {
	op := "get calibration " + short(id)
	if err := precheck(ctx, tenant); err != nil {
		return store.Calibration{}, s.fail(ctx, op, err)
	}
	c, err := scanCalibration(s.read.QueryRowContext(ctx,
		`SELECT `+calCols+` FROM calibrations WHERE tenant = $1 AND id = $2`, tenant, id))
	if errors.Is(err, sql.ErrNoRows) {
		err = store.ErrNotFound
	}
	if err != nil {
		return store.Calibration{}, s.fail(ctx, op, err)
	}
	return c, nil
}

// ListCalibrations implements [store.Calibrations].
func (s *Store) ListCalibrations(ctx context.Context, tenant string, page store.PageRequest) ([]store.Calibration, string, error) {
	const op, list = "list calibrations", "calibrations"
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
	var rows *sql.Rows
	if page.Token == "" {
		rows, err = s.read.QueryContext(ctx, `SELECT `+calListCols+` FROM calibrations
			WHERE tenant = $1 ORDER BY create_time DESC, id DESC LIMIT $2`, tenant, size+1)
	} else {
		rows, err = s.read.QueryContext(ctx, `SELECT `+calListCols+` FROM calibrations
			WHERE tenant = $1 AND (create_time < $2 OR (create_time = $2 AND id < $3))
			ORDER BY create_time DESC, id DESC LIMIT $4`,
			tenant, s.timeArg(time.UnixMicro(c.AfterTime).UTC()), c.After, size+1)
	}
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	out, err := collect(rows, scanCalibration)
	if err != nil {
		return nil, "", s.fail(ctx, op, err)
	}
	var next string
	if len(out) > size {
		out = out[:size]
		last := out[size-1]
		next = s.encodeToken(cursor{List: list, Tenant: tenant, After: last.ID, AfterTime: last.CreateTime.UnixMicro()})
	}
	return out, next, nil
}

// UpdateCalibration implements [store.Calibrations].
func (s *Store) UpdateCalibration(ctx context.Context, tenant string, c store.Calibration, expectedVersion int64) (store.Calibration, error) {
	op := "update calibration " + short(c.ID)
	if err := precheck(ctx, tenant, validateCalibration(&c), checkExpected(expectedVersion)); err != nil {
		return store.Calibration{}, s.fail(ctx, op, err)
	}
	c.Report = cloneBlob(c.Report)
	c.UpdateTime = now()
	args := []any{tenant, c.ID, c.DisplayName, string(c.Status), nullBlob(c.Report), c.TypeName, c.Error,
		s.timeArg(c.UpdateTime)}
	if expectedVersion != store.AnyVersion {
		args = append(args, expectedVersion)
	}
	err := s.write.QueryRowContext(ctx, `
		UPDATE calibrations SET display_name = $3, status = $4, report = $5, type_name = $6, error = $7,
			update_time = $8, version = `+s.d.NextVersion+`
		WHERE tenant = $1 AND id = $2`+versionCond(expectedVersion, 9)+`
		RETURNING input, create_time, version`, args...).Scan(&c.Input, timeCol{&c.CreateTime}, &c.Version)
	if errors.Is(err, sql.ErrNoRows) {
		err = missingOrMoved(ctx, s.write, `SELECT version FROM calibrations WHERE tenant = $1 AND id = $2`, tenant, c.ID)
	}
	if err != nil {
		return store.Calibration{}, s.fail(ctx, op, err)
	}
	return c, nil
}

// DeleteCalibration implements [store.Calibrations].
func (s *Store) DeleteCalibration(ctx context.Context, tenant, id string, expectedVersion int64) error {
	op := "delete calibration " + short(id)
	if err := precheck(ctx, tenant, checkExpected(expectedVersion)); err != nil {
		return s.fail(ctx, op, err)
	}
	if err := s.deleteRow(ctx, "calibrations", "id", tenant, id, expectedVersion); err != nil {
		return s.fail(ctx, op, err)
	}
	return nil
}

// cloneBlob copies b, returning nil for an empty blob (stored as NULL).
func cloneBlob(b []byte) []byte {
	if len(b) == 0 {
		return nil
	}
	return bytes.Clone(b)
}
