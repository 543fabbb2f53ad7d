package estimate

import (
	"math/rand/v2"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
)

var sinkEstimate Estimate

// BenchmarkUpdate measures one update (prediction and its Jacobian, measurement
// update, checks) on the 2-RC test type, whose OCV, R0, R1 and C2 are SOC ×
// temperature tables (two temperatures, so every lookup interpolates two curves; the
// "1temp" case has one) and whose R2 is Arrhenius-scaled. The samples are precomputed noise-free from the same
// model and replayed with increasing time.
func BenchmarkUpdate(b *testing.B) {
	pack := testPack(b)
	pack1, _ := cell.NewPack(testTypeTemps(b, false), 1, 1)
	tk := cell.Kelvin(25)
	rng := rand.New(rand.NewPCG(1, 1))
	tr := simulate(pack, resolve(pack, nil), cell.State{SOC: 0.9}, profile(rng, 4096, -1, 4), tk, rng, false)
	for _, c := range []struct {
		name string
		mk   func() (Estimator, error)
	}{
		{"EKF-2RC", func() (Estimator, error) { return NewEKF(pack, 0.9, nil) }},
		{"EKF-2RC-1temp", func() (Estimator, error) { return NewEKF(pack1, 0.9, nil) }},
		{"EKF-2RC-health", func() (Estimator, error) { return NewEKF(pack, 0.9, &Settings{Health: true}) }},
		{"Counter-2RC", func() (Estimator, error) { return NewCounter(pack, 0.9, nil) }},
	} {
		b.Run(c.name, func(b *testing.B) {
			e, err := c.mk()
			if err != nil {
				b.Fatal(err)
			}
			k := 0
			b.ReportAllocs()
			for b.Loop() {
				s := tr.samples[k%len(tr.samples)]
				s.Time = float64(k)
				k++
				sinkEstimate, _ = e.Update(s)
			}
		})
	}
}
