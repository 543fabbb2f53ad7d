package service

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"regexp"
	"strings"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	"github.com/voltcast/voltcast/model/fit"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service/store"
)

// calibrationServer serves CalibrationService. The jobs themselves run in the
// service's calibration runner (calrunner.go).
type calibrationServer struct {
	pb.UnimplementedCalibrationServiceServer
	s *Service
}

// Limits of a calibration request beyond the sample count (Limits.MaxCalibrationSamples).
const (
	maxCalibrationTests = 100
	minTestSamples      = 10
	// maxCalibrationCRate refuses currents above 50 C of the stated capacity: no lab
	// test of a cell draws that, and it catches milliamperes sent as amperes.
	maxCalibrationCRate = 50
	maxTestSeconds      = 1e9
)

// calTest is one validated test of a request, converted to the model's record.
type calTest struct {
	label string // "data" or "tests[i]"
	kind  pb.CalibrationTestKind
	rec   fit.Record
}

// calInput is the stored summary of a request (store.Calibration.Input). The test data
// itself is not kept: a calibration does not survive its server, so nothing would read
// it again (see calrunner.go).
type calInput struct {
	// Token is random per CreateCalibration call; a replayed request id returns a
	// calibration whose token differs, which tells the handler not to start a job.
	Token    string          `json:"token"`
	Settings json.RawMessage `json:"settings"`
	Tests    []calTestInfo   `json:"tests"`
}

type calTestInfo struct {
	Test    string `json:"test"`
	Kind    string `json:"kind"`
	Samples int    `json:"samples"`
}

// calReport is the stored result of a succeeded calibration (store.Calibration.Report).
type calReport struct {
	// Type is the fitted parameter set, in the model's JSON form.
	Type       json.RawMessage `json:"type"`
	RMSE       float64         `json:"voltage_rmse_volts"`
	Max        float64         `json:"max_voltage_error_volts"`
	Samples    int             `json:"sample_count"`
	Iterations int             `json:"iteration_count"`
	Notes      []string        `json:"notes"`
	Tests      []calTestReport `json:"tests"`
}

type calTestReport struct {
	Test    string  `json:"test"`
	Kind    string  `json:"kind"`
	Samples int     `json:"sample_count"`
	RMSE    float64 `json:"voltage_rmse_volts"`
	Max     float64 `json:"max_voltage_error_volts"`
	Method  string  `json:"method"`
}

// checkCalibration validates a request completely and returns the fit problem and
// settings. It reads the base type (built-in or from the store).
func (s *Service) checkCalibration(ctx context.Context, req *pb.CreateCalibrationRequest) (*fit.Problem, *fit.Settings, []calTest, error) {
	var v violations
	if id := req.GetCalibrationId(); id != "" {
		checkID(&v, "calibration_id", id)
	}
	if n := len(req.GetDisplayName()); n > maxDisplayName {
		v.add("display_name", "at most %d bytes, got %d", maxDisplayName, n)
	}
	if n := len(req.GetRequestId()); n > maxRequestID {
		v.add("request_id", "at most %d bytes, got %d", maxRequestID, n)
	}
	var all []*pb.CalibrationData
	var labels []string
	if d := req.GetData(); d != nil {
		all, labels = append(all, d), append(labels, "data")
	}
	for i, d := range req.GetTests() {
		all, labels = append(all, d), append(labels, fmt.Sprintf("tests[%d]", i))
	}
	// Sizes first, so that an oversized request costs no per-sample work.
	if len(all) > maxCalibrationTests {
		return nil, nil, nil, tooLarge("tests", "at most %d tests, got %d", maxCalibrationTests, len(all))
	}
	total := 0
	for _, d := range all {
		total += max(len(d.GetTimeOffsetsSeconds()), len(d.GetCurrentAmps()), len(d.GetVoltageVolts()),
			len(d.GetTemperatureCelsius()), len(d.GetDischargedAmpHours()))
	}
	if total > s.limits.MaxCalibrationSamples {
		return nil, nil, nil, tooLarge("tests", "at most %d samples over all tests, got %d", s.limits.MaxCalibrationSamples, total)
	}

	set := req.GetSettings()
	var chemistry cell.Chemistry
	if set == nil {
		v.add("settings", "is required")
	} else {
		var ok bool
		if chemistry, ok = chemistryFromPB[set.GetChemistry()]; !ok {
			v.add("settings.chemistry", "is required (one of the CHEMISTRY_ values other than UNSPECIFIED)")
		}
		if q := set.GetCapacityAmpHours(); !cell.Finite(q) || q <= 0 || q > 1e5 {
			v.add("settings.capacity_amp_hours", "is required: the rated capacity of one cell, positive, at most 1e5 Ah, got %g", q)
		}
		if set.InitialStateOfCharge != nil {
			if z := set.GetInitialStateOfCharge(); !cell.Finite(z) || z < 0 || z > 1 {
				v.add("settings.initial_state_of_charge", "must be a fraction in [0, 1], got %g", z)
			}
		}
		if n := set.GetRcBranchCount(); n < 0 || n > 2 {
			v.add("settings.rc_branch_count", "the fitter identifies 1 or 2 RC branches (0 means 2), got %d", n)
		}
		if b := set.GetBaseBatteryType(); b != "" {
			if _, err := parseName("settings.base_battery_type", b, collBatteryTypes); err != nil {
				v.add("settings.base_battery_type", "must be \"batteryTypes/{id}\", got %q", truncate(b, 100))
			}
		}
	}

	var kinds [4]int
	tests := make([]calTest, 0, len(all))
	if len(all) == 0 {
		v.add("tests", "is required: one LOW_RATE_DISCHARGE test and at least one PULSE test (in data and tests)")
	}
	qRated := set.GetCapacityAmpHours()
	for i, d := range all {
		t, ok := checkCalibrationData(&v, labels[i], d, qRated)
		if ok {
			tests = append(tests, t)
		}
		if k := d.GetKind(); k > 0 && int(k) < len(kinds) {
			kinds[k]++
		}
	}
	if len(all) > 0 {
		if n := kinds[pb.CalibrationTestKind_CALIBRATION_TEST_KIND_LOW_RATE_DISCHARGE]; n != 1 {
			v.add("tests", "need exactly one LOW_RATE_DISCHARGE test (open-circuit voltage and capacity), got %d", n)
		}
		if kinds[pb.CalibrationTestKind_CALIBRATION_TEST_KIND_PULSE] == 0 {
			v.add("tests", "need at least one PULSE test (series resistance and RC branches)")
		}
	}
	if err := v.err(); err != nil {
		return nil, nil, nil, err
	}

	// The base type: the request's, or the built-in generic type of the chemistry.
	var base *cell.Type
	if b := set.GetBaseBatteryType(); b != "" {
		t, err := s.lookupType(ctx, "settings.base_battery_type", b)
		if err != nil {
			return nil, nil, nil, err
		}
		if t.Chemistry != chemistry {
			return nil, nil, nil, invalid("settings.base_battery_type", "its chemistry %s differs from settings.chemistry %s", t.Chemistry, chemistry)
		}
		base = t
	} else {
		for _, t := range chem.All() {
			if t.Chemistry == chemistry {
				base = t
				break
			}
		}
		if base == nil {
			return nil, nil, nil, invalid("settings.base_battery_type", "is required for chemistry %s, which has no built-in generic type to take limits from", chemistry)
		}
	}
	p := &fit.Problem{Base: base}
	for _, t := range tests {
		switch t.kind {
		case pb.CalibrationTestKind_CALIBRATION_TEST_KIND_LOW_RATE_DISCHARGE:
			p.OCVTest = t.rec
		case pb.CalibrationTestKind_CALIBRATION_TEST_KIND_PULSE:
			p.PulseTests = append(p.PulseTests, t.rec)
		case pb.CalibrationTestKind_CALIBRATION_TEST_KIND_DYNAMIC:
			if set.InitialStateOfCharge != nil {
				z := set.GetInitialStateOfCharge()
				t.rec.InitialSOC = &z
			}
			p.DriveCycles = append(p.DriveCycles, t.rec)
		}
	}
	fs := &fit.Settings{Refine: set.GetRefineWithDynamicTests()}
	fs.Pulse.Branches = int(set.GetRcBranchCount())
	return p, fs, tests, nil
}

// checkCalibrationData validates one test and converts it; field is its request path.
// It reports at most one problem per array.
func checkCalibrationData(v *violations, field string, d *pb.CalibrationData, qRated float64) (calTest, bool) {
	n0 := len(*v)
	t := calTest{label: field, kind: d.GetKind()}
	switch d.GetKind() {
	case pb.CalibrationTestKind_CALIBRATION_TEST_KIND_PULSE, pb.CalibrationTestKind_CALIBRATION_TEST_KIND_LOW_RATE_DISCHARGE,
		pb.CalibrationTestKind_CALIBRATION_TEST_KIND_DYNAMIC:
	default:
		v.add(field+".kind", "is required: PULSE, LOW_RATE_DISCHARGE or DYNAMIC")
	}
	ts, cur, volt, temp, ah := d.GetTimeOffsetsSeconds(), d.GetCurrentAmps(), d.GetVoltageVolts(), d.GetTemperatureCelsius(), d.GetDischargedAmpHours()
	n := len(ts)
	if n < minTestSamples {
		v.add(field+".time_offsets_seconds", "need at least %d samples, got %d", minTestSamples, n)
	}
	for _, a := range []struct {
		name string
		n    int
	}{{"current_amps", len(cur)}, {"voltage_volts", len(volt)}} {
		if a.n != n {
			v.add(field+"."+a.name, "need one value per sample (%d, the length of time_offsets_seconds), got %d", n, a.n)
		}
	}
	if k := len(temp); k > 1 && k != n {
		v.add(field+".temperature_celsius", "need one per sample (%d), one for the test, or none, got %d", n, k)
	}
	if k := len(ah); k != 0 && k != n {
		v.add(field+".discharged_amp_hours", "need one per sample (%d) or none, got %d", n, k)
	}
	if len(*v) > n0 {
		return t, false
	}
	// Per-sample checks: the first bad sample of each array is reported.
	first := func(name string, xs []float64, bad func(k int, x float64) string) {
		for k, x := range xs {
			if msg := bad(k, x); msg != "" {
				v.add(fmt.Sprintf("%s.%s[%d]", field, name, k), "%s", msg)
				return
			}
		}
	}
	first("time_offsets_seconds", ts, func(k int, x float64) string {
		switch {
		case !cell.Finite(x) || x < 0 || x > maxTestSeconds:
			return fmt.Sprintf("must be finite, 0 to %g s, got %g", maxTestSeconds, x)
		case k > 0 && !(x > ts[k-1]):
			return fmt.Sprintf("times must increase: %g s does not follow %g s", x, ts[k-1])
		}
		return ""
	})
	first("current_amps", cur, func(_ int, x float64) string {
		if !cell.Finite(x) {
			return fmt.Sprintf("must be finite, got %g", x)
		}
		if qRated > 0 && math.Abs(x) > maxCalibrationCRate*qRated {
			return fmt.Sprintf("%g A is more than %d C of the %g Ah cell (amperes expected, positive = discharge; milliamperes?)", x, maxCalibrationCRate, qRated)
		}
		return ""
	})
	first("voltage_volts", volt, func(_ int, x float64) string {
		if !cell.Finite(x) || x <= 0 || x > 100 {
			return fmt.Sprintf("must be a cell voltage, positive and at most 100 V, got %g", x)
		}
		return ""
	})
	first("temperature_celsius", temp, func(_ int, x float64) string {
		if err := cell.CheckCelsius("", x); err != nil {
			return err.(*cell.FieldError).Reason
		}
		return ""
	})
	first("discharged_amp_hours", ah, func(_ int, x float64) string {
		if !cell.Finite(x) || math.Abs(x) > 1e6 {
			return fmt.Sprintf("must be finite, within ±1e6 Ah, got %g", x)
		}
		return ""
	})
	if len(*v) > n0 {
		return t, false
	}
	t.rec = fit.Record{
		Name:        field,
		Time:        append([]float64(nil), ts...),
		Current:     append([]float64(nil), cur...),
		Voltage:     append([]float64(nil), volt...),
		Temperature: make([]float64, n),
	}
	for k := range n {
		c := 25.0
		switch len(temp) {
		case 1:
			c = temp[0]
		case n:
			c = temp[k]
		}
		t.rec.Temperature[k] = cell.Kelvin(c)
	}
	if len(ah) > 0 {
		t.rec.DischargedAh = append([]float64(nil), ah...)
	}
	return t, true
}

func (h *calibrationServer) CreateCalibration(ctx context.Context, req *pb.CreateCalibrationRequest) (*pb.CreateCalibrationResponse, error) {
	c, err := h.s.createCalibration(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.CreateCalibrationResponse{Calibration: c}, nil
}

// newCalibrationID returns a server-chosen id, "cal-" and 16 hex digits.
func newCalibrationID() string {
	var b [8]byte
	rand.Read(b[:])
	return "cal-" + hex.EncodeToString(b[:])
}

func (s *Service) createCalibration(ctx context.Context, req *pb.CreateCalibrationRequest) (*pb.Calibration, error) {
	prob, settings, tests, err := s.checkCalibration(ctx, req)
	if err != nil {
		return nil, err
	}
	id := req.GetCalibrationId()
	if id == "" {
		id = newCalibrationID()
	}
	// Names the fitter writes into the type's sources: "calibrations/{id} tests[0]".
	for _, r := range []*fit.Record{&prob.OCVTest} {
		r.Name = calibrationName(id) + " " + r.Name
	}
	for i := range prob.PulseTests {
		prob.PulseTests[i].Name = calibrationName(id) + " " + prob.PulseTests[i].Name
	}
	for i := range prob.DriveCycles {
		prob.DriveCycles[i].Name = calibrationName(id) + " " + prob.DriveCycles[i].Name
	}
	prob.Name = id

	job, err := s.cal.reserve(id)
	if err != nil {
		return nil, err
	}
	started := false
	defer func() {
		if !started {
			s.cal.release(job)
		}
	}()
	var tok [8]byte
	rand.Read(tok[:])
	in := calInput{Token: hex.EncodeToString(tok[:])}
	if in.Settings, err = protoJSON(req.GetSettings()); err != nil {
		return nil, err
	}
	for _, t := range tests {
		in.Tests = append(in.Tests, calTestInfo{Test: t.label, Kind: kindName(t.kind), Samples: t.rec.Len()})
	}
	blob, err := json.Marshal(in)
	if err != nil {
		return nil, fmt.Errorf("encoding calibration input: %w", err)
	}
	start := time.Now()
	c, err := s.store.CreateCalibration(ctx, tenant(ctx), store.Calibration{
		ID: id, DisplayName: req.GetDisplayName(), Status: store.CalibrationPending, Input: blob,
	}, req.GetRequestId())
	s.metrics.observeStore(ctx, "CreateCalibration", start)
	if err != nil {
		return nil, resourceErr(err, calibrationName(id))
	}
	var stored calInput
	if err := json.Unmarshal(c.Input, &stored); err != nil || stored.Token != in.Token {
		// A replay of an earlier request id: that call's calibration, and no new job.
		return s.calibrationToPB(c)
	}
	job.problem, job.settings, job.tests = prob, settings, tests
	s.cal.start(s, job, c)
	started = true
	return s.calibrationToPB(c)
}

func kindName(k pb.CalibrationTestKind) string {
	return strings.TrimPrefix(k.String(), "CALIBRATION_TEST_KIND_")
}

func (h *calibrationServer) GetCalibration(ctx context.Context, req *pb.GetCalibrationRequest) (*pb.GetCalibrationResponse, error) {
	c, err := h.s.getCalibration(ctx, req.GetName())
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.GetCalibrationResponse{Calibration: c}, nil
}

func (s *Service) getCalibration(ctx context.Context, name string) (*pb.Calibration, error) {
	id, err := parseName("name", name, collCalibrations)
	if err != nil {
		return nil, err
	}
	c, err := s.readCalibration(ctx, id)
	if err != nil {
		return nil, err
	}
	c, err = s.expireIfLost(ctx, c)
	if err != nil {
		return nil, err
	}
	return s.calibrationToPB(c)
}

func (s *Service) readCalibration(ctx context.Context, id string) (store.Calibration, error) {
	defer s.metrics.observeStore(ctx, "GetCalibration", time.Now())
	c, err := s.store.GetCalibration(ctx, tenant(ctx), id)
	return c, resourceErr(err, calibrationName(id))
}

func (h *calibrationServer) ListCalibrations(ctx context.Context, req *pb.ListCalibrationsRequest) (*pb.ListCalibrationsResponse, error) {
	resp, err := h.list(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return resp, nil
}

func (h *calibrationServer) list(ctx context.Context, req *pb.ListCalibrationsRequest) (*pb.ListCalibrationsResponse, error) {
	size, err := pageSize(req.GetPageSize())
	if err != nil {
		return nil, err
	}
	start := time.Now()
	cs, next, err := h.s.store.ListCalibrations(ctx, tenant(ctx), store.PageRequest{Size: size, Token: req.GetPageToken()})
	h.s.metrics.observeStore(ctx, "ListCalibrations", start)
	if err != nil {
		return nil, err
	}
	resp := &pb.ListCalibrationsResponse{NextPageToken: next}
	for _, c := range cs {
		pc, err := h.s.calibrationToPB(c)
		if err != nil {
			return nil, err
		}
		resp.Calibrations = append(resp.Calibrations, pc)
	}
	return resp, nil
}

func (h *calibrationServer) DeleteCalibration(ctx context.Context, req *pb.DeleteCalibrationRequest) (*pb.DeleteCalibrationResponse, error) {
	if err := h.s.deleteCalibration(ctx, req.GetName()); err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.DeleteCalibrationResponse{}, nil
}

func (s *Service) deleteCalibration(ctx context.Context, name string) error {
	id, err := parseName("name", name, collCalibrations)
	if err != nil {
		return err
	}
	defer s.metrics.observeStore(ctx, "DeleteCalibration", time.Now())
	if err := s.store.DeleteCalibration(ctx, tenant(ctx), id, store.AnyVersion); err != nil {
		return resourceErr(err, calibrationName(id))
	}
	// A job of this server stops at once; one of another replica stops at its next
	// heartbeat, which finds the row gone.
	s.cal.cancel(id, errCalDeleted)
	return nil
}

func (h *calibrationServer) CancelCalibration(ctx context.Context, req *pb.CancelCalibrationRequest) (*pb.CancelCalibrationResponse, error) {
	c, err := h.s.cancelCalibration(ctx, req.GetName())
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.CancelCalibrationResponse{Calibration: c}, nil
}

// cancelCalibration writes CANCELLED by compare-and-swap (retrying when a heartbeat
// moved the version), then stops this server's job if it runs here; a job of another
// replica stops at its next heartbeat, which finds the row changed.
func (s *Service) cancelCalibration(ctx context.Context, name string) (*pb.Calibration, error) {
	id, err := parseName("name", name, collCalibrations)
	if err != nil {
		return nil, err
	}
	for range 5 {
		c, err := s.readCalibration(ctx, id)
		if err != nil {
			return nil, err
		}
		if terminal(c.Status) {
			return s.calibrationToPB(c)
		}
		c.Status, c.Error = store.CalibrationCancelled, ""
		start := time.Now()
		u, err := s.store.UpdateCalibration(ctx, tenant(ctx), c, c.Version)
		s.metrics.observeStore(ctx, "UpdateCalibration", start)
		if errors.Is(err, store.ErrConflict) {
			continue
		}
		if err != nil {
			return nil, resourceErr(err, calibrationName(id))
		}
		s.cal.cancel(id, errCalCancelled)
		return s.calibrationToPB(u)
	}
	return nil, resourceErr(store.ErrConflict, calibrationName(id))
}

func terminal(st store.CalibrationStatus) bool {
	switch st {
	case store.CalibrationSucceeded, store.CalibrationFailed, store.CalibrationCancelled:
		return true
	}
	return false
}

var calStateToPB = map[store.CalibrationStatus]pb.CalibrationState{
	store.CalibrationPending:   pb.CalibrationState_CALIBRATION_STATE_PENDING,
	store.CalibrationRunning:   pb.CalibrationState_CALIBRATION_STATE_RUNNING,
	store.CalibrationSucceeded: pb.CalibrationState_CALIBRATION_STATE_SUCCEEDED,
	store.CalibrationFailed:    pb.CalibrationState_CALIBRATION_STATE_FAILED,
	store.CalibrationCancelled: pb.CalibrationState_CALIBRATION_STATE_CANCELLED,
}

// calErrorReason matches the "REASON: message" form the runner stores failures in.
var calErrorReason = regexp.MustCompile(`^([A-Z][A-Z_]*): (.*)$`)

// calibrationToPB converts a stored calibration.
func (s *Service) calibrationToPB(c store.Calibration) (*pb.Calibration, error) {
	out := &pb.Calibration{
		Name:        calibrationName(c.ID),
		DisplayName: c.DisplayName,
		State:       calStateToPB[c.Status],
		CreateTime:  timestamppb.New(c.CreateTime),
	}
	if terminal(c.Status) {
		out.EndTime = timestamppb.New(c.UpdateTime)
	}
	switch c.Status {
	case store.CalibrationFailed:
		out.Error = &pb.CalibrationError{Reason: "INTERNAL", Message: c.Error}
		if m := calErrorReason.FindStringSubmatch(c.Error); m != nil {
			out.Error.Reason, out.Error.Message = m[1], m[2]
		}
	case store.CalibrationSucceeded:
		var rep calReport
		if err := json.Unmarshal(c.Report, &rep); err != nil {
			return nil, fmt.Errorf("calibration %s: decoding stored report: %w", c.ID, err)
		}
		t, err := decodeType(store.BatteryType{Name: c.ID, Parameters: rep.Type})
		if err != nil {
			return nil, fmt.Errorf("calibration %s: %w", c.ID, err)
		}
		out.BatteryType = typeToPB(t, "")
		out.Report = &pb.CalibrationReport{
			VoltageRmseVolts: rep.RMSE, MaxVoltageErrorVolts: rep.Max, SampleCount: int32(rep.Samples),
			IterationCount: int32(rep.Iterations), Notes: rep.Notes,
		}
		for _, tr := range rep.Tests {
			out.Report.Tests = append(out.Report.Tests, &pb.CalibrationTestReport{
				Test: tr.Test, Kind: pb.CalibrationTestKind(pb.CalibrationTestKind_value["CALIBRATION_TEST_KIND_"+tr.Kind]),
				SampleCount: int32(tr.Samples), VoltageRmseVolts: tr.RMSE, MaxVoltageErrorVolts: tr.Max, Method: tr.Method,
			})
		}
	}
	return out, nil
}

// fittedType returns the type fitted by a succeeded calibration, and its id.
func (s *Service) fittedType(ctx context.Context, field, name string) (*cell.Type, string, error) {
	id, err := parseName(field, name, collCalibrations)
	if err != nil {
		return nil, "", err
	}
	c, err := s.readCalibration(ctx, id)
	if errors.Is(err, store.ErrNotFound) {
		return nil, "", &Error{Code: codes.NotFound, Reason: ReasonNotFound, Msg: name + " not found", Resource: name, Err: err}
	}
	if err != nil {
		return nil, "", err
	}
	if c.Status != store.CalibrationSucceeded {
		return nil, "", &Error{Code: codes.FailedPrecondition, Reason: ReasonNotReady, Resource: name,
			Msg:        "the calibration has not succeeded (it is " + strings.ToUpper(string(c.Status)) + ")",
			Violations: []Violation{{Field: ReasonNotReady, Description: "only a SUCCEEDED calibration has a fitted type"}}}
	}
	var rep calReport
	if err := json.Unmarshal(c.Report, &rep); err != nil {
		return nil, "", fmt.Errorf("calibration %s: decoding stored report: %w", c.ID, err)
	}
	t, err := decodeType(store.BatteryType{Name: c.ID, Parameters: rep.Type})
	return t, id, err
}
