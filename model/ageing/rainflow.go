package ageing

import (
	"math"
	"sort"

	"github.com/voltcast/voltcast/model/cell"
)

// Cycle is one counted cycle of a rainflow count: a range between two turning points of
// the history, counted as a full or a half cycle.
type Cycle struct {
	Range float64 // |x[To] − x[From]|, in the unit of the history (a depth of discharge for SOC)
	Mean  float64 // (x[From] + x[To]) / 2
	Count float64 // 1 for a full (closed) cycle, 0.5 for a half cycle
	From  int     // index into the original history of the range's first point
	To    int     // index into the original history of the range's last point
}

// TurningPoints appends to dst the indices of the turning points of x (the local maxima
// and minima, the first sample and the end of the last run) and returns the extended
// slice. A plateau of equal values counts once, at its first sample; points inside a monotone run are
// dropped. This is the reduction that ASTM E1049-85 §5.4.4 applies before counting.
// x must be finite (see [Rainflow] for a checked entry point).
func TurningPoints(dst []int, x []float64) []int {
	if len(x) == 0 {
		return dst
	}
	dst = append(dst, 0)
	if len(x) == 1 {
		return dst
	}
	last := 0  // index of the last kept point
	dir := 0.0 // sign of the current run: +1 rising, −1 falling, 0 none yet
	for k := 1; k < len(x); k++ {
		d := x[k] - x[last]
		if d == 0 {
			continue
		}
		s := math.Copysign(1, d)
		switch {
		case dir == 0:
			dir = s
			dst = append(dst, k)
		case s == dir:
			// Still in the same run: move the run's end point forward.
			dst[len(dst)-1] = k
		default:
			dir = s
			dst = append(dst, k)
		}
		last = k
	}
	// A trailing plateau is represented by its first sample, like any other plateau.
	return dst
}

// Rainflow appends to dst the cycles of the history x counted by the three-point rainflow
// method of ASTM E1049-85 §5.4.4, and returns the extended slice. Cycles are appended in
// the order the method counts them. For a history of fewer than two distinct values no
// cycle is counted. Non-finite values are reported as a [*cell.FieldError].
//
// The rule (E1049-85 §5.4.4, paraphrased in ../shared/REFERENCE.md §2.10): read turning
// points one at a time; let X be the range formed by the newest two points and Y the
// range before it. While X ≥ Y: if Y holds the starting point, count Y as a half cycle
// and discard its first point; otherwise count Y as a full cycle and discard both its
// points. At the end, count every remaining range as a half cycle.
func Rainflow(dst []Cycle, x []float64) ([]Cycle, error) {
	for k, v := range x {
		if !cell.Finite(v) {
			return dst, cell.Invalid("history", "sample %d is not finite: %g", k, v)
		}
	}
	tp := TurningPoints(nil, x)
	stack := make([]int, 0, len(tp))
	for _, p := range tp {
		stack = append(stack, p)
		for len(stack) >= 3 {
			n := len(stack)
			a, b, c := stack[n-3], stack[n-2], stack[n-1]
			rx := math.Abs(x[c] - x[b])
			ry := math.Abs(x[b] - x[a])
			if rx < ry {
				break
			}
			if n == 3 {
				// Y holds the starting point: half cycle, drop the start.
				dst = append(dst, cycleOf(x, a, b, 0.5))
				stack = append(stack[:0], b, c)
				continue
			}
			dst = append(dst, cycleOf(x, a, b, 1))
			stack = append(stack[:n-3], c)
		}
	}
	for k := 1; k < len(stack); k++ {
		dst = append(dst, cycleOf(x, stack[k-1], stack[k], 0.5))
	}
	return dst, nil
}

func cycleOf(x []float64, from, to int, count float64) Cycle {
	return Cycle{
		Range: math.Abs(x[to] - x[from]),
		Mean:  0.5 * (x[from] + x[to]),
		Count: count,
		From:  from,
		To:    to,
	}
}

// RangeCount is the total count of the cycles of one range.
type RangeCount struct {
	Range float64 // range, in the unit of the history
	Count float64 // total count (sum of full and half cycles)
}

// Spectrum returns the total count per range of cycles, sorted by increasing range.
// Ranges that differ by no more than tol are merged (their first value in sorted order
// is kept), which absorbs floating-point noise such as 0.8−0.5 versus 0.7−0.4; tol must
// be ≥ 0. cycles is not modified.
func Spectrum(cycles []Cycle, tol float64) []RangeCount {
	if len(cycles) == 0 {
		return nil
	}
	s := make([]RangeCount, len(cycles))
	for k, c := range cycles {
		s[k] = RangeCount{Range: c.Range, Count: c.Count}
	}
	sort.SliceStable(s, func(i, j int) bool { return s[i].Range < s[j].Range })
	out := s[:1]
	for _, rc := range s[1:] {
		last := &out[len(out)-1]
		if rc.Range-last.Range <= tol {
			last.Count += rc.Count
			continue
		}
		out = append(out, rc)
	}
	return out
}

// CountedCycles returns Σ Count·Range over cycles: for a state of charge history, the
// depth-weighted number of cycles. For a rainflow count of a whole history it equals the
// total variation of the history divided by two, i.e. the equivalent full cycles when the
// history starts and ends at the same state of charge.
func CountedCycles(cycles []Cycle) float64 {
	var s float64
	for _, c := range cycles {
		s += c.Count * c.Range
	}
	return s
}
