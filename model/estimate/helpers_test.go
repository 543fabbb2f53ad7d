package estimate

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/table"
)

// nmcOCV is the NMC/graphite OCV column of ../shared/REFERENCE.md §4 (typical values
// from memory, stated there as fit for testing interpolation code, not as ground truth
// for a cell). The synthetic tests generate their truth with the same model, so the
// table only has to be realistic in shape.
var (
	nmcSOC = []float64{0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1}
	nmcOCV = []float64{3.30, 3.55, 3.62, 3.66, 3.70, 3.74, 3.80, 3.87, 3.95, 4.05, 4.18}
)

func mustSurface(t testing.TB, s, temps []float64, v [][]float64) *table.Surface {
	t.Helper()
	sf, err := table.NewSurface(s, temps, v)
	if err != nil {
		t.Fatal(err)
	}
	return sf
}

// testType is a 2-RC NMC-like 2.5 Ah cell with parameters tabulated over SOC and two
// temperatures (so the Jacobian's dR/dz terms are exercised). Limits follow
// REFERENCE.md §1a/§1b for NMC (4.20 V charge limit, 3.0 V cut-off, 2.5 V floor,
// charge 0–45 °C, discharge −20–60 °C).
func testType(t testing.TB) *cell.Type { return testTypeTemps(t, true) }

// testTypeTemps is testType with tables over two temperatures (0 and 40 °C), or over
// one (25 °C, the first row of each table) when twoTemps is false.
func testTypeTemps(t testing.TB, twoTemps bool) *cell.Type {
	t.Helper()
	temps := []float64{cell.Kelvin(0), cell.Kelvin(40)}
	ocvRow := make([]float64, len(nmcOCV))
	copy(ocvRow, nmcOCV)
	ocvRow2 := make([]float64, len(nmcOCV))
	for i, v := range nmcOCV {
		ocvRow2[i] = v + 0.004 // a small entropic shift between the two temperatures
	}
	z3 := []float64{0, 0.5, 1}
	mustSurface := func(t testing.TB, s, temps []float64, v [][]float64) *table.Surface {
		if !twoTemps {
			temps, v = []float64{cell.Kelvin(25)}, v[:1]
		}
		return mustSurface(t, s, temps, v)
	}
	ty := &cell.Type{
		Name:         "test-nmc-2rc",
		Chemistry:    cell.ChemistryNMC,
		ChargeMethod: cell.ChargeCCCV,
		CapacityAh:   2.5,
		NominalVolts: 3.6,
		OCV:          mustSurface(t, nmcSOC, temps, [][]float64{ocvRow, ocvRow2}),
		R0:           cell.Param{Table: mustSurface(t, z3, temps, [][]float64{{0.070, 0.045, 0.050}, {0.040, 0.025, 0.030}})},
		Branches: []cell.Branch{
			{R: cell.Param{Table: mustSurface(t, z3, temps, [][]float64{{0.020, 0.012, 0.014}, {0.012, 0.008, 0.009}})}, C: cell.Param{Value: 1000}},
			{R: cell.Param{Value: 0.015, ActivationEnergy: 20e3}, C: cell.Param{Table: mustSurface(t, z3, temps, [][]float64{{15000, 20000, 18000}, {15000, 20000, 18000}})}},
		},
		CoulombicEfficiency: 0.99,
		Limits: cell.Limits{
			ChargeVolts: 4.2, CutoffVolts: 3.0, FloorVolts: 2.5,
			MaxChargeRate: 1, StandardChargeRate: 0.5, MaxDischargeRate: 2, TerminationRate: 0.05,
			ChargeMinCelsius: 0, ChargeMaxCelsius: 45, DischargeMinCelsius: -20, DischargeMaxCelsius: 60,
		},
	}
	if err := ty.Validate(); err != nil {
		t.Fatal(err)
	}
	return ty
}

func testPack(t testing.TB) cell.Pack {
	t.Helper()
	p, err := cell.NewPack(testType(t), 1, 1)
	if err != nil {
		t.Fatal(err)
	}
	return p
}

// profile returns a piecewise-constant current profile of n one-second steps: levels
// drawn uniformly in [lo, hi] A, each held 20–120 s, with occasional rests.
func profile(rng *rand.Rand, n int, lo, hi float64) []float64 {
	out := make([]float64, n)
	for k := 0; k < n; {
		hold := 20 + rng.IntN(100)
		lvl := lo + (hi-lo)*rng.Float64()
		if rng.IntN(5) == 0 {
			lvl = 0
		}
		for j := 0; j < hold && k < n; j++ {
			out[k] = lvl
			k++
		}
	}
	return out
}

// truth is a synthetic run: the true states and the samples a sensor reports.
type truth struct {
	states  []cell.State
	samples []Sample
}

// simulate generates n+1 samples at 1 s from state x0 with the true current profile
// cur (len n, current of interval k is cur[k-1] and is reported at sample k,
// IntervalAverage), adding the process and measurement noise that cfg describes when
// noisy is set.
func simulate(p cell.Pack, cfg config, x0 cell.State, cur []float64, tk float64, rng *rand.Rand, noisy bool) truth {
	n := len(cur)
	tr := truth{states: make([]cell.State, n+1), samples: make([]Sample, n+1)}
	x := x0
	nrm := func(v float64) float64 {
		if !noisy {
			return 0
		}
		return math.Sqrt(v) * rng.NormFloat64()
	}
	rv := cfg.voltVar + cfg.modelVar
	tr.states[0] = x
	tr.samples[0] = Sample{Time: 0, Current: 0, Voltage: p.Voltage(&x, 0, tk) + nrm(rv), Temperature: tk}
	for k := 1; k <= n; k++ {
		i := cur[k-1]
		z := x.SOC
		p.Step(&x, i, 1, tk)
		dz := x.SOC - z
		x.SOC += nrm(cfg.socVarRate + cfg.gainVar*dz*dz)
		for b := range p.Type.Branches {
			x.V[b] += nrm(cfg.branchVar)
		}
		im := i + nrm(cfg.currentVar)
		tr.states[k] = x
		tr.samples[k] = Sample{Time: float64(k), Current: im, Voltage: p.Voltage(&x, i, tk) + nrm(rv), Temperature: tk}
	}
	return tr
}
