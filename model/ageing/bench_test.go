package ageing

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"
)

var (
	sinkCycles []Cycle
	sinkResult Result
)

func BenchmarkRainflow(b *testing.B) {
	for _, n := range []int{1000, 100000} {
		rng := rand.New(rand.NewPCG(1, 2))
		x := make([]float64, n)
		for i := range x {
			x[i] = 0.5 + 0.4*math.Sin(float64(i)/50) + 0.05*rng.NormFloat64()
		}
		b.Run(strconv.Itoa(n), func(b *testing.B) {
			b.ReportAllocs()
			dst := make([]Cycle, 0, n)
			for b.Loop() {
				var err error
				if sinkCycles, err = Rainflow(dst[:0], x); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

func BenchmarkProject(b *testing.B) {
	for _, n := range []int{50, 200, 700} {
		cycles, q := sqrtHistory(n, 3, 0.02, 0.003, 1)
		b.Run(strconv.Itoa(n), func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				var err error
				if sinkResult, err = Project(Problem{Cycles: cycles, Capacity: q}, nil); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}
