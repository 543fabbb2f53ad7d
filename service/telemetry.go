package service

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"time"

	"go.opentelemetry.io/otel/attribute"
	"go.opentelemetry.io/otel/metric"
	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/estimate"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

type telemetryServer struct {
	pb.UnimplementedTelemetryServiceServer
	s *Service
}

// maxRejectionsListed caps the rejections listed per block (all are counted).
const maxRejectionsListed = 100

// maxHoldSeconds is the longest interval a sample's current is counted for in the
// equivalent-cycle count, the estimator's default MaxHold: a longer gap is a rest.
const maxHoldSeconds = 60

func blockSamples(b *pb.SampleBlock) int { return len(b.GetTimeOffsetsSeconds()) }

func (h *telemetryServer) IngestTelemetry(ctx context.Context, req *pb.IngestTelemetryRequest) (*pb.IngestTelemetryResponse, error) {
	resp, err := h.ingest(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return resp, nil
}

func (h *telemetryServer) ingest(ctx context.Context, req *pb.IngestTelemetryRequest) (*pb.IngestTelemetryResponse, error) {
	lim := h.s.limits
	if n := len(req.GetBlocks()); n > lim.MaxBatchBlocks {
		return nil, tooLarge("blocks", "at most %d blocks per call, got %d", lim.MaxBatchBlocks, n)
	}
	total := 0
	for _, b := range req.GetBlocks() {
		total += max(blockSamples(b), len(b.GetCurrentAmps()), len(b.GetVoltageVolts()), len(b.GetSequenceNumbers()), len(b.GetTemperatureCelsius()))
	}
	if total > lim.MaxBatchSamples {
		return nil, tooLarge("blocks", "at most %d samples per call, got %d", lim.MaxBatchSamples, total)
	}
	resp := &pb.IngestTelemetryResponse{Results: make([]*pb.BlockResult, len(req.GetBlocks()))}
	for i, b := range req.GetBlocks() {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		resp.Results[i] = h.s.applyBlock(ctx, fmt.Sprintf("blocks[%d]", i), b)
	}
	return resp, nil
}

// persistTimeout bounds a write-behind persist that runs on a context detached from
// its request (or stream).
const persistTimeout = 10 * time.Second

func tooLarge(field, format string, args ...any) *Error {
	e := invalid(field, format, args...)
	e.Reason = ReasonRequestTooLarge
	e.Msg = "request too large"
	return e
}

func (h *telemetryServer) StreamTelemetry(stream pb.TelemetryService_StreamTelemetryServer) error {
	ctx := stream.Context()
	touched := map[string]bool{}
	defer func() {
		// Persist what this stream applied (on close, as documented), with a context
		// that outlives the stream's: the samples are acknowledged already.
		fctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), persistTimeout)
		defer cancel()
		for id := range touched {
			if err := h.s.persistNow(fctx, id); err != nil {
				h.s.log.WarnContext(ctx, "persisting battery state at stream end", "battery", id, "error", err.Error())
			}
		}
	}()
	for {
		req, err := stream.Recv()
		if errors.Is(err, io.EOF) {
			return nil
		}
		if err != nil {
			return err // already a status from the transport
		}
		var res *pb.BlockResult
		if n := blockSamples(req.GetBlock()); n > h.s.limits.MaxBatchSamples {
			res = blockError(ctx, h.s, "block", tooLarge("block.time_offsets_seconds", "at most %d samples per message, got %d", h.s.limits.MaxBatchSamples, n))
			res.Battery = req.GetBlock().GetBattery()
		} else {
			res = h.s.applyBlock(ctx, "block", req.GetBlock())
			if res.Error == nil {
				if id, err := parseName("battery", res.Battery, collBatteries); err == nil {
					touched[id] = true
				}
			}
		}
		if err := stream.Send(&pb.StreamTelemetryResponse{Result: res}); err != nil {
			return err
		}
	}
}

// persistNow persists a battery's pending samples, if it is tracked and has any.
func (s *Service) persistNow(ctx context.Context, id string) error {
	s.tr.mu.Lock()
	e, ok := s.tr.entries[id]
	s.tr.mu.Unlock()
	if !ok {
		return nil
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.gone || e.pending == 0 {
		return nil
	}
	return s.persist(ctx, e)
}

// blockError turns an error into the per-block error of a result, with the same code
// and reason the call would have failed with.
func blockError(ctx context.Context, s *Service, field string, err error) *pb.BlockResult {
	st := status.Convert(toStatus(ctx, s.log, err, field))
	be := &pb.BlockError{Code: codeName(st.Code()), Message: st.Message()}
	for _, d := range st.Details() {
		switch d := d.(type) {
		case *errdetails.ErrorInfo:
			be.Reason = d.GetReason()
		case *errdetails.BadRequest:
			if len(d.GetFieldViolations()) > 0 {
				be.Field = d.GetFieldViolations()[0].GetField()
			}
		}
	}
	return &pb.BlockResult{Error: be}
}

// codeName returns the canonical UPPER_SNAKE name of a gRPC code.
func codeName(c codes.Code) string {
	names := [...]string{"OK", "CANCELLED", "UNKNOWN", "INVALID_ARGUMENT", "DEADLINE_EXCEEDED", "NOT_FOUND",
		"ALREADY_EXISTS", "PERMISSION_DENIED", "RESOURCE_EXHAUSTED", "FAILED_PRECONDITION", "ABORTED",
		"OUT_OF_RANGE", "UNIMPLEMENTED", "INTERNAL", "UNAVAILABLE", "DATA_LOSS", "UNAUTHENTICATED"}
	if int(c) < len(names) {
		return names[c]
	}
	return "UNKNOWN"
}

// checkBlockShape validates what makes a block unusable as a whole.
func checkBlockShape(field string, b *pb.SampleBlock) error {
	var v violations
	if b == nil {
		v.add(field, "is required")
		return v.err()
	}
	n := blockSamples(b)
	if b.GetBaseTime() == nil && n > 0 {
		v.add(field+".base_time", "is required")
	} else if b.GetBaseTime() != nil {
		if err := b.GetBaseTime().CheckValid(); err != nil {
			v.add(field+".base_time", "not a valid timestamp: %v", err)
		}
	}
	for _, a := range []struct {
		name string
		n    int
	}{{"current_amps", len(b.GetCurrentAmps())}, {"voltage_volts", len(b.GetVoltageVolts())}} {
		if a.n != n {
			v.add(field+"."+a.name, "need one value per sample (%d, the length of time_offsets_seconds), got %d", n, a.n)
		}
	}
	if k := len(b.GetSequenceNumbers()); k != 0 && k != n {
		v.add(field+".sequence_numbers", "need one per sample (%d) or none, got %d", n, k)
	}
	if k := len(b.GetTemperatureCelsius()); k > 1 && k != n {
		v.add(field+".temperature_celsius", "need one per sample (%d), one for the block, or none, got %d", n, k)
	}
	return v.err()
}

// applyBlock applies one block to its battery's estimate and reports what happened.
// It never fails as a whole: problems of the block come back as its Error.
func (s *Service) applyBlock(ctx context.Context, field string, b *pb.SampleBlock) *pb.BlockResult {
	if err := checkBlockShape(field, b); err != nil {
		r := blockError(ctx, s, "", err)
		r.Battery = b.GetBattery()
		return r
	}
	id, err := parseName(field+".battery", b.GetBattery(), collBatteries)
	if err != nil {
		r := blockError(ctx, s, "", err)
		r.Battery = b.GetBattery()
		return r
	}
	e, err := s.acquire(ctx, id)
	if err != nil {
		r := blockError(ctx, s, "", err)
		r.Battery = b.GetBattery()
		return r
	}
	defer e.mu.Unlock()
	res := &pb.BlockResult{Battery: b.GetBattery()}
	s.applySamples(ctx, e, b, res)
	if res.AppliedCount > 0 {
		s.metrics.samplesApplied.Add(ctx, int64(res.AppliedCount))
	}
	if res.DuplicateCount > 0 {
		s.metrics.samplesDuplicate.Add(ctx, int64(res.DuplicateCount))
	}
	e.pending += int(res.AppliedCount)
	if e.pending > 0 && (e.pending >= s.limits.PersistEverySamples || s.now().Sub(e.lastPersist) >= s.limits.PersistInterval) {
		// The write outlives the request: a caller that hangs up must not turn a
		// due persist into an ambiguous one (STYLE.md §4, detached writes).
		pctx, cancel := context.WithTimeout(context.WithoutCancel(ctx), persistTimeout)
		err := s.persist(pctx, e)
		cancel()
		if err != nil {
			// The samples are applied in memory; the durable watermark in the reply
			// tells the caller they are not yet safe.
			s.log.WarnContext(ctx, "persisting battery state", "battery", id, "error", err.Error())
		}
	}
	res.State = e.stateToPB()
	return res
}

func (s *Service) reject(ctx context.Context, res *pb.BlockResult, k int, seq int64, reason pb.SampleRejectionReason, format string, args ...any) {
	res.RejectedCount++
	s.metrics.samplesRejected.Add(ctx, 1, metric.WithAttributes(attribute.String("reason", reason.String())))
	if len(res.Rejections) < maxRejectionsListed {
		res.Rejections = append(res.Rejections, &pb.SampleRejection{Index: int32(k), SequenceNumber: seq, Reason: reason, Message: fmt.Sprintf(format, args...)})
	}
}

// applySamples runs the samples of b through the entry's estimator. The entry is locked.
func (s *Service) applySamples(ctx context.Context, e *entry, b *pb.SampleBlock, res *pb.BlockResult) {
	n := blockSamples(b)
	if n == 0 {
		return
	}
	base := b.GetBaseTime().AsTime()
	seqs, temps := b.GetSequenceNumbers(), b.GetTemperatureCelsius()
	ratedAh := e.pack.RatedCapacityAh()
	for k := range n {
		off, cur, volt := b.GetTimeOffsetsSeconds()[k], b.GetCurrentAmps()[k], b.GetVoltageVolts()[k]
		tc := e.st.LastTemperatureC
		if !e.st.Initialized && tc == 0 {
			tc = 25
		}
		switch len(temps) {
		case 1:
			tc = temps[0]
		case n:
			tc = temps[k]
		}
		// An explicit sequence number names the sample even when its time offset is
		// unusable, so that the rejection tells the caller which sample it was.
		var seq int64
		if len(seqs) > 0 {
			seq = seqs[k]
		}
		if !cell.Finite(off) {
			s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_NOT_FINITE, "time offset is %g", off)
			continue
		}
		if off < 0 || off > 1e9 {
			s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_OUT_OF_RANGE, "time offset must be 0 to 1e9 s, got %g", off)
			continue
		}
		t := base.Add(time.Duration(math.Round(off * 1e9)))
		if len(seqs) == 0 {
			seq = t.UnixMicro()
		}
		switch {
		case seq <= 0:
			s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_OUT_OF_RANGE, "sequence number must be positive, got %d", seq)
			continue
		case seq <= e.applied.Sequence:
			res.DuplicateCount++
			continue
		case !cell.Finite(cur) || !cell.Finite(volt) || !cell.Finite(tc):
			s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_NOT_FINITE, "current %g A, voltage %g V, temperature %g °C: all must be finite", cur, volt, tc)
			continue
		case volt <= 0:
			s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_OUT_OF_RANGE, "voltage must be positive, got %g V", volt)
			continue
		case tc < -60 || tc > 100:
			s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_OUT_OF_RANGE, "temperature %g °C is outside -60 to 100 °C", tc)
			continue
		case !e.applied.Time.IsZero() && !t.After(e.applied.Time):
			s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_TIME_BACKWARDS,
				"sample time %s is not after the last applied sample %s", t.Format(time.RFC3339Nano), e.applied.Time.Format(time.RFC3339Nano))
			continue
		}
		tk := cell.Kelvin(tc)
		sample := estimate.Sample{Time: float64(t.UnixNano()) / 1e9, Current: cur, Voltage: volt, Temperature: tk}
		// The state before the sample, put back if the sample would leave a
		// non-finite state behind (which could then never be persisted).
		prev := e.ekf.State()
		if !e.st.Initialized {
			if err := e.ekf.InitFromVoltage(volt, tk); err != nil {
				s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_OUT_OF_RANGE, "cannot initialise the estimate from this voltage: %v", err)
				continue
			}
		}
		est, err := e.ekf.Update(sample)
		if err == nil {
			// Restoring the filter's own state runs the model's check of a usable
			// state, the one load applies to a stored state: a state it refuses
			// (not finite, or an RC voltage beyond what any cell holds) would be
			// persisted but never load again.
			if cerr := e.ekf.Restore(e.ekf.State()); cerr != nil {
				err = fmt.Errorf("the sample would leave an unusable estimate: %w", cerr)
			}
		}
		if err != nil {
			if rerr := e.ekf.Restore(prev); rerr != nil {
				panic("service: restoring the estimator's own state: " + rerr.Error())
			}
			s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_OUT_OF_RANGE, "%v", err)
			continue
		}
		if est.Flags&estimate.FlagInvalid != 0 {
			s.reject(ctx, res, k, seq, pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_OUT_OF_RANGE, "reading is saturated or outside the sensor range")
			continue
		}
		if est.Flags&estimate.FlagRejected != 0 {
			// The prediction (charge counting) was applied and the watermark moves on;
			// only the voltage was discarded by the innovation gate. So the sample
			// counts as applied, and is reported as an outlier besides (telemetry.proto,
			// BlockResult.outliers): calling it rejected would promise that it changed
			// nothing, and a resend would not apply it again anyway.
			res.OutlierCount++
			s.metrics.samplesOutlier.Add(ctx, 1)
			if len(res.Outliers) < maxRejectionsListed {
				res.Outliers = append(res.Outliers, &pb.SampleRejection{Index: int32(k), SequenceNumber: seq,
					Reason:  pb.SampleRejectionReason_SAMPLE_REJECTION_REASON_OUTLIER,
					Message: fmt.Sprintf("voltage %g V is %.1f standard deviations from the predicted %g V; the voltage was discarded, the current applied", volt, math.Abs(est.Innovation/est.InnovationSigma), est.Voltage)})
			}
		}
		if est.InnovationSigma > 0 && cell.Finite(est.Innovation) {
			s.metrics.innovation.Record(ctx, est.Innovation/est.InnovationSigma)
		}
		if e.st.Initialized && cur > 0 && !e.applied.Time.IsZero() {
			dt := math.Min(t.Sub(e.applied.Time).Seconds(), maxHoldSeconds)
			e.st.EquivalentCycles += cur * dt / 3600 / ratedAh
		}
		e.st.Initialized = true
		e.st.LastCurrentAmps, e.st.LastVoltageVolts, e.st.LastTemperatureC = cur, volt, tc
		e.st.LastSampleUnixSec = sample.Time
		e.applied.Sequence, e.applied.Time = seq, t
		res.AppliedCount++
	}
}
