package sim_test

import (
	"fmt"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/sim"
	"github.com/voltcast/voltcast/model/table"
)

// exampleType is an invented 1-RC lithium cell: 2.5 Ah, R0 = 50 mΩ, R1 = 30 mΩ,
// C1 = 1000 F (the circuit of REFERENCE.md example E4).
func exampleType() *cell.Type {
	ocv, err := table.NewSurface([]float64{0, 0.1, 0.5, 0.9, 1}, []float64{cell.Kelvin(25)},
		[][]float64{{3.0, 3.45, 3.70, 4.0, 4.2}})
	if err != nil {
		panic(err)
	}
	t := &cell.Type{
		Name: "example-cell", Chemistry: cell.ChemistryNMC, ChargeMethod: cell.ChargeCCCV,
		CapacityAh: 2.5, NominalVolts: 3.6, OCV: ocv,
		R0:       cell.Param{Value: 0.050},
		Branches: []cell.Branch{{R: cell.Param{Value: 0.030}, C: cell.Param{Value: 1000}}},
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

// A 2 A pulse for 60 s, then a minute's rest, on a 2s1p pack.
func ExampleRun() {
	prob := &sim.Problem{
		Pack:    cell.Pack{Type: exampleType(), Series: 2, Parallel: 1},
		Initial: cell.State{SOC: 0.5},
		Celsius: 25,
		Load: sim.Load{Segments: []sim.Segment{
			{Duration: 60, Kind: sim.Current, Value: 2},
			{Duration: 60, Kind: sim.Current, Value: 0},
		}},
	}
	res, err := sim.Run(nil, prob, &sim.Settings{Step: 1, Interval: 30})
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, s := range res.Samples {
		fmt.Printf("t=%3.0f s  SOC=%.4f  V=%.4f V  I=%.1f A  v1=%.4f V\n", s.Time, s.SOC, s.Volts, s.Amps, s.RC[0])
	}
	fmt.Printf("%v after %.0f s: %.4f Ah, %.3f Wh\n", res.Status, res.Seconds, res.AmpHours, res.WattHours)
	// Output:
	// t=  0 s  SOC=0.5000  V=7.2000 V  I=2.0 A  v1=0.0000 V
	// t= 30 s  SOC=0.4933  V=7.1152 V  I=2.0 A  v1=0.0379 V
	// t= 60 s  SOC=0.4867  V=7.2787 V  I=0.0 A  v1=0.0519 V
	// t= 90 s  SOC=0.4867  V=7.3443 V  I=0.0 A  v1=0.0191 V
	// t=120 s  SOC=0.4867  V=7.3684 V  I=0.0 A  v1=0.0070 V
	// load-ended after 120 s: 0.0333 Ah, 0.237 Wh
}

// The current a constant-power load draws from a 12 V source behind 0.1 Ω.
func ExampleDraw() {
	for _, w := range []float64{100, 300, 400} {
		i, err := sim.Draw(sim.Power, w, 12, 0.1)
		if err != nil {
			fmt.Printf("%3.0f W: %v\n", w, err)
			continue
		}
		fmt.Printf("%3.0f W: %.3f A at %.3f V\n", w, i, 12-0.1*i)
	}
	// Output:
	// 100 W: 9.010 A at 11.099 V
	// 300 W: 35.505 A at 8.449 V
	// 400 W: sim: power demand exceeds what the pack can deliver
}
