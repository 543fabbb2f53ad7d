package service

import (
	"context"
	"errors"
	"fmt"
	"math"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/ageing"
	"github.com/voltcast/voltcast/model/cell"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service/store"
)

// Limits of AssessHealth.
const (
	// maxHealthPoints is the longest ad-hoc history (the API's documented limit).
	maxHealthPoints = 100000
	// maxTrendPoints is the most points handed to the model: longer stored histories
	// are merged pairwise (means of neighbours) until they fit, which keeps the
	// whole life in view at a bounded cost.
	maxTrendPoints = 2000
	// maxHealthRead caps the stored records read for one assessment.
	maxHealthRead = 1000000
	// minTrendPoints is what ageing.Project needs (five usable points).
	minTrendPoints = 5
)

// AssessHealth fits model/ageing's capacity-fade trend to a stored battery's health
// history or to ad-hoc points.
func (h *forecastServer) AssessHealth(ctx context.Context, req *pb.AssessHealthRequest) (*pb.AssessHealthResponse, error) {
	resp, err := h.s.assessHealth(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return resp, nil
}

// healthSeries is a capacity history in the model's terms: strictly increasing
// equivalent full cycles, capacity as a fraction of rated, and optional days since
// the first point.
type healthSeries struct {
	cycles, capacity, resistance, days []float64
	start                              time.Time // time of days[0] = 0; zero without days
}

func (hs *healthSeries) len() int { return len(hs.cycles) }

func (s *Service) assessHealth(ctx context.Context, req *pb.AssessHealthRequest) (*pb.AssessHealthResponse, error) {
	var v violations
	battery, hist := req.GetBattery(), req.GetHistory()
	switch {
	case battery != "" && len(hist) > 0:
		v.add("battery", "give either battery or history, not both")
	case battery == "" && len(hist) == 0:
		v.add("battery", "one of battery or history is required")
	case battery != "":
		if _, err := parseName("battery", battery, collBatteries); err != nil {
			v.add("battery", "must be \"batteries/{id}\", got %q", truncate(battery, 100))
		}
	default:
		checkHistory(&v, hist)
	}
	eol := req.GetEndOfLifeCapacityFraction()
	if !cell.Finite(eol) || eol < 0 || eol >= 1 {
		v.add("end_of_life_capacity_fraction", "must be a fraction in (0, 1) (0 means 0.8), got %g", eol)
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	var (
		series healthSeries
		latest *pb.AssessHealthResponse
		notes  []string
	)
	if battery != "" {
		id, _ := parseName("battery", battery, collBatteries)
		if _, err := s.getBattery(ctx, id); err != nil {
			return nil, err
		}
		var err error
		if series, notes, err = s.storedHealth(ctx, id); err != nil {
			return nil, err
		}
		st, err := s.batteryState(ctx, id)
		if err != nil {
			return nil, err
		}
		latest = &pb.AssessHealthResponse{CapacityFraction: st.GetCapacityFraction(), ResistanceFraction: st.GetResistanceFraction(),
			EquivalentFullCycles: st.GetEquivalentFullCycles()}
	} else {
		series = historySeries(hist)
		last := hist[len(hist)-1]
		latest = &pb.AssessHealthResponse{CapacityFraction: last.GetCapacityFraction(), ResistanceFraction: last.GetResistanceFraction(),
			EquivalentFullCycles: last.GetEquivalentFullCycles()}
	}
	out := latest
	out.Notes = notes
	out.PointCount = int32(series.len())
	if series.len() < minTrendPoints {
		out.Notes = append(out.Notes, fmt.Sprintf("%d history points with distinct equivalent full cycles; a trend needs at least %d, so nothing is projected",
			series.len(), minTrendPoints))
		return out, nil
	}
	res, err := ageing.Project(series.problem(), &ageing.Settings{EndOfLife: eol})
	if errors.Is(err, ageing.ErrTooFew) {
		out.Notes = append(out.Notes, "too few usable points after outlier removal; nothing is projected: "+err.Error())
		return out, nil
	}
	if err != nil {
		var fe *cell.FieldError
		if battery == "" && errors.As(err, &fe) {
			return nil, invalid("history", "%s: %s", fe.Field, fe.Reason)
		}
		return nil, fmt.Errorf("assessing health: %w", err)
	}
	healthToPB(out, &res, &series)
	return out, nil
}

// checkHistory validates an ad-hoc history.
func checkHistory(v *violations, hist []*pb.HealthPoint) {
	if n := len(hist); n < 2 || n > maxHealthPoints {
		v.add("history", "need 2 to %d points, got %d", maxHealthPoints, n)
		return
	}
	timed := hist[0].GetObserveTime() != nil
	n0 := len(*v)
	for i, p := range hist {
		f := fmt.Sprintf("history[%d]", i)
		if c := p.GetEquivalentFullCycles(); !cell.Finite(c) || c < 0 || c > 1e9 {
			v.add(f+".equivalent_full_cycles", "must be finite, 0 to 1e9, got %g", c)
		} else if i > 0 && !(c > hist[i-1].GetEquivalentFullCycles()) {
			v.add(f+".equivalent_full_cycles", "must increase from point to point: %g does not follow %g", c, hist[i-1].GetEquivalentFullCycles())
		}
		if q := p.GetCapacityFraction(); !cell.Finite(q) || q <= 0 || q > 2 {
			v.add(f+".capacity_fraction", "must be in (0, 2], got %g", q)
		}
		if r := p.GetResistanceFraction(); !cell.Finite(r) || r < 0 || r > 20 {
			v.add(f+".resistance_fraction", "must be in [0, 20] (0 = unknown), got %g", r)
		}
		switch t := p.GetObserveTime(); {
		case (t != nil) != timed:
			v.add(f+".observe_time", "give observe_time on every point or on none")
		case t != nil && t.CheckValid() != nil:
			v.add(f+".observe_time", "not a valid timestamp: %v", t.CheckValid())
		case t != nil && i > 0 && hist[i-1].GetObserveTime().CheckValid() == nil && t.AsTime().Before(hist[i-1].GetObserveTime().AsTime()):
			v.add(f+".observe_time", "must not go backwards")
		}
		if len(*v)-n0 >= 20 {
			v.add("history", "more problems not listed")
			return
		}
	}
}

// historySeries converts a validated ad-hoc history.
func historySeries(hist []*pb.HealthPoint) healthSeries {
	var hs healthSeries
	timed := hist[0].GetObserveTime() != nil
	if timed {
		hs.start = hist[0].GetObserveTime().AsTime()
	}
	for _, p := range hist {
		hs.cycles = append(hs.cycles, p.GetEquivalentFullCycles())
		hs.capacity = append(hs.capacity, p.GetCapacityFraction())
		hs.resistance = append(hs.resistance, p.GetResistanceFraction())
		if timed {
			hs.days = append(hs.days, p.GetObserveTime().AsTime().Sub(hs.start).Hours()/24)
		}
	}
	return hs
}

// problem returns the model's problem: capacities are fractions of rated, so the
// reference is 1 and end of life is a fraction of rated capacity.
func (hs *healthSeries) problem() ageing.Problem {
	return ageing.Problem{Cycles: hs.cycles, Capacity: hs.capacity, Days: hs.days, ReferenceAh: 1}
}

// storedHealth reads a battery's health history and reduces it to a series the model
// takes: records of equal equivalent full cycles (a resting or charging battery
// persists its state without cycling) become one point, their mean; a history longer
// than maxTrendPoints is merged pairwise until it fits.
func (s *Service) storedHealth(ctx context.Context, id string) (healthSeries, []string, error) {
	var (
		acc   healthAcc
		notes []string
		q     = store.HealthQuery{Limit: store.MaxHealthLimit}
		read  int
	)
	for {
		start := time.Now()
		recs, err := s.store.ListHealth(ctx, tenant(ctx), id, q)
		s.metrics.observeStore(ctx, "ListHealth", start)
		if err != nil {
			return healthSeries{}, nil, resourceErr(err, batteryName(id))
		}
		for _, r := range recs {
			acc.add(r)
		}
		read += len(recs)
		if len(recs) < q.Limit {
			break
		}
		if read >= maxHealthRead {
			notes = append(notes, fmt.Sprintf("only the first %d health records were read", read))
			break
		}
		q.Start = recs[len(recs)-1].Time.Add(time.Microsecond)
	}
	return acc.series(), notes, nil
}

// healthAcc accumulates stored health records into a bounded series. Records arrive
// in time order, so equivalent cycles never decrease.
type healthAcc struct {
	pts   []healthPt
	start time.Time
}

// healthPt is the mean of n records.
type healthPt struct {
	cycles, capacity, resistance, days float64
	n                                  float64
}

func (a *healthAcc) add(r store.HealthRecord) {
	if len(a.pts) == 0 {
		a.start = r.Time
	}
	p := healthPt{cycles: r.EquivalentCycles, capacity: r.CapacityFactor, resistance: r.ResistanceFactor,
		days: r.Time.Sub(a.start).Hours() / 24, n: 1}
	if n := len(a.pts); n > 0 && a.pts[n-1].cycles >= p.cycles {
		// Same cycle count (or, defensively, a count that went backwards): merge.
		p.cycles = a.pts[n-1].cycles
		a.pts[n-1] = a.pts[n-1].merge(p)
		return
	}
	a.pts = append(a.pts, p)
	if len(a.pts) > 2*maxTrendPoints {
		a.halve()
	}
}

// merge returns the weighted mean of two points.
func (p healthPt) merge(o healthPt) healthPt {
	n := p.n + o.n
	mean := func(x, y float64) float64 { return (x*p.n + y*o.n) / n }
	return healthPt{cycles: mean(p.cycles, o.cycles), capacity: mean(p.capacity, o.capacity),
		resistance: mean(p.resistance, o.resistance), days: mean(p.days, o.days), n: n}
}

// halve merges neighbouring pairs of points.
func (a *healthAcc) halve() {
	out := a.pts[:0]
	for i := 0; i < len(a.pts); i += 2 {
		if i+1 < len(a.pts) {
			out = append(out, a.pts[i].merge(a.pts[i+1]))
		} else {
			out = append(out, a.pts[i])
		}
	}
	a.pts = out
}

func (a *healthAcc) series() healthSeries {
	for len(a.pts) > maxTrendPoints {
		a.halve()
	}
	hs := healthSeries{start: a.start}
	for _, p := range a.pts {
		hs.cycles = append(hs.cycles, p.cycles)
		hs.capacity = append(hs.capacity, p.capacity)
		hs.resistance = append(hs.resistance, p.resistance)
		hs.days = append(hs.days, p.days)
	}
	return hs
}

var trendModelToPB = map[ageing.Model]string{
	ageing.Linear:      "LINEAR",
	ageing.SquareRoot:  "SQUARE_ROOT",
	ageing.PowerLaw:    "POWER_LAW",
	ageing.Exponential: "EXPONENTIAL",
}

// fadePer100 returns the fitted trend's capacity loss per 100 equivalent full cycles
// at the last point of the series (a backward difference over the last 1 % of the
// cycles), in fractions of rated capacity.
func fadePer100(res *ageing.Result, last float64) float64 {
	h := 0.01 * last
	return (res.Capacity(last-h) - res.Capacity(last)) / h * 100
}

// healthToPB fills the projection into out.
func healthToPB(out *pb.AssessHealthResponse, res *ageing.Result, hs *healthSeries) {
	out.TrendModel = trendModelToPB[res.Model]
	out.OutlierCount = int32(res.Outliers)
	out.FadePerHundredCycles = fadePer100(res, hs.cycles[len(hs.cycles)-1])
	finite := func(x float64) float64 {
		if math.IsInf(x, 0) || math.IsNaN(x) {
			return 0
		}
		return x
	}
	c := res.Cycles
	out.EndOfLifeCycles = finite(c.Value)
	out.EndOfLifeCyclesLower = finite(c.Low)
	out.EndOfLifeCyclesUpper = finite(c.High)
	if math.IsInf(c.Value, 1) {
		out.Notes = append(out.Notes, fmt.Sprintf("the trend does not reach end of life within %.0f equivalent full cycles (no significant fade yet)", res.Horizon))
	}
	if res.Days != nil && !hs.start.IsZero() && cell.Finite(res.Days.Value) && res.Days.Value < 365.25*1000 {
		out.EndOfLifeTime = timestamppb.New(hs.start.Add(time.Duration(res.Days.Value * 24 * float64(time.Hour))))
	}
	if res.Outliers > 0 {
		out.Notes = append(out.Notes, fmt.Sprintf("%d of %d points set aside as outliers", res.Outliers, len(hs.cycles)))
	}
}
