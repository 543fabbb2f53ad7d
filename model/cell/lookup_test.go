package cell

import (
	"math"
	"math/rand/v2"
	"sync"
	"testing"

	"github.com/voltcast/voltcast/model/table"
)

// TestGroupedStepMatchesLiteral holds the grouped lookup of a pack from NewPack to the
// per-parameter path of the same pack written as a struct literal: Step must give the
// same state bit for bit (the lookup only reads the same tables faster), for tabulated
// types with one and several temperatures, a charge-transfer branch, constant
// parameters, random states, currents of both signs and step lengths from 10 ms to 10 h.
func TestGroupedStepMatchesLiteral(t *testing.T) {
	multi := benchType(t)
	ct := benchType(t)
	ct.Branches[0].ExchangeCurrent = &Param{Table: ct.R0.Table}
	single := benchType(t)
	for k := range single.Branches {
		for _, p := range []*Param{&single.Branches[k].R, &single.Branches[k].C} {
			sf := p.Table
			c := sf.Curve(0)
			var z, v []float64
			for i := range c.Len() {
				x, y := c.Knot(i)
				z, v = append(z, x), append(v, y)
			}
			s, err := table.NewSurface(z, []float64{298.15}, [][]float64{v})
			if err != nil {
				t.Fatal(err)
			}
			p.Table = s
		}
	}
	mixed := benchType(t)
	mixed.Branches[1].C = Param{Value: 3000} // not tabulated: no grouped lookup
	rng := rand.New(rand.NewPCG(5, 6))
	for _, c := range []struct {
		name    string
		typ     *Type
		grouped bool
	}{{"several temperatures", multi, true}, {"one temperature", single, true}, {"charge-transfer", ct, true}, {"constant C", mixed, false}} {
		fast, err := NewPack(c.typ, 3, 2)
		if err != nil {
			t.Fatal(err)
		}
		if got := fast.lookup != nil; got != c.grouped {
			t.Errorf("%s: NewPack built a grouped lookup: %v; want %v", c.name, got, c.grouped)
		}
		slow := Pack{Type: c.typ, Series: 3, Parallel: 2, ResistanceFactor: 1.3}
		fast.ResistanceFactor = 1.3
		for range 500 {
			s0 := State{SOC: -0.05 + 1.1*rng.Float64(), V: [MaxBranches]float64{0.02 * rng.Float64(), -0.01 * rng.Float64()}}
			i := 10*rng.Float64() - 4
			dt := 0.01 * float64(int(1)<<rng.IntN(22))
			tk := Kelvin(-20 + 70*rng.Float64())
			a, b := s0, s0
			fast.Step(&a, i, dt, tk)
			slow.Step(&b, i, dt, tk)
			if a != b {
				t.Fatalf("%s: Step from %+v (i=%g, dt=%g, T=%g K): grouped %+v; per-parameter %+v", c.name, s0, i, dt, tk, a, b)
			}
		}
	}
}

// TestGroupedStepNotStale checks that a pack from NewPack does not use values of tables
// that are no longer its type's: after the pack's Type is replaced, or a branch table of
// the type is, Step must follow the new parameters (as a struct-literal pack does).
func TestGroupedStepNotStale(t *testing.T) {
	typ := benchType(t)
	p, err := NewPack(typ, 1, 1)
	if err != nil {
		t.Fatal(err)
	}
	other := benchType(t)
	other.Branches[1].R.Table = other.Branches[0].R.Table
	step := func(p Pack) State {
		s := State{SOC: 0.6, V: [MaxBranches]float64{0.01, 0.02}}
		p.Step(&s, 2, 30, Kelvin(5))
		return s
	}
	want := step(Pack{Type: other, Series: 1, Parallel: 1})
	q := p
	q.Type = other
	if got := step(q); got != want {
		t.Errorf("pack with its Type replaced: Step = %+v; want %+v", got, want)
	}
	typ.Branches[1].R.Table = other.Branches[0].R.Table // a changed type: a contract breach, but never stale
	if got := step(p); got != want {
		t.Errorf("pack whose type's table was replaced: Step = %+v; want %+v", got, want)
	}
}

// TestGroupedStepConcurrent steps copies of one pack from several goroutines at once;
// run with -race, it checks that the shared lookup is only read.
func TestGroupedStepConcurrent(t *testing.T) {
	p, err := NewPack(benchType(t), 2, 2)
	if err != nil {
		t.Fatal(err)
	}
	want := State{SOC: 0.7}
	p.Step(&want, 3, 1, Kelvin(15))
	var wg sync.WaitGroup
	errs := make([]State, 4)
	for g := range errs {
		wg.Go(func() {
			for range 100 {
				s := State{SOC: 0.7}
				p.Step(&s, 3, 1, Kelvin(15))
				errs[g] = s
			}
		})
	}
	wg.Wait()
	for g, s := range errs {
		if s != want {
			t.Errorf("goroutine %d: Step = %+v; want %+v", g, s, want)
		}
	}
}

func TestGroupedStepNoAllocs(t *testing.T) {
	p, err := NewPack(benchType(t), 2, 3)
	if err != nil {
		t.Fatal(err)
	}
	s := State{SOC: 0.5}
	if n := testing.AllocsPerRun(100, func() { p.Step(&s, 3, 1, Kelvin(25)) }); n != 0 {
		t.Errorf("Step of a pack from NewPack allocates %g times per step; want 0", n)
	}
}

// TestPreparedStepsAsLiteral checks that Prepared, like NewPack, changes only how fast a
// pack steps, not what it computes.
func TestPreparedStepsAsLiteral(t *testing.T) {
	typ := benchType(t)
	lit := Pack{Type: typ, Series: 3, Parallel: 2}
	prep := lit.Prepared()
	if prep.lookup == nil {
		t.Fatal("Prepared built no lookup for a type with tabulated branches")
	}
	s1, s2 := State{SOC: 0.9}, State{SOC: 0.9}
	for k := range 200 {
		i := 3 * math.Sin(float64(k)/7)
		lit.Step(&s1, i, 2, 290)
		prep.Step(&s2, i, 2, 290)
	}
	if s1 != s2 {
		t.Errorf("Prepared pack stepped to %+v; struct literal to %+v", s2, s1)
	}
}

// TestOhmic2MatchesAdvance holds the two-ohmic-branch path of the grouped lookup to the
// general grouped loop (advance) bit for bit, and checks that it applies exactly to the
// shape it was written for: two ohmic branches still holding the grouped tables.
func TestOhmic2MatchesAdvance(t *testing.T) {
	typ := benchType(t)
	l := newLookup(typ)
	rng := rand.New(rand.NewPCG(7, 8))
	for range 500 {
		s0 := State{SOC: -0.05 + 1.1*rng.Float64(), V: [MaxBranches]float64{0.02 * rng.Float64(), -0.01 * rng.Float64()}}
		ic, dt, tk, rf := 10*rng.Float64()-4, 0.01*float64(int(1)<<rng.IntN(22)), Kelvin(-20+70*rng.Float64()), 0.5+rng.Float64()
		a, b := s0, s0
		if !l.advanceOhmic2(&a, typ.Branches, ic, s0.SOC, dt, tk, rf) {
			t.Fatal("advanceOhmic2 did not apply to a type with two ohmic tabulated branches")
		}
		l.advance(&b, typ, ic, s0.SOC, dt, tk, rf)
		if a != b {
			t.Fatalf("from %+v (i=%g, dt=%g, T=%g K, rf=%g): advanceOhmic2 %+v; advance %+v", s0, ic, dt, tk, rf, a, b)
		}
	}
	var s State
	typ.Branches[0].ExchangeCurrent = &Param{Value: 1}
	if l.advanceOhmic2(&s, typ.Branches, 1, 0.5, 1, 298.15, 1) {
		t.Error("advanceOhmic2 applied to a charge-transfer branch")
	}
	typ.Branches[0].ExchangeCurrent = nil
	typ.Branches[1].C.Table = typ.Branches[0].C.Table
	if l.advanceOhmic2(&s, typ.Branches, 1, 0.5, 1, 298.15, 1) {
		t.Error("advanceOhmic2 applied after a branch table was replaced")
	}
	if l.advanceOhmic2(&s, typ.Branches[:1], 1, 0.5, 1, 298.15, 1) {
		t.Error("advanceOhmic2 applied to one branch")
	}
	if s != (State{}) {
		t.Errorf("advanceOhmic2 changed the state when it did not apply: %+v", s)
	}
}
