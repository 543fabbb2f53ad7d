package sqlstore

import (
	"encoding/json"
	"fmt"
	"math"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/voltcast/voltcast/service/store"
)

// invalidf returns an error wrapping [store.ErrInvalidArgument].
func invalidf(format string, args ...any) error {
	return fmt.Errorf("%w: %s", store.ErrInvalidArgument, fmt.Sprintf(format, args...))
}

// short quotes s for an error message, cut to a readable length.
func short(s string) string {
	const max = 64
	if len(s) > max {
		return fmt.Sprintf("%q…", s[:max])
	}
	return fmt.Sprintf("%q", s)
}

func checkTenant(tenant string) error {
	if !store.ValidID(tenant) {
		return invalidf("tenant %s: not a valid id", short(tenant))
	}
	return nil
}

func checkID(what, id string) error {
	if !store.ValidID(id) {
		return invalidf("%s %s: want 1 to %d of a-z, 0-9 and '-', starting with a letter, not ending with '-'", what, short(id), store.MaxIDBytes)
	}
	return nil
}

// checkText checks free text: valid UTF-8 without NUL (PostgreSQL text cannot hold
// it), at most max bytes.
func checkText(what, s string, max int) error {
	if len(s) > max {
		return invalidf("%s: %d bytes, more than %d", what, len(s), max)
	}
	if !utf8.ValidString(s) || strings.IndexByte(s, 0) >= 0 {
		return invalidf("%s: not valid UTF-8 text", what)
	}
	return nil
}

func checkRequestID(id string) error {
	return checkText("request id", id, store.MaxRequestIDBytes)
}

// checkJSON checks an opaque blob: valid JSON in valid UTF-8 (PostgreSQL's json type
// insists on it), at most [store.MaxBlobBytes].
func checkJSON(what string, b []byte, required bool) error {
	switch {
	case len(b) == 0 && required:
		return invalidf("%s: required", what)
	case len(b) == 0:
		return nil
	case len(b) > store.MaxBlobBytes:
		return invalidf("%s: %d bytes, more than %d", what, len(b), store.MaxBlobBytes)
	case !utf8.Valid(b) || !json.Valid(b):
		return invalidf("%s: not valid JSON in UTF-8", what)
	}
	return nil
}

// checkTime checks that t is zero (when allowed) or within the years 1 to 9999,
// which every backend represents.
func checkTime(what string, t time.Time, zeroOK bool) error {
	if t.IsZero() {
		if zeroOK {
			return nil
		}
		return invalidf("%s: required", what)
	}
	if y := t.UTC().Year(); y < 1 || y > 9999 {
		return invalidf("%s: year %d outside 1 to 9999", what, y)
	}
	return nil
}

// normTime returns t in UTC truncated to microseconds; zero stays zero.
func normTime(t time.Time) time.Time {
	if t.IsZero() {
		return t
	}
	return t.UTC().Truncate(time.Microsecond)
}

type numCheck int

const (
	finite numCheck = iota
	nonNegative
	positive
)

func checkNum(what string, v float64, c numCheck) error {
	switch {
	case math.IsNaN(v) || math.IsInf(v, 0):
		return invalidf("%s: %v is not finite", what, v)
	case c == nonNegative && v < 0:
		return invalidf("%s: %v is negative", what, v)
	case c == positive && v <= 0:
		return invalidf("%s: %v is not positive", what, v)
	}
	return nil
}

func validateBatteryType(t *store.BatteryType, requestID string) error {
	if err := checkID("battery type name", t.Name); err != nil {
		return err
	}
	if t.CalibrationID != "" {
		if err := checkID("calibration id", t.CalibrationID); err != nil {
			return err
		}
	}
	for _, err := range []error{
		checkText("display name", t.DisplayName, store.MaxDisplayNameBytes),
		checkText("chemistry", t.Chemistry, store.MaxChemistryBytes),
		checkJSON("parameters", t.Parameters, true),
		checkRequestID(requestID),
	} {
		if err != nil {
			return err
		}
	}
	return nil
}

func validateBattery(b *store.Battery) error {
	if err := checkID("battery id", b.ID); err != nil {
		return err
	}
	if err := checkID("battery type name", b.TypeName); err != nil {
		return err
	}
	if b.Series < 1 || b.Series > store.MaxCellCount {
		return invalidf("series: %d outside 1 to %d", b.Series, store.MaxCellCount)
	}
	if b.Parallel < 1 || b.Parallel > store.MaxCellCount {
		return invalidf("parallel: %d outside 1 to %d", b.Parallel, store.MaxCellCount)
	}
	if err := checkText("display name", b.DisplayName, store.MaxDisplayNameBytes); err != nil {
		return err
	}
	if err := store.ValidLabels(b.Labels); err != nil {
		return invalidf("labels: %v", err)
	}
	return nil
}

func validateState(s *store.State) error {
	if err := checkJSON("estimator state", s.Estimator, true); err != nil {
		return err
	}
	m := &s.Summary
	for _, err := range []error{
		checkNum("soc", m.SOC, finite),
		checkNum("soc sigma", m.SOCSigma, nonNegative),
		checkNum("capacity factor", m.CapacityFactor, positive),
		checkNum("resistance factor", m.ResistanceFactor, positive),
		checkNum("equivalent cycles", m.EquivalentCycles, nonNegative),
		checkNum("temperature", m.TemperatureCelsius, finite),
		checkNum("voltage", m.VoltageVolts, finite),
		checkNum("current", m.CurrentAmps, finite),
		checkTime("watermark time", s.Watermark.Time, true),
	} {
		if err != nil {
			return err
		}
	}
	if s.Watermark.Sequence < 0 {
		return invalidf("watermark sequence: %d is negative", s.Watermark.Sequence)
	}
	return nil
}

func validateHealthRecord(r *store.HealthRecord) error {
	for _, err := range []error{
		checkTime("health record time", r.Time, false),
		checkNum("capacity factor", r.CapacityFactor, positive),
		checkNum("resistance factor", r.ResistanceFactor, positive),
		checkNum("soc", r.SOC, finite),
		checkNum("equivalent cycles", r.EquivalentCycles, nonNegative),
	} {
		if err != nil {
			return err
		}
	}
	return nil
}

func validateCalibration(c *store.Calibration) error {
	if err := checkID("calibration id", c.ID); err != nil {
		return err
	}
	if !c.Status.Valid() {
		return invalidf("calibration status %s: unknown", short(string(c.Status)))
	}
	if c.TypeName != "" {
		if err := checkID("battery type name", c.TypeName); err != nil {
			return err
		}
	}
	for _, err := range []error{
		checkText("display name", c.DisplayName, store.MaxDisplayNameBytes),
		checkText("error", c.Error, store.MaxErrorBytes),
		checkJSON("input", c.Input, false),
		checkJSON("report", c.Report, false),
	} {
		if err != nil {
			return err
		}
	}
	return nil
}

// pageSize applies the page size rules of [store.PageRequest].
func pageSize(n int) (int, error) {
	switch {
	case n < 0:
		return 0, invalidf("page size %d is negative", n)
	case n == 0:
		return store.DefaultPageSize, nil
	case n > store.MaxPageSize:
		return store.MaxPageSize, nil
	}
	return n, nil
}
