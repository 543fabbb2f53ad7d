package estimate_test

import (
	"fmt"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/estimate"
	"github.com/voltcast/voltcast/model/table"
)

// exampleType is a small invented 1-RC lithium cell for the examples: 2.5 Ah, the
// NMC OCV column of REFERENCE.md §4 (typical values, from memory), R0 = 40 mΩ and one
// 20 mΩ / 30 s branch.
func exampleType() *cell.Type {
	ocv, err := table.NewSurface(
		[]float64{0, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 1},
		[]float64{cell.Kelvin(25)},
		[][]float64{{3.30, 3.55, 3.62, 3.66, 3.70, 3.74, 3.80, 3.87, 3.95, 4.05, 4.18}})
	if err != nil {
		panic(err)
	}
	t := &cell.Type{
		Name: "example-cell", Chemistry: cell.ChemistryNMC, ChargeMethod: cell.ChargeCCCV,
		CapacityAh: 2.5, NominalVolts: 3.6, OCV: ocv, R0: cell.Param{Value: 0.040},
		Branches: []cell.Branch{{R: cell.Param{Value: 0.020}, C: cell.Param{Value: 1500}}},
		Limits: cell.Limits{ChargeVolts: 4.2, CutoffVolts: 3.0, FloorVolts: 2.5, MaxChargeRate: 1, StandardChargeRate: 0.5,
			MaxDischargeRate: 2, ChargeMinCelsius: 0, ChargeMaxCelsius: 45, DischargeMinCelsius: -20, DischargeMaxCelsius: 60},
	}
	if err := t.Validate(); err != nil {
		panic(err)
	}
	return t
}

// A 4s2p pack really at 80 % is tracked by a filter that wrongly starts at 60 %: the
// telemetry (here simulated with the model itself) pulls the estimate to the truth,
// while a coulomb counter keeps the initial error.
func ExampleEKF() {
	pack, err := cell.NewPack(exampleType(), 4, 2)
	if err != nil {
		panic(err)
	}
	tk := cell.Kelvin(25)
	f, err := estimate.NewEKF(pack, 0.60, nil)
	if err != nil {
		panic(err)
	}
	cc, _ := estimate.NewCounter(pack, 0.60, nil)
	truth := cell.State{SOC: 0.80}
	var e, c estimate.Estimate
	for k := 1; k <= 1200; k++ { // 20 min at 1 Hz, 3 A (pack current, discharge)
		pack.Step(&truth, 3, 1, tk)
		s := estimate.Sample{Time: float64(k), Current: 3, Voltage: pack.Voltage(&truth, 3, tk), Temperature: tk}
		if e, err = f.Update(s); err != nil {
			panic(err)
		}
		c, _ = cc.Update(s)
	}
	fmt.Printf("truth %.2f, filter %.2f ± %.3f, counter %.2f\n", truth.SOC, e.SOC, e.SOCSigma, c.SOC)
	// Output:
	// truth 0.60, filter 0.60 ± 0.008, counter 0.40
}

// Run feeds a batch of samples, here an ideal 1 A discharge for 30 min after a
// rested start, and the filter is initialised from the first (rested) voltage.
func ExampleRun() {
	pack, _ := cell.NewPack(exampleType(), 1, 1)
	tk := cell.Kelvin(25)
	truth := cell.State{SOC: 0.9}
	samples := []estimate.Sample{{Time: 0, Voltage: pack.Voltage(&truth, 0, tk), Temperature: tk}}
	for k := 1; k <= 180; k++ { // every 10 s
		pack.Step(&truth, 1, 10, tk)
		samples = append(samples, estimate.Sample{Time: float64(10 * k), Current: 1, Voltage: pack.Voltage(&truth, 1, tk), Temperature: tk})
	}
	f, _ := estimate.NewEKF(pack, 0.5, nil)
	if err := f.InitFromVoltage(samples[0].Voltage, samples[0].Temperature); err != nil {
		panic(err)
	}
	res := estimate.Run(nil, f, samples)
	last := res.Estimates[len(res.Estimates)-1]
	fmt.Printf("%d estimates, %d errors; final SOC %.3f (truth %.3f)\n", len(res.Estimates), res.Errors, last.SOC, truth.SOC)
	// Output:
	// 181 estimates, 0 errors; final SOC 0.700 (truth 0.700)
}

// The coulomb counter of REFERENCE.md E8: 2.5 Ah from 80 %, 1 A discharge for half an
// hour.
func ExampleCounter() {
	pack, _ := cell.NewPack(exampleType(), 1, 1)
	tk := cell.Kelvin(25)
	c, _ := estimate.NewCounter(pack, 0.80, nil)
	var e estimate.Estimate
	for k := 0; k <= 180; k++ {
		e, _ = c.Update(estimate.Sample{Time: float64(10 * k), Current: 1.0, Voltage: 3.9, Temperature: tk})
	}
	fmt.Printf("SOC %.2f\n", e.SOC)
	// Output:
	// SOC 0.60
}
