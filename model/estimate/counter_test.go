package estimate

import (
	"math"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/table"
)

// TestCounterE8 checks the coulomb counter against REFERENCE.md E8: Q = 2.5 Ah,
// z0 = 0.80; discharge 1.0 A for 0.5 h → 0.60; then charge 0.5 A for 1 h at η = 0.99
// → 0.798. Samples every 10 s, each reporting the current of the interval before it.
func TestCounterE8(t *testing.T) {
	ocv, err := table.NewSurface(nmcSOC, []float64{cell.Kelvin(25)}, [][]float64{nmcOCV})
	if err != nil {
		t.Fatal(err)
	}
	ty := &cell.Type{Name: "e8", ChargeMethod: cell.ChargeCCCV, CapacityAh: 2.5, NominalVolts: 3.6, OCV: ocv,
		R0: cell.Param{Value: 0.05}, CoulombicEfficiency: 0.99,
		Limits: cell.Limits{ChargeVolts: 4.2, CutoffVolts: 3, FloorVolts: 2.5, MaxChargeRate: 1, MaxDischargeRate: 2,
			ChargeMinCelsius: 0, ChargeMaxCelsius: 45, DischargeMinCelsius: -20, DischargeMaxCelsius: 60}}
	if err := ty.Validate(); err != nil {
		t.Fatal(err)
	}
	pack, _ := cell.NewPack(ty, 1, 1)
	c, err := NewCounter(pack, 0.80, nil)
	if err != nil {
		t.Fatal(err)
	}
	tk := cell.Kelvin(25)
	tm := 0.0
	feed := func(i float64, seconds int) Estimate {
		var e Estimate
		for range seconds / 10 {
			tm += 10
			if e, err = c.Update(Sample{Time: tm, Current: i, Voltage: 3.7, Temperature: tk}); err != nil {
				t.Fatal(err)
			}
		}
		return e
	}
	if _, err := c.Update(Sample{Time: 0, Current: 0, Voltage: 3.7, Temperature: tk}); err != nil {
		t.Fatal(err)
	}
	if e := feed(1.0, 1800); math.Abs(e.SOC-0.60) > 1e-12 {
		t.Errorf("after 1.0 A for 0.5 h SOC = %.15f; want 0.60 (E8)", e.SOC)
	}
	if e := feed(-0.5, 3600); math.Abs(e.SOC-0.798) > 1e-12 {
		t.Errorf("after −0.5 A for 1 h at η = 0.99 SOC = %.15f; want 0.798 (E8)", e.SOC)
	}
	if c.State().Covariance[0][0] <= 0.1*0.1 {
		t.Error("the counter's SOC variance did not grow")
	}
}
