package fit

import (
	"context"
	"fmt"
	"testing"
)

// ExamplePulses identifies the series resistance and two RC branches from a synthetic
// HPPC-style test made with cell.Pack.Step (see hppc in fit_test.go: 2C discharge and
// 1.5C charge pulses of 10 s, 1 s sampling), and recovers the generating values.
func ExamplePulses() {
	typ := syntheticType(&testing.T{})
	rec := hppc(typ, 1, 4)
	res, err := Pulses(context.Background(), rec, typ.OCV.Curve(0), typ.CapacityAh, nil)
	if err != nil {
		fmt.Println(err)
		return
	}
	l := res.Levels[0]
	fmt.Printf("levels %d; at SOC %.2f: R0 %.1f mΩ (raw step %.1f mΩ), R1 %.1f mΩ τ1 %.1f s, R2 %.1f mΩ τ2 %.0f s\n",
		len(res.Levels), l.SOC, l.R0.Value*1e3, l.R0Step*1e3, l.R[0].Value*1e3, l.Tau[0].Value, l.R[1].Value*1e3, l.Tau[1].Value)
	// Output:
	// levels 4; at SOC 0.95: R0 25.0 mΩ (raw step 27.9 mΩ), R1 12.0 mΩ τ1 4.0 s, R2 18.0 mΩ τ2 45 s
}
