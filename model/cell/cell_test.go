package cell

import (
	"encoding/json"
	"errors"
	"math"
	"testing"

	"github.com/voltcast/voltcast/model/table"
)

// testType is a 1-RC cell with the E4 parameters of ../shared/REFERENCE.md
// (R0 = 50 mΩ, R1 = 30 mΩ, C1 = 1000 F) and a flat OCV of 3.70 V over the middle.
func testType(t testing.TB) *Type {
	t.Helper()
	ocv, err := table.NewSurface([]float64{0, 0.01, 0.99, 1}, []float64{298.15}, [][]float64{{3.0, 3.6999, 3.7001, 4.2}})
	if err != nil {
		t.Fatal(err)
	}
	typ := &Type{
		Name: "test-e4", Chemistry: ChemistryNMC, ChargeMethod: ChargeCCCV,
		CapacityAh: 2.5, NominalVolts: 3.7, OCV: ocv,
		R0:       Param{Value: 0.050},
		Branches: []Branch{{R: Param{Value: 0.030}, C: Param{Value: 1000}}},
		Limits: Limits{
			ChargeVolts: 4.2, CutoffVolts: 3.0, FloorVolts: 2.5, MaxChargeRate: 1, StandardChargeRate: 0.5,
			MaxDischargeRate: 2, TerminationRate: 0.05, ChargeMinCelsius: 0, ChargeMaxCelsius: 45,
			DischargeMinCelsius: -20, DischargeMaxCelsius: 60,
		},
	}
	if err := typ.Validate(); err != nil {
		t.Fatal(err)
	}
	return typ
}

// TestStepE4 checks one 1-RC step response against the closed form of
// ../shared/REFERENCE.md worked example E4: V(t) = 3.70 − 0.10 − 0.06·(1 − e^(−t/30)).
func TestStepE4(t *testing.T) {
	p := Pack{Type: testType(t), Series: 1, Parallel: 1}
	want := map[float64]float64{1: 3.59803, 10: 3.58299, 30: 3.56207, 60: 3.54812, 90: 3.54299}
	s := State{SOC: 0.5}
	tk := Kelvin(25)
	for k := 1; k <= 90; k++ {
		p.Step(&s, 2.0, 1, tk)
		s.SOC = 0.5 // hold OCV at 3.70 V as the example does
		if w, ok := want[float64(k)]; ok {
			if got := p.Voltage(&s, 2.0, tk); math.Abs(got-w) > 5e-6 {
				t.Errorf("V(%d s) = %.6f; E4 gives %.5f", k, got, w)
			}
		}
		if k == 30 && math.Abs(s.V[0]-0.0379272) > 1e-7 {
			t.Errorf("v1 after 30 steps = %.7f; E4 gives 0.0379272", s.V[0])
		}
	}
}

func TestPackScaling(t *testing.T) {
	typ := testType(t)
	p, err := NewPack(typ, 4, 3)
	if err != nil {
		t.Fatal(err)
	}
	// Common practice: S×P pack is a scaled cell.
	if got := p.CapacityAh(); got != 7.5 {
		t.Errorf("CapacityAh = %g; want 7.5", got)
	}
	if got := p.NominalVolts(); math.Abs(got-14.8) > 1e-12 {
		t.Errorf("NominalVolts = %g; want 14.8", got)
	}
	if got := p.PackResistance(0.5, Kelvin(25)); math.Abs(got-0.05*4/3) > 1e-15 {
		t.Errorf("PackResistance = %g; want %g", got, 0.05*4/3)
	}
	s := State{SOC: 0.5}
	if got, want := p.Voltage(&s, 3, Kelvin(25)), 4*(3.70-0.05*1); math.Abs(got-want) > 1e-3 {
		t.Errorf("Voltage(3 A) = %g; want ≈ %g", got, want)
	}
	p.CapacityFactor, p.ResistanceFactor = 0.8, 1.5
	if got := p.CapacityAh(); math.Abs(got-6) > 1e-12 {
		t.Errorf("aged CapacityAh = %g; want 6", got)
	}
	if got := p.R0(0.5, Kelvin(25)); math.Abs(got-0.075) > 1e-15 {
		t.Errorf("aged R0 = %g; want 0.075", got)
	}
	for _, bad := range []Pack{{Type: typ, Series: 0, Parallel: 1}, {Type: typ, Series: 1, Parallel: 1001}, {Series: 1, Parallel: 1}, {Type: typ, Series: 1, Parallel: 1, CapacityFactor: math.NaN()}} {
		if err := bad.Validate(); !errors.Is(err, ErrInvalid) {
			t.Errorf("Validate(%+v) = %v; want ErrInvalid", bad, err)
		}
	}
}

// TestArrhenius checks Param scaling against ../shared/REFERENCE.md worked example E9
// (Ea = 30 kJ/mol, 50 mΩ at 25 °C).
func TestArrhenius(t *testing.T) {
	p := Param{Value: 0.050, ActivationEnergy: 30e3}
	for _, tc := range []struct{ c, wantMilli float64 }{{45, 23.37}, {10, 94.93}, {0, 151.36}, {-10, 250.04}, {25, 50}} {
		if got := p.At(0.5, Kelvin(tc.c)) * 1000; math.Abs(got-tc.wantMilli) > 0.01 {
			t.Errorf("R(%g °C) = %.2f mΩ; E9 gives %.2f", tc.c, got, tc.wantMilli)
		}
	}
}

// TestCoulombE8 checks coulomb counting against ../shared/REFERENCE.md example E8.
func TestCoulombE8(t *testing.T) {
	typ := testType(t)
	typ.CoulombicEfficiency = 0.99
	p := Pack{Type: typ, Series: 1, Parallel: 1}
	s := State{SOC: 0.80}
	p.Step(&s, 1.0, 1800, Kelvin(25))
	if math.Abs(s.SOC-0.60) > 1e-12 {
		t.Errorf("after 1 A for 0.5 h: SOC = %.15g; want 0.60", s.SOC)
	}
	p.Step(&s, -0.5, 3600, Kelvin(25))
	if math.Abs(s.SOC-0.798) > 1e-12 {
		t.Errorf("after charging 0.5 A for 1 h at 0.99: SOC = %.15g; want 0.798", s.SOC)
	}
}

// TestHysteresisBounded checks that the hysteresis state approaches ±Max and never
// leaves [−Max, Max] (Plett 2004, Part 2, eq. 9).
func TestHysteresisBounded(t *testing.T) {
	typ := testType(t)
	typ.Hysteresis = Hysteresis{Max: 0.02, Gamma: 50}
	p := Pack{Type: typ, Series: 1, Parallel: 1}
	s := State{SOC: 0.5}
	for range 100 {
		p.Step(&s, 2.5, 10, Kelvin(25))
		if math.Abs(s.H) > 0.02+1e-15 {
			t.Fatalf("H = %g outside ±0.02", s.H)
		}
	}
	if s.H > -0.019 {
		t.Errorf("after a long discharge H = %g; want near -0.02", s.H)
	}
	for range 100 {
		p.Step(&s, -2.5, 10, Kelvin(25))
	}
	if s.H < 0.019 {
		t.Errorf("after a long charge H = %g; want near +0.02", s.H)
	}
}

func TestValidateRejects(t *testing.T) {
	for _, tc := range []struct {
		field string
		mut   func(*Type)
	}{
		{"name", func(t *Type) { t.Name = "" }},
		{"capacity_amp_hours", func(t *Type) { t.CapacityAh = -1 }},
		{"capacity_amp_hours", func(t *Type) { t.CapacityAh = math.NaN() }},
		{"series_resistance_ohms.value", func(t *Type) { t.R0.Value = -0.01 }},
		{"rc_branches[0].capacitance_farads.value", func(t *Type) { t.Branches[0].C.Value = 0 }},
		{"rc_branches", func(t *Type) { t.Branches = make([]Branch, 4) }},
		{"ocv", func(t *Type) { t.OCV = nil }},
		{"charge_method", func(t *Type) { t.ChargeMethod = "trickle" }},
		// A primary chemistry must never be charged, whatever charge method a file gives it.
		{"charge_method", func(t *Type) { t.Chemistry = ChemistryAlkaline }},
		{"charge_method", func(t *Type) { t.Chemistry = ChemistryLiMnO2; t.ChargeMethod = ChargeNickel }},
		{"limits.charge_voltage_volts", func(t *Type) { t.Limits.ChargeVolts = 2.9 }},
		{"limits.charge_min_celsius", func(t *Type) { t.Limits.ChargeMinCelsius = -80 }},
		{"coulombic_efficiency", func(t *Type) { t.CoulombicEfficiency = 1.2 }},
	} {
		typ := testType(t)
		tc.mut(typ)
		err := typ.Validate()
		var fe *FieldError
		if !errors.As(err, &fe) || fe.Field != tc.field || !errors.Is(err, ErrInvalid) {
			t.Errorf("Validate after changing %s = %v; want a FieldError on %s", tc.field, err, tc.field)
		}
	}
	// A decreasing OCV table is impossible.
	typ := testType(t)
	ocv, err := table.NewSurface([]float64{0, 0.5, 1}, []float64{298.15}, [][]float64{{3.5, 3.4, 4.2}})
	if err != nil {
		t.Fatal(err)
	}
	typ.OCV = ocv
	if err := typ.Validate(); !errors.Is(err, ErrInvalid) {
		t.Errorf("Validate with a decreasing OCV = %v; want ErrInvalid", err)
	}
}

func TestTypeJSONRoundTrip(t *testing.T) {
	typ := testType(t)
	b, err := json.Marshal(typ)
	if err != nil {
		t.Fatal(err)
	}
	var back Type
	if err := json.Unmarshal(b, &back); err != nil {
		t.Fatal(err)
	}
	if err := back.Validate(); err != nil {
		t.Fatal(err)
	}
	s1, s2 := State{SOC: 0.7}, State{SOC: 0.7}
	p1, p2 := Pack{Type: typ, Series: 2, Parallel: 1}, Pack{Type: &back, Series: 2, Parallel: 1}
	for range 10 {
		p1.Step(&s1, 1.3, 7, 290)
		p2.Step(&s2, 1.3, 7, 290)
	}
	if s1 != s2 || p1.Voltage(&s1, 1.3, 290) != p2.Voltage(&s2, 1.3, 290) {
		t.Errorf("round-tripped type behaves differently: %+v vs %+v", s1, s2)
	}
}

// TestValidateNoAllocs keeps validation off the allocation budget of a forecast, which
// validates its pack on every call.
func TestValidateNoAllocs(t *testing.T) {
	typ := testType(t)
	if n := testing.AllocsPerRun(100, func() {
		if err := typ.Validate(); err != nil {
			t.Fatal(err)
		}
	}); n != 0 {
		t.Errorf("Validate allocates %v times per call; want 0", n)
	}
}
