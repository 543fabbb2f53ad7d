package cell

import (
	"testing"

	"github.com/voltcast/voltcast/model/table"
)

// benchType is a 2-RC type whose R0, R and C are tables over state of charge and
// temperature (the shape fitted types have), with made-up smooth values.
func benchType(b testing.TB) *Type {
	b.Helper()
	typ := testType(b)
	z := []float64{0, 0.1, 0.3, 0.5, 0.7, 0.9, 1}
	temps := []float64{263.15, 273.15, 298.15}
	surf := func(base float64) *table.Surface {
		var rows [][]float64
		for j := range temps {
			var r []float64
			for k := range z {
				r = append(r, base*float64(3-j)*(1+0.2*float64(k)))
			}
			rows = append(rows, r)
		}
		s, err := table.NewSurface(z, temps, rows)
		if err != nil {
			b.Fatal(err)
		}
		return s
	}
	typ.R0 = Param{Table: surf(0.02)}
	typ.Branches = []Branch{
		{R: Param{Table: surf(0.01)}, C: Param{Table: surf(100)}},
		{R: Param{Table: surf(0.02)}, C: Param{Table: surf(2000)}},
	}
	if err := typ.Validate(); err != nil {
		b.Fatal(err)
	}
	return typ
}

// BenchmarkStep is one Pack.Step of a 2-RC cell with tabulated parameters (four table
// values, read in one grouped lookup, and two exponentials per step), with ohmic
// branches, with the fast branch a charge-transfer branch (one more table lookup and an
// asinh), and with ohmic branches in a pack written as a struct literal (one lookup per
// table).
func BenchmarkStep(b *testing.B) {
	run := func(b *testing.B, typ *Type, literal bool) {
		p, err := NewPack(typ, 1, 1)
		if err != nil {
			b.Fatal(err)
		}
		if literal {
			p = Pack{Type: typ, Series: 1, Parallel: 1}
		}
		tk := Kelvin(10)
		s := State{SOC: 0.6}
		b.ReportAllocs()
		for b.Loop() {
			p.Step(&s, 2, 1, tk)
			s.SOC = 0.6
		}
	}
	b.Run("ohmic", func(b *testing.B) { run(b, benchType(b), false) })
	b.Run("charge-transfer", func(b *testing.B) {
		typ := benchType(b)
		typ.Branches[0].ExchangeCurrent = &Param{Table: typ.R0.Table}
		run(b, typ, false)
	})
	b.Run("literal", func(b *testing.B) { run(b, benchType(b), true) })
}

func TestStepNoAllocs(t *testing.T) {
	typ := testType(t)
	typ.Branches[0].ExchangeCurrent = &Param{Value: 0.5}
	p := Pack{Type: typ, Series: 2, Parallel: 3}
	s := State{SOC: 0.5}
	if n := testing.AllocsPerRun(100, func() { p.Step(&s, 3, 1, Kelvin(25)) }); n != 0 {
		t.Errorf("Step allocates %g times per step; want 0", n)
	}
}
