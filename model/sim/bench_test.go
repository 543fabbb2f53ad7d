package sim

import (
	"testing"

	"github.com/voltcast/voltcast/model/cell"
)

// BenchmarkPackStep is one 2-RC model step with table lookups (R and C of both branches
// over state of charge): cell.Pack.Step itself, of a pack from cell.NewPack (which reads
// the four tables in one lookup) and of the same pack written as a struct literal (one
// lookup per table), and Circuit.Advance, which adds the mid-step parameter evaluation,
// under constant current and constant power.
func BenchmarkPackStep(b *testing.B) {
	p, err := cell.NewPack(tableType(b), 4, 2)
	if err != nil {
		b.Fatal(err)
	}
	tk := cell.Kelvin(25)
	step := func(p cell.Pack) func(b *testing.B) {
		return func(b *testing.B) {
			s := cell.State{SOC: 0.8}
			b.ReportAllocs()
			for b.Loop() {
				p.Step(&s, 3, 0.1, tk)
				s.SOC = 0.8
			}
		}
	}
	b.Run("cell.Pack.Step", step(p))
	b.Run("cell.Pack.Step-literal", step(cell.Pack{Type: p.Type, Series: 4, Parallel: 2}))
	c := Circuit{Pack: p, Kelvin: tk}
	b.Run("Advance/current", func(b *testing.B) {
		s := cell.State{SOC: 0.8}
		b.ReportAllocs()
		for b.Loop() {
			_, _ = c.Advance(&s, Current, 3, 0.1)
			s.SOC = 0.8
		}
	})
	b.Run("Advance/power", func(b *testing.B) {
		s := cell.State{SOC: 0.8}
		b.ReportAllocs()
		for b.Loop() {
			_, _ = c.Advance(&s, Power, 40, 0.1)
			s.SOC = 0.8
		}
	})
}

func TestStepNoAllocs(t *testing.T) {
	c := Circuit{Pack: cell.Pack{Type: tableType(t), Series: 4, Parallel: 2}, Kelvin: cell.Kelvin(25)}
	s := cell.State{SOC: 0.8}
	if n := testing.AllocsPerRun(100, func() { _, _ = c.Advance(&s, Power, 40, 1) }); n != 0 {
		t.Errorf("Advance allocates %g times per step; want 0", n)
	}
}
