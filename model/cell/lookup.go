package cell

import (
	"math"

	"github.com/voltcast/voltcast/model/table"
)

// lookup reads the RC-branch parameters of one type in a single table lookup: when every
// branch's R and C are tables on one state-of-charge grid and one set of temperatures
// (the shape fitted types have), a [table.Group] finds the segment and the temperature
// bracket once for all of them instead of once per parameter. [NewPack] builds it; a
// Pack written as a struct literal has none and evaluates each parameter on its own,
// with the same result bit for bit ([table.Group.At] equals [table.Surface.At]).
//
// A lookup is immutable once built, so a Pack holding one stays safe for concurrent use
// and free to copy. It remembers the type and the surfaces it was built from, and
// [Pack.Step] uses it only while they are still the type's (the Pack's Type reassigned,
// or a branch or table replaced, fall back to the per-parameter path).
type lookup struct {
	typ   *Type
	nb    int                             // number of branches
	tabs  [2 * MaxBranches]*table.Surface // Rₖ at 2k, Cₖ at 2k+1
	group *table.Group                    // tabs[:2·nb], in that order
}

// newLookup returns the lookup for t, or nil if t's branch parameters are not all
// tables on one grid (or t has no branches), in which case the per-parameter path is
// as fast.
func newLookup(t *Type) *lookup {
	if t == nil || len(t.Branches) == 0 || len(t.Branches) > MaxBranches {
		return nil
	}
	l := &lookup{typ: t, nb: len(t.Branches)}
	for k := range t.Branches {
		b := &t.Branches[k]
		if b.R.Table == nil || b.C.Table == nil {
			return nil
		}
		l.tabs[2*k], l.tabs[2*k+1] = b.R.Table, b.C.Table
	}
	g, ok := table.NewGroup(l.tabs[:2*l.nb]...)
	if !ok {
		return nil
	}
	l.group = g
	return l
}

// advanceOhmic2 is [lookup.advance] written out for the commonest fitted shape, two
// ohmic branches (no ExchangeCurrent), and reports whether it applied. It exists for
// speed: with the loop, the per-branch table checks and the charge-transfer test
// unrolled, a step of such a type takes about a tenth fewer instructions. It assumes
// nothing that it does not check on every call: exactly two branches whose R and C
// are still the tables the group was built from, and neither a charge-transfer branch;
// otherwise it returns false and [Pack.Step] runs advance. The arithmetic is
// advance's, expression for expression, so the results are the same bit for bit
// (TestOhmic2MatchesAdvance compares the two; TestGroupedStepMatchesLiteral compares
// Step with the per-parameter path).
func (l *lookup) advanceOhmic2(s *State, br []Branch, ic, z, dt, tk, rf float64) bool {
	if len(br) != 2 {
		return false
	}
	b0, b1 := &br[0], &br[1]
	if b0.ExchangeCurrent != nil || b1.ExchangeCurrent != nil ||
		b0.R.Table != l.tabs[0] || b0.C.Table != l.tabs[1] ||
		b1.R.Table != l.tabs[2] || b1.C.Table != l.tabs[3] {
		return false
	}
	var rc [4]float64
	l.group.At(rc[:], z, tk)
	r0, r1 := rc[0]*rf, rc[2]*rf
	a0 := math.Exp(-dt / (r0 * rc[1]))
	a1 := math.Exp(-dt / (r1 * rc[3]))
	s.V[0] = a0*s.V[0] + r0*(1-a0)*ic
	s.V[1] = a1*s.V[1] + r1*(1-a1)*ic
	return true
}

// advance does the RC-branch part of [Pack.Step] for a type t with l.nb branches (the
// caller has checked that l was built for t): the same expressions as Step's
// per-parameter path, with every tabulated R and C read in one grouped lookup. A
// grouped value serves only while the branch still holds the table it was read from,
// so a type whose tables were replaced after NewPack never gets stale values.
func (l *lookup) advance(s *State, t *Type, ic, z, dt, tk, rf float64) {
	var rc [2 * MaxBranches]float64
	l.group.At(rc[:], z, tk)
	br := t.Branches[:l.nb]
	for k := range br {
		b := &br[k]
		r, c := rc[2*k], rc[2*k+1]
		if b.R.Table != l.tabs[2*k] {
			r = b.R.At(z, tk)
		}
		if b.C.Table != l.tabs[2*k+1] {
			c = b.C.At(z, tk)
		}
		r *= rf
		a := math.Exp(-dt / (r * c))
		u := ic
		if b.ExchangeCurrent != nil {
			u, _ = b.Drive(ic, z, tk)
		}
		s.V[k] = a*s.V[k] + r*(1-a)*u
	}
}
