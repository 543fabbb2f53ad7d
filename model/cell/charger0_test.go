package cell

import (
	"encoding/json"
	"math"
	"testing"
)

// TestChargeR0 checks the direction-dependent series resistance: on charge the terminal
// voltage uses ChargeR0, on discharge R0 (v = OCV − R·i, package doc), and the field
// survives the JSON form and validation.
func TestChargeR0(t *testing.T) {
	typ := testType(t)
	typ.ChargeR0 = &Param{Value: 0.2}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	p := Pack{Type: typ, Series: 2, Parallel: 1}
	s := State{SOC: 0.5}
	tk := Kelvin(25)
	if got, want := p.Voltage(&s, 2, tk), 2*(3.70-0.05*2); math.Abs(got-want) > 1e-3 {
		t.Errorf("discharge voltage %g; want %g (R0)", got, want)
	}
	if got, want := p.Voltage(&s, -2, tk), 2*(3.70+0.2*2); math.Abs(got-want) > 1e-3 {
		t.Errorf("charge voltage %g; want %g (ChargeR0)", got, want)
	}
	b, err := json.Marshal(typ)
	if err != nil {
		t.Fatal(err)
	}
	var back Type
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	if back.ChargeR0 == nil || back.ChargeR0.Value != 0.2 {
		t.Errorf("ChargeR0 after JSON round trip: %+v", back.ChargeR0)
	}
	typ.ChargeR0 = &Param{Value: -1}
	if err := typ.Validate(); err == nil {
		t.Error("negative ChargeR0 validated")
	}
	typ.ChargeR0 = nil
	if got, want := p.Voltage(&s, -2, tk), 2*(3.70+0.05*2); math.Abs(got-want) > 1e-3 {
		t.Errorf("charge voltage without ChargeR0 %g; want %g (R0)", got, want)
	}
}
