package forecast_test

import (
	"fmt"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/forecast"
	"github.com/voltcast/voltcast/model/sim"
	"github.com/voltcast/voltcast/model/table"
)

// cartCell is an invented 1-RC lithium cell for the examples: 3.0 Ah, 3.0 V cut-off.
func cartCell() *cell.Type {
	ocv, err := table.NewSurface([]float64{0, 0.05, 0.1, 0.2, 0.5, 0.8, 1}, []float64{cell.Kelvin(25)},
		[][]float64{{3.0, 3.3, 3.45, 3.58, 3.72, 3.95, 4.18}})
	if err != nil {
		panic(err)
	}
	t := &cell.Type{
		Name: "example-cart-cell", Chemistry: cell.ChemistryNMC, ChargeMethod: cell.ChargeCCCV,
		CapacityAh: 3.0, NominalVolts: 3.6, OCV: ocv,
		R0:       cell.Param{Value: 0.035},
		Branches: []cell.Branch{{R: cell.Param{Value: 0.020}, C: cell.Param{Value: 2000}}},
		Limits: cell.Limits{
			ChargeVolts: 4.2, CutoffVolts: 3.0, FloorVolts: 2.5, MaxChargeRate: 1, StandardChargeRate: 0.5,
			MaxDischargeRate: 2, ChargeMinCelsius: 0, ChargeMaxCelsius: 45, DischargeMinCelsius: -20, DischargeMaxCelsius: 60,
		},
	}
	if err := t.Validate(); err != nil {
		panic(err)
	}
	return t
}

// How long does a 4s2p pack at 80 % last at a constant 60 W, and how sure is that if
// the state of charge is known to ±3 % and the capacity to ±5 %?
func ExampleRun() {
	prob := &forecast.Problem{
		Problem: sim.Problem{
			Pack:    cell.Pack{Type: cartCell(), Series: 4, Parallel: 2},
			Initial: cell.State{SOC: 0.8},
			Celsius: 25,
			Load:    sim.ConstantPower(60),
		},
		SOCSigma:      0.03,
		CapacitySigma: 0.05,
	}
	res, err := forecast.Run(nil, prob, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%s at %.2f V after %.1f min (%.1f to %.1f min)\n", res.Status.Describe(), res.FinalVolts,
		res.Seconds/60, res.LowSeconds/60, res.HighSeconds/60)
	fmt.Printf("delivered %.2f Ah, %.1f Wh; %.1f %% of the charge is left at this rate\n",
		res.AmpHours, res.WattHours, 100*res.Final.SOC)
	// Output:
	// reached the cut-off voltage at 12.00 V after 66.6 min (62.3 to 70.9 min)
	// delivered 4.68 Ah, 66.6 Wh; 1.9 % of the charge is left at this rate
}

// A duty cycle that repeats: 20 s at 15 A, 40 s at 2 A, with a pack cut-off of 12.4 V.
func ExampleRun_dutyCycle() {
	prob := &forecast.Problem{Problem: sim.Problem{
		Pack:    cell.Pack{Type: cartCell(), Series: 4, Parallel: 2},
		Initial: cell.State{SOC: 1},
		Celsius: 25,
		Load: sim.Load{Repeat: true, Segments: []sim.Segment{
			{Duration: 20, Kind: sim.Current, Value: 15},
			{Duration: 40, Kind: sim.Current, Value: 2},
		}},
		PackCutoffVolts: 12.4,
	}}
	res, err := forecast.Run(nil, prob, &forecast.Settings{TracePoints: 3})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("%v after %.0f s, %.2f Ah\n", res.Status, res.Seconds, res.AmpHours)
	for _, s := range res.Trace {
		fmt.Printf("  t=%5.0f s  SOC=%.3f  %.2f V  %.1f A\n", s.Time, s.SOC, s.Volts, s.Amps)
	}
	// Output:
	// cutoff after 3073 s, 5.44 Ah
	//   t=    0 s  SOC=1.000  15.67 V  15.0 A
	//   t= 1537 s  SOC=0.545  14.60 V  2.0 A
	//   t= 3073 s  SOC=0.094  12.40 V  15.0 A
}
