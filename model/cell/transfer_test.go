package cell

import (
	"encoding/json"
	"errors"
	"math"
	"strings"
	"testing"
)

// TestBranchDriveButlerVolmer checks the charge-transfer branch against the symmetric
// Butler–Volmer relation i = 2·i₀·sinh(F·η/(2RT)) (transfer coefficient ½; Bard and
// Faulkner, Electrochemical Methods, 2nd ed., §3.4 [from memory]): with the branch
// resistance set to the charge-transfer resistance RT/(F·i₀), its steady-state voltage
// R·u(i) must be the overpotential η that drives current i, for both signs.
func TestBranchDriveButlerVolmer(t *testing.T) {
	const faraday = 96485.33212 // C/mol (CODATA 2018, exact)
	tk := Kelvin(-10)
	i0 := 0.8 // A
	b := Branch{R: Param{Value: GasConstant * tk / (faraday * i0)}, C: Param{Value: 1}, ExchangeCurrent: &Param{Value: i0}}
	bt := 2 * GasConstant * tk / faraday // 2RT/F, V
	for _, eta := range []float64{-0.2, -0.05, 0.001, 0.03, 0.1, 0.3} {
		i := 2 * i0 * math.Sinh(eta/bt)
		u, du := b.Drive(i, 0.5, tk)
		if got := b.R.At(0.5, tk) * u; math.Abs(got-eta) > 1e-12 {
			t.Errorf("R·u(%g A) = %.12g V; Butler–Volmer overpotential %.12g V", i, got, eta)
		}
		// du/di from a central difference.
		h := 1e-6 * math.Max(1, math.Abs(i))
		up, _ := b.Drive(i+h, 0.5, tk)
		um, _ := b.Drive(i-h, 0.5, tk)
		if fd := (up - um) / (2 * h); math.Abs(du-fd) > 1e-6 {
			t.Errorf("du/di at %g A = %g; central difference %g", i, du, fd)
		}
	}
	// Small currents see the small-signal resistance; an ohmic branch passes i through.
	if u, _ := b.Drive(1e-6, 0.5, tk); math.Abs(u/1e-6-1) > 1e-9 {
		t.Errorf("u(1 µA) = %g; want ≈ 1 µA", u)
	}
	ohmic := Branch{R: Param{Value: 0.01}, C: Param{Value: 100}}
	if u, du := ohmic.Drive(-3.5, 0.2, tk); u != -3.5 || du != 1 {
		t.Errorf("ohmic Drive(-3.5) = %g, %g; want -3.5, 1", u, du)
	}
}

// TestStepChargeTransfer checks that Pack.Step settles a charge-transfer branch at
// R·u(i) and follows the exact first-order response with u in place of i.
func TestStepChargeTransfer(t *testing.T) {
	typ := testType(t)
	typ.Branches[0].ExchangeCurrent = &Param{Value: 0.5}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	p := Pack{Type: typ, Series: 1, Parallel: 2} // 4 A pack = 2 A per cell
	tk := Kelvin(25)
	s := State{SOC: 0.5}
	u := 2 * 0.5 * math.Asinh(2/(2*0.5))
	for k := 1; k <= 30; k++ {
		p.Step(&s, 4, 1, tk)
		s.SOC = 0.5
	}
	// E4's branch (R = 30 mΩ, τ = 30 s) after 30 s: R·u·(1 − e⁻¹).
	if want := 0.030 * u * (1 - math.Exp(-1)); math.Abs(s.V[0]-want) > 1e-12 {
		t.Errorf("v1 after 30 s = %.12g; want %.12g", s.V[0], want)
	}
	for range 3000 {
		p.Step(&s, 4, 1, tk)
		s.SOC = 0.5
	}
	if want := 0.030 * u; math.Abs(s.V[0]-want) > 1e-12 {
		t.Errorf("settled v1 = %.12g; want R·u = %.12g", s.V[0], want)
	}
}

func TestChargeTransferValidateAndJSON(t *testing.T) {
	typ := testType(t)
	typ.Branches[0].ExchangeCurrent = &Param{Value: 0}
	if err := typ.Validate(); !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), "exchange_current_amps") {
		t.Errorf("Validate with i₀ = 0: %v; want an exchange_current_amps error", err)
	}
	typ.Branches[0].ExchangeCurrent = &Param{Value: 1.5, ActivationEnergy: 40e3}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	b, err := json.Marshal(typ)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(string(b), `"exchange_current_amps":{"value":1.5`) {
		t.Errorf("JSON lacks the exchange current: %s", b)
	}
	var back Type
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	if x := back.Branches[0].ExchangeCurrent; x == nil || x.Value != 1.5 || x.ActivationEnergy != 40e3 {
		t.Errorf("round trip lost the exchange current: %+v", x)
	}
	// A parameter file written before charge-transfer branches existed loads as ohmic.
	old := testType(t)
	ob, err := json.Marshal(old)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Contains(string(ob), "exchange_current") {
		t.Errorf("an ohmic type's JSON mentions the exchange current: %s", ob)
	}
	var ot Type
	if err := json.Unmarshal(ob, &ot); err != nil {
		t.Fatal(err)
	}
	if ot.Branches[0].ExchangeCurrent != nil {
		t.Errorf("old JSON loaded with an exchange current")
	}
}
