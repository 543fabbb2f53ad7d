package forecast

import (
	"testing"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/sim"
)

// BenchmarkRun is a full forecast from 100 % to the cut-off of the 2-RC cell with
// tables (3s2p pack, 10 °C): at constant current (1 C, 6 A) and constant power (60 W),
// and with a ±1σ range.
func BenchmarkRun(b *testing.B) {
	typ := twoRC(b)
	for _, c := range []struct {
		name  string
		load  sim.Load
		sigma float64
	}{
		{"current", sim.ConstantCurrent(6), 0},
		{"power", sim.ConstantPower(60), 0},
		{"resistance", sim.ConstantResistance(1.8), 0},
		{"current+range", sim.ConstantCurrent(6), 0.02},
	} {
		prob := &Problem{Problem: sim.Problem{
			Pack: cell.Pack{Type: typ, Series: 3, Parallel: 2}, Initial: cell.State{SOC: 1}, Celsius: 10, Load: c.load,
		}, SOCSigma: c.sigma, CapacitySigma: c.sigma}
		b.Run(c.name, func(b *testing.B) {
			b.ReportAllocs()
			var res Result
			for b.Loop() {
				res, _ = Run(nil, prob, nil)
			}
			if res.Status != StatusCutoff {
				b.Fatalf("status %v", res.Status)
			}
			b.ReportMetric(float64(res.Steps), "steps/op")
		})
	}
}
