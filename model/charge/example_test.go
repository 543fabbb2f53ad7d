package charge_test

import (
	"fmt"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/charge"
	"github.com/voltcast/voltcast/model/chem"
)

// A 4s2p pack of the built-in NMC cell at 20 % SOC, charged to 80 % by a 4 A charger
// within three hours: the planner picks the lowest current that makes it.
func ExamplePlan() {
	typ, _ := chem.Lookup("generic-nmc-18650")
	p, _ := cell.NewPack(typ, 4, 2)
	res, err := charge.Plan(&charge.Request{
		Pack:               p,
		State:              cell.State{SOC: 0.2},
		TemperatureCelsius: 20,
		TargetSOC:          0.8,
		MaxCurrentAmps:     4,
		Efficiency:         0.9,
		DeadlineSeconds:    3 * 3600,
	}, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("current %.2f A, 80 %% after %.2f h, full after %.2f h\n", res.CurrentAmps, res.Target.Seconds/3600, res.Full.Seconds/3600)
	for _, ph := range res.Phases {
		fmt.Printf("%s until %.2f h at %.2f V\n", ph.Kind, ph.EndSeconds/3600, ph.EndVolts)
	}
	fmt.Printf("%.1f Wh from the supply\n", res.Target.SupplyWh)
	// Output:
	// current 1.21 A, 80 % after 3.00 h, full after 4.06 h
	// constant-current until 3.00 h at 15.99 V
	// 61.2 Wh from the supply
}
