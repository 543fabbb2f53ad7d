package fit

import (
	"context"
	"fmt"
	"math"
	"strings"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/table"
)

// RefineSettings control [Refine]. The zero value (or nil) selects the defaults.
type RefineSettings struct {
	// Sim selects how the records are simulated.
	Sim SimSettings
	// MaxIterations bounds the Levenberg–Marquardt iterations. 0 means 30.
	MaxIterations int
	// Progress, when not nil, is called once per iteration.
	Progress func(Progress)
}

// Refinement is the outcome of [Refine].
type Refinement struct {
	// Factors multiply the tables: R0, then R and C of each branch.
	Factors []Interval
	Names   []string
	// RMSE before and after over all samples, V.
	Before, After float64
	Type          *cell.Type
}

// String summarises the refinement on one line: the scale factors and the RMSE before
// and after.
func (r *Refinement) String() string {
	var b strings.Builder
	for i, f := range r.Factors {
		if i > 0 {
			b.WriteString(", ")
		}
		fmt.Fprintf(&b, "%s ×%.3f", r.Names[i], f.Value)
	}
	fmt.Fprintf(&b, "; voltage RMSE %.1f → %.1f mV", r.Before*1e3, r.After*1e3)
	return b.String()
}

// Refine fits one scale factor per resistance and capacitance table of t (R0, Rⱼ, Cⱼ)
// by least squares over the whole voltage traces of the records, each simulated from its
// start ([Simulate] with rec.InitialSOC, full when nil). The factors are log-parameters
// solved by Levenberg–Marquardt; their intervals are ±1.96 standard errors (optimistic:
// the residuals are correlated). t is not modified; the refined type is returned in the
// result. ctx is checked once per iteration.
func Refine(ctx context.Context, t *cell.Type, recs []Record, settings *RefineSettings) (*Refinement, error) {
	var s RefineSettings
	if settings != nil {
		s = *settings
	}
	if s.MaxIterations == 0 {
		s.MaxIterations = 30
	}
	n := 0
	for i := range recs {
		if err := recs[i].check(2); err != nil {
			return nil, err
		}
		n += recs[i].Len()
	}
	if t.R0.Table == nil {
		return nil, fmt.Errorf("fit: refinement needs tabulated parameters")
	}
	names := []string{"R0"}
	for j := range t.Branches {
		names = append(names, fmt.Sprintf("R%d", j+1), fmt.Sprintf("C%d", j+1))
	}
	p := len(names)
	// Factors are kept within e^±4 (×0.018 to ×55): a trial step beyond is clamped,
	// which keeps every table finite.
	factor := func(v float64) float64 { return math.Exp(math.Min(math.Max(v, -4), 4)) }
	build := func(x []float64) *cell.Type {
		nt := *t
		nt.R0.Table = scaleSurface(t.R0.Table, factor(x[0]))
		nt.Branches = make([]cell.Branch, len(t.Branches))
		for j, b := range t.Branches {
			nt.Branches[j].ExchangeCurrent = b.ExchangeCurrent
			nt.Branches[j].R.Table = scaleSurface(b.R.Table, factor(x[1+2*j]))
			nt.Branches[j].C.Table = scaleSurface(b.C.Table, factor(x[2+2*j]))
		}
		return &nt
	}
	buf := make([]float64, 0)
	it := 0
	var ctxErr error
	resid := func(dst, x []float64) {
		nt := build(x)
		o := 0
		for _, r := range recs {
			buf = Simulate(buf, nt, r, r.initialSOC(), &s.Sim)
			for k := range buf {
				dst[o] = buf[k] - r.Voltage[k]
				o++
			}
		}
	}
	x0 := make([]float64, p)
	r0 := make([]float64, n)
	resid(r0, x0)
	before := math.Sqrt(sumSq(r0) / float64(n))
	pr := lsq{n: n, p: p, resid: func(dst, x []float64) {
		if ctxErr != nil {
			for i := range dst {
				dst[i] = math.NaN()
			}
			return
		}
		resid(dst, x)
	}}
	// One LM iteration at a time so that ctx is checked between them.
	x := x0
	var sol lmResult
	for it = 0; it < s.MaxIterations; it++ {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		var err error
		sol, err = levenbergMarquardt(pr, x, 1)
		if err != nil {
			return nil, err
		}
		moved := 0.0
		for j := range x {
			moved = math.Max(moved, math.Abs(sol.X[j]-x[j]))
		}
		x = sol.X
		if s.Progress != nil {
			s.Progress(Progress{Stage: "refine", Done: it + 1, Total: s.MaxIterations})
		}
		if moved < 1e-6 {
			break
		}
	}
	out := &Refinement{Names: names, Before: before, After: math.Sqrt(sol.SSR / float64(n)), Type: build(x)}
	for j := range p {
		iv := Interval{factor(x[j]), math.NaN(), math.NaN()}
		if sol.Cov != nil && sol.Cov[j*p+j] >= 0 {
			sd := math.Sqrt(sol.Cov[j*p+j])
			iv.Low, iv.High = math.Exp(x[j]-1.96*sd), math.Exp(x[j]+1.96*sd)
		}
		out.Factors = append(out.Factors, iv)
	}
	return out, nil
}

// scaleSurface returns a copy of sf with every value multiplied by f.
func scaleSurface(sf *table.Surface, f float64) *table.Surface {
	temps := sf.Temps()
	c0 := sf.Curve(0)
	s := make([]float64, c0.Len())
	for i := range s {
		s[i], _ = c0.Knot(i)
	}
	vals := make([][]float64, len(temps))
	for j := range temps {
		c := sf.Curve(j)
		vals[j] = make([]float64, c.Len())
		for i := range vals[j] {
			_, v := c.Knot(i)
			vals[j][i] = v * f
		}
	}
	out, err := table.NewSurface(s, temps, vals)
	if err != nil {
		panic("fit: scaling a valid surface failed: " + err.Error())
	}
	return out
}
