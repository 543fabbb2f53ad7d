package service

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strings"
	"sync"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/proto"

	"github.com/voltcast/voltcast/model/fit"
	"github.com/voltcast/voltcast/service/store"
)

// The calibration runner runs fits (model/fit) in a bounded pool of background
// workers: Limits.CalibrationWorkers fits at a time and Limits.CalibrationQueue more
// waiting (PENDING); CreateCalibration beyond that is RESOURCE_EXHAUSTED before
// anything is stored.
//
// # What survives what
//
// Nothing of a fit survives its server: the test data lives only in the job's
// memory (the store keeps a summary of the request, not the data). So:
//
//   - On shutdown ([Service.Close]) every job of this server is cancelled and ends
//     FAILED with reason INTERRUPTED ("submit it again").
//   - A job, waiting or running, renews a lease by writing its row (a heartbeat,
//     compare-and-swap on the version) every Limits.CalibrationLease/4. A PENDING or
//     RUNNING row that
//     no job of this server holds and that has not been written for longer than the
//     lease belongs to a server that died: GetCalibration, the periodic sweep in
//     [Service.Run] and [Service.RecoverCalibrations] mark it FAILED with reason
//     WORKER_LOST. With the embedded store one process owns the file, so voltcastd
//     calls RecoverCalibrations at startup with the start time as the cut-off and every
//     job left RUNNING by the previous process fails at once; with PostgreSQL other
//     replicas may be running fits, so it waits for their lease to lapse instead.
//   - Cancelling or deleting from any replica changes the row; the job's next
//     heartbeat finds the version moved (or the row gone) and stops the fit.
//
// Every state change is a compare-and-swap, so a stale writer (a job declared lost
// that still finishes) can never overwrite what another writer decided.

// Causes of a job's cancellation.
var (
	errCalCancelled = errors.New("calibration cancelled")
	errCalDeleted   = errors.New("calibration deleted")
	errCalShutdown  = errors.New("server shutting down")
	errCalLost      = errors.New("calibration row changed by another writer")
)

// calJob is one fit of this server.
type calJob struct {
	id       string
	problem  *fit.Problem
	settings *fit.Settings
	tests    []calTest
	ctx      context.Context
	cancel   context.CancelCauseFunc

	finished chan struct{} // closed when the job is done

	mu  sync.Mutex
	row store.Calibration // the row as this job last wrote or read it (Version included)
}

// calRunner holds this server's calibration jobs.
type calRunner struct {
	workers, queue int
	lease          time.Duration

	mu       sync.Mutex
	jobs     map[string]*calJob // queued or running, by id
	reserved int                // slots taken by calls that have not started their job yet
	ch       chan *calJob
	closed   bool
	started  bool
	wg       sync.WaitGroup
}

func newCalRunner(l Limits) *calRunner {
	return &calRunner{workers: l.CalibrationWorkers, queue: l.CalibrationQueue, lease: l.CalibrationLease,
		jobs: map[string]*calJob{}, ch: make(chan *calJob, l.CalibrationWorkers+l.CalibrationQueue)}
}

// reserve takes a slot for a new job, before anything is stored, or fails with
// RESOURCE_EXHAUSTED (queue full) or UNAVAILABLE (shutting down). The caller either
// starts the job ([calRunner.start]) or releases the slot ([calRunner.release]).
func (r *calRunner) reserve(id string) (*calJob, error) {
	r.mu.Lock()
	defer r.mu.Unlock()
	switch {
	case r.closed:
		return nil, &Error{Code: codes.Unavailable, Reason: ReasonUnavailable, Msg: "the server is shutting down; submit the calibration to another replica or retry"}
	case len(r.jobs)+r.reserved >= r.workers+r.queue:
		return nil, &Error{Code: codes.ResourceExhausted, Reason: ReasonQueueFull,
			Msg: fmt.Sprintf("all %d calibration workers are busy and %d calibrations wait; retry later", r.workers, r.queue)}
	}
	r.reserved++
	ctx, cancel := context.WithCancelCause(context.Background())
	return &calJob{id: id, ctx: ctx, cancel: cancel, finished: make(chan struct{})}, nil
}

// release gives up a reserved slot whose job never started (the request failed, or
// replayed an earlier request id).
func (r *calRunner) release(j *calJob) {
	r.mu.Lock()
	defer r.mu.Unlock()
	r.reserved--
	j.cancel(nil)
}

// start queues a reserved job, whose row c was just created, starts its heartbeat,
// and starts the workers on first use. The channel has room for every reserved job,
// so this never blocks. When Close ran since the job was reserved, the job ends at
// once, FAILED (INTERRUPTED), written by the caller.
func (r *calRunner) start(s *Service, j *calJob, c store.Calibration) {
	j.row = c
	r.mu.Lock()
	r.reserved--
	r.jobs[j.id] = j
	if r.closed {
		// No new goroutines after Close (its Wait may be under way).
		r.mu.Unlock()
		j.cancel(errCalShutdown)
		s.runCalibration(j)
		return
	}
	defer r.mu.Unlock()
	r.wg.Go(func() { s.heartbeat(j) })
	if !r.started {
		r.started = true
		for range r.workers {
			r.wg.Go(func() {
				for j := range r.ch {
					s.runCalibration(j)
				}
			})
		}
	}
	r.ch <- j
}

// cancel stops this server's job of that id, if there is one.
func (r *calRunner) cancel(id string, cause error) {
	r.mu.Lock()
	j := r.jobs[id]
	r.mu.Unlock()
	if j != nil {
		j.cancel(cause)
	}
}

// local reports whether a job of that id belongs to this server.
func (r *calRunner) local(id string) bool {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.jobs[id] != nil
}

func (r *calRunner) done(j *calJob) {
	r.mu.Lock()
	defer r.mu.Unlock()
	if r.jobs[j.id] == j {
		delete(r.jobs, j.id)
	}
	close(j.finished)
	j.cancel(nil)
}

// Close cancels every calibration job of this server and waits until each has written
// its final state (FAILED, reason INTERRUPTED), or ctx ends. New calibrations are
// refused from now on. Call it during shutdown, before closing the store.
func (s *Service) Close(ctx context.Context) error {
	r := s.cal
	r.mu.Lock()
	if !r.closed {
		r.closed = true
		close(r.ch)
	}
	for _, j := range r.jobs {
		j.cancel(errCalShutdown)
	}
	r.mu.Unlock()
	done := make(chan struct{})
	go func() { r.wg.Wait(); close(done) }()
	select {
	case <-done:
		return nil
	case <-ctx.Done():
		return fmt.Errorf("waiting for calibration jobs to stop: %w", ctx.Err())
	}
}

// writeCalibration writes c by compare-and-swap on the version of the job's row and
// records the new row. ctx should outlive the fit (the final write must happen even
// when the fit was cancelled).
func (s *Service) writeCalibration(ctx context.Context, j *calJob, c store.Calibration) error {
	j.mu.Lock()
	defer j.mu.Unlock()
	return s.writeLocked(ctx, j, c)
}

// writeLocked is writeCalibration with j.mu held.
//
// A write that fails may still have been committed (a timeout after the database
// applied it), leaving the job's version stale. So on any failure but NotFound the
// row is read again: while it is still PENDING or RUNNING, no one but this job has
// written it (others only end a row: cancel, expire), so its version is the job's own
// and the write is retried once with it. A row that has ended stays as it is, and the
// error (ErrConflict) says so.
func (s *Service) writeLocked(ctx context.Context, j *calJob, c store.Calibration) error {
	var err error
	for attempt := 0; attempt < 2; attempt++ {
		start := time.Now()
		var u store.Calibration
		u, err = s.store.UpdateCalibration(ctx, tenant(ctx), c, j.row.Version)
		s.metrics.observeStore(ctx, "UpdateCalibration", start)
		if err == nil {
			j.row = u
			return nil
		}
		if errors.Is(err, store.ErrNotFound) {
			return err
		}
		cur, rerr := s.store.GetCalibration(ctx, tenant(ctx), j.id)
		if rerr != nil {
			return errors.Join(err, rerr)
		}
		if terminal(cur.Status) {
			return fmt.Errorf("calibration %s ended %s meanwhile: %w", j.id, cur.Status, store.ErrConflict)
		}
		j.row.Version = cur.Version
	}
	return err
}

// runCalibration runs one job to its end and writes the outcome.
func (s *Service) runCalibration(j *calJob) {
	defer s.cal.done(j)
	// Writes use a context of their own: the job's ends when it is cancelled, and the
	// final state must still be written.
	wctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	j.mu.Lock()
	c := j.row
	j.mu.Unlock()
	if j.ctx.Err() == nil {
		c.Status = store.CalibrationRunning
		if err := s.writeCalibration(wctx, j, c); err != nil {
			if !errors.Is(err, store.ErrConflict) && !errors.Is(err, store.ErrNotFound) {
				s.log.WarnContext(wctx, "calibration: cannot mark running; dropping the job", "calibration", j.id, "error", err.Error())
			}
			return // deleted or ended (cancelled, expired) before it started
		}
		if s.calHook != nil {
			s.calHook(j.id)
		}
		res, iterations, err := runFit(j)
		if err == nil {
			c.Status, c.Error = store.CalibrationSucceeded, ""
			if c.Report, err = calReportJSON(j, res, iterations); err == nil {
				err = s.writeCalibration(wctx, j, c)
				if err != nil && !errors.Is(err, store.ErrConflict) && !errors.Is(err, store.ErrNotFound) {
					s.log.WarnContext(wctx, "calibration: result not written", "calibration", j.id, "error", err.Error())
				}
				return
			}
		}
		if j.ctx.Err() == nil {
			s.failCalibration(wctx, j, c, fitFailure(err))
			return
		}
	}
	switch cause := context.Cause(j.ctx); {
	case errors.Is(cause, errCalShutdown):
		s.failCalibration(wctx, j, c, "INTERRUPTED: the server stopped before the fit finished; submit it again")
	case errors.Is(cause, errCalCancelled), errors.Is(cause, errCalDeleted), errors.Is(cause, errCalLost):
		// Whoever cancelled, deleted or took over the row has written its state.
	}
}

// failCalibration writes FAILED with msg ("REASON: detail"), unless the row has ended
// otherwise meanwhile.
func (s *Service) failCalibration(ctx context.Context, j *calJob, c store.Calibration, msg string) {
	c.Status, c.Report = store.CalibrationFailed, nil
	c.Error = truncate(msg, store.MaxErrorBytes-8)
	if err := s.writeCalibration(ctx, j, c); err != nil && !errors.Is(err, store.ErrConflict) && !errors.Is(err, store.ErrNotFound) {
		s.log.WarnContext(ctx, "calibration: failure not written", "calibration", j.id, "error", err.Error())
	}
}

// fitFailure turns a fit error into the stored "REASON: detail".
func fitFailure(err error) string {
	if errors.Is(err, fit.ErrData) {
		return "UNUSABLE_DATA: " + err.Error()
	}
	return "FIT_FAILED: " + err.Error()
}

// runFit runs the model and counts the refinement iterations it reports.
func runFit(j *calJob) (*fit.Result, int, error) {
	set := *j.settings
	iterations := 0
	set.Progress = func(p fit.Progress) {
		if p.Stage == "refine" {
			iterations = max(iterations, p.Done)
		}
	}
	res, err := fit.Fit(j.ctx, j.problem, &set)
	return res, iterations, err
}

// heartbeat renews the job's lease, rewriting its current row, from when it is queued
// until it is done. When the row has ended or gone (cancelled, deleted, or declared
// lost by another replica) it stops the job.
func (s *Service) heartbeat(j *calJob) {
	t := time.NewTicker(s.cal.lease / 4)
	defer t.Stop()
	for {
		select {
		case <-j.finished:
			return
		case <-j.ctx.Done():
			return
		case <-t.C:
			ctx, cancel := context.WithTimeout(j.ctx, s.cal.lease/2)
			j.mu.Lock()
			var err error
			if !terminal(j.row.Status) {
				err = s.writeLocked(ctx, j, j.row)
			}
			j.mu.Unlock()
			cancel()
			switch {
			case errors.Is(err, store.ErrConflict), errors.Is(err, store.ErrNotFound):
				j.cancel(errCalLost)
				return
			case err != nil && j.ctx.Err() == nil:
				s.log.WarnContext(j.ctx, "calibration: heartbeat failed", "calibration", j.id, "error", err.Error())
			}
		}
	}
}

// calReportJSON encodes the fitted type and the report for the store.
func calReportJSON(j *calJob, res *fit.Result, iterations int) ([]byte, error) {
	typ, err := json.Marshal(res.Type)
	if err != nil {
		return nil, fmt.Errorf("encoding the fitted type: %w", err)
	}
	rep := calReport{Type: typ, Iterations: iterations, Notes: append([]string(nil), res.Report.Notes...)}
	byName := map[string]calTest{}
	for _, t := range j.tests {
		byName[t.label] = t
	}
	var ss float64
	for _, fr := range res.Report.Files {
		label := fr.Name
		if _, after, ok := strings.Cut(fr.Name, " "); ok {
			label = after // "calibrations/{id} tests[0]" → "tests[0]"
		}
		rep.Tests = append(rep.Tests, calTestReport{Test: label, Kind: kindName(byName[label].kind),
			Samples: fr.Samples, RMSE: fr.RMSE, Max: fr.Max, Method: fr.How})
		rep.Samples += fr.Samples
		ss += fr.RMSE * fr.RMSE * float64(fr.Samples)
		rep.Max = math.Max(rep.Max, fr.Max)
	}
	if rep.Samples > 0 {
		rep.RMSE = math.Sqrt(ss / float64(rep.Samples))
	}
	if q, rated := res.Type.CapacityAh, j.problem.Base.CapacityAh; rated > 0 && math.Abs(q/rated-1) > 0.2 {
		rep.Notes = append(rep.Notes, fmt.Sprintf("the fitted capacity %.4g Ah differs from the base type's %.4g Ah by more than 20 %%", q, rated))
	}
	return json.Marshal(rep)
}

// expireIfLost marks a PENDING or RUNNING calibration that no job of this server
// holds and whose lease lapsed as FAILED (WORKER_LOST), and returns the row as it now
// is.
func (s *Service) expireIfLost(ctx context.Context, c store.Calibration) (store.Calibration, error) {
	if terminal(c.Status) || s.cal.local(c.ID) || s.now().Sub(c.UpdateTime) <= s.cal.lease {
		return c, nil
	}
	return s.expire(ctx, c)
}

func (s *Service) expire(ctx context.Context, c store.Calibration) (store.Calibration, error) {
	c.Status, c.Report = store.CalibrationFailed, nil
	c.Error = "WORKER_LOST: the server running the fit stopped reporting progress (it stopped or died); submit it again"
	start := time.Now()
	u, err := s.store.UpdateCalibration(ctx, tenant(ctx), c, c.Version)
	s.metrics.observeStore(ctx, "UpdateCalibration", start)
	if errors.Is(err, store.ErrConflict) {
		// Someone wrote it meanwhile (its job is alive after all, or another sweep won).
		return s.readCalibration(ctx, c.ID)
	}
	if err != nil {
		return c, resourceErr(err, calibrationName(c.ID))
	}
	s.log.InfoContext(ctx, "calibration: marked failed, worker lost", "calibration", c.ID)
	return u, nil
}

// RecoverCalibrations marks FAILED (reason WORKER_LOST) every PENDING or RUNNING
// calibration that no job of this server holds and that was last written before
// before. voltcastd calls it at startup: with the embedded store with its start time
// (the previous process's jobs cannot still run), with PostgreSQL with now minus the
// lease (other replicas' jobs may). It returns the number marked.
func (s *Service) RecoverCalibrations(ctx context.Context, before time.Time) (int, error) {
	n := 0
	page := store.PageRequest{Size: store.MaxPageSize}
	for {
		cs, next, err := s.store.ListCalibrations(ctx, tenant(ctx), page)
		if err != nil {
			return n, fmt.Errorf("listing calibrations: %w", err)
		}
		for _, c := range cs {
			if terminal(c.Status) || s.cal.local(c.ID) || !c.UpdateTime.Before(before) {
				continue
			}
			if _, err := s.expire(ctx, c); err != nil && !errors.Is(err, store.ErrNotFound) {
				return n, err
			}
			n++
		}
		if next == "" {
			return n, nil
		}
		page.Token = next
	}
}

// protoJSON encodes m with the API's JSON names, for stored summaries.
func protoJSON(m proto.Message) (json.RawMessage, error) {
	b, err := protojson.Marshal(m)
	if err != nil {
		return nil, fmt.Errorf("encoding %T: %w", m, err)
	}
	return b, nil
}
