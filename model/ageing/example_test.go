package ageing_test

import (
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/ageing"
)

// The rainflow count of the state of charge history of REFERENCE.md E10.
func ExampleRainflow() {
	soc := []float64{0.50, 0.80, 0.40, 0.70, 0.20, 0.90, 0.50}
	cycles, err := ageing.Rainflow(nil, soc)
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, rc := range ageing.Spectrum(cycles, 1e-9) {
		fmt.Printf("depth %2.0f %%: %.1f cycles\n", 100*rc.Range, rc.Count)
	}
	fmt.Printf("depth-weighted cycles: %.2f\n", ageing.CountedCycles(cycles))
	// Output:
	// depth 30 %: 1.5 cycles
	// depth 40 %: 0.5 cycles
	// depth 60 %: 0.5 cycles
	// depth 70 %: 0.5 cycles
	// depth-weighted cycles: 1.30
}

// Charge throughput of a short invented duty: a 1 h discharge at 2 A, a 30 min rest and a
// 1 h charge at 1.5 A, logged every 15 min, on a cell rated 2.5 Ah.
func ExampleIntegrate() {
	t := []float64{0, 900, 1800, 2700, 3600, 3601, 5400, 5401, 6300, 7200, 8100, 9000}
	i := []float64{2, 2, 2, 2, 2, 0, 0, -1.5, -1.5, -1.5, -1.5, -1.5}
	th, err := ageing.Integrate(t, i)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("discharged %.2f Ah, charged %.2f Ah, %.2f equivalent full cycles\n",
		th.DischargedAh, th.ChargedAh, th.EquivalentFullCycles(2.5))
	// Output:
	// discharged 2.00 Ah, charged 1.50 Ah, 0.80 equivalent full cycles
}

// Project the end of life of an invented e-scooter pack (rated 10 Ah) from its monthly
// capacity estimates over its first 400 cycles.
func ExampleProject() {
	var cycles, capacity, days []float64
	for n := 20.0; n <= 400; n += 20 {
		cycles = append(cycles, n)
		capacity = append(capacity, 10-0.06*math.Sqrt(n)+0.01*math.Sin(n)) // slowing fade with a small wobble
		days = append(days, 1.5*n)                                         // a cycle every 1.5 days
	}
	res, err := ageing.Project(ageing.Problem{Cycles: cycles, Capacity: capacity, Days: days, ReferenceAh: 10}, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("law %s; end of life (%.1f Ah) near cycle %.0f, interval %.0f–%.0f\n",
		res.Model, res.Threshold, res.Cycles.Value, res.Cycles.Low, res.Cycles.High)
	fmt.Printf("near day %.0f at the historical cycling rate\n", res.Days.Value)
	// The law behind the data, 10 − 0.06·√n, reaches 8 Ah at n = (2/0.06)² ≈ 1111.
	// Output:
	// law sqrt; end of life (8.0 Ah) near cycle 1106, interval 676–1232
	// near day 1659 at the historical cycling rate
}
