package chem

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"sort"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
)

func TestAllValidate(t *testing.T) {
	all := All()
	if len(all) != len(Names()) {
		t.Fatalf("All() has %d types, Names() %d", len(all), len(Names()))
	}
	for _, typ := range all {
		if err := typ.Validate(); err != nil {
			t.Errorf("%s: Validate() = %v", typ.Name, err)
		}
	}
}

func TestNamesSortedAndLookup(t *testing.T) {
	names := Names()
	if !sort.StringsAreSorted(names) {
		t.Errorf("Names() = %v; not sorted", names)
	}
	for _, n := range names {
		typ, err := Lookup(n)
		if err != nil {
			t.Fatalf("Lookup(%q) = %v", n, err)
		}
		if typ.Name != n {
			t.Errorf("Lookup(%q).Name = %q", n, typ.Name)
		}
		if !strings.HasPrefix(n, "generic-") {
			t.Errorf("name %q: built-in names start with generic-", n)
		}
	}
	// The issue requires at least these chemistries.
	want := map[cell.Chemistry]bool{
		cell.ChemistryNMC: false, cell.ChemistryNCA: false, cell.ChemistryLCO: false, cell.ChemistryLFP: false,
		cell.ChemistryNiMH: false, cell.ChemistryVRLA: false, cell.ChemistryAlkaline: false, cell.ChemistryLiMnO2: false,
	}
	for _, typ := range All() {
		if _, ok := want[typ.Chemistry]; ok {
			want[typ.Chemistry] = true
		}
	}
	for c, ok := range want {
		if !ok {
			t.Errorf("no built-in type of chemistry %s", c)
		}
	}
}

func TestLookupUnknown(t *testing.T) {
	_, err := Lookup("no-such-cell")
	if !errors.Is(err, ErrUnknownType) {
		t.Fatalf("Lookup(unknown) = %v; want ErrUnknownType", err)
	}
	if !strings.Contains(err.Error(), "generic-nmc-18650") {
		t.Errorf("error %q does not list the valid names", err)
	}
}

func TestLookupFreshCopy(t *testing.T) {
	a, _ := Lookup("generic-nmc-18650")
	a.CapacityAh = 99
	a.Branches[0].R.Value = 99
	b, _ := Lookup("generic-nmc-18650")
	if b.CapacityAh == 99 || b.Branches[0].R.Value == 99 {
		t.Error("changing a looked-up type changed the catalogue")
	}
}

func mustLookup(t *testing.T, name string) *cell.Type {
	t.Helper()
	typ, err := Lookup(name)
	if err != nil {
		t.Fatal(err)
	}
	return typ
}

// TestPackNominalE3 checks REFERENCE.md worked example E3: 8 × 1.2 V NiMH = 9.6 V and,
// at 2.4 Ah, 23.04 Wh; 4s LFP = 12.8 V; 6 lead-acid cells = 12.0 V; 13s NMC = 46.8 V.
// NMC's 3.6 V nominal is the low end of BU-205's 3.6–3.7 V, as E3 uses.
func TestPackNominalE3(t *testing.T) {
	for _, c := range []struct {
		name   string
		series int
		volts  float64
		wh     float64 // 0: not checked
	}{
		{"generic-nimh-aa", 8, 9.6, 23.04},
		{"generic-lfp-26650", 4, 12.8, 0},
		{"generic-vrla-2v-cell", 6, 12.0, 0},
		{"generic-nmc-18650", 13, 46.8, 0},
		{"generic-nmc-18650", 4, 14.4, 43.2}, // E3: a 4s1p NMC 3.0 Ah pack holds 43.2 Wh
	} {
		p, err := cell.NewPack(mustLookup(t, c.name), c.series, 1)
		if err != nil {
			t.Fatal(err)
		}
		if got := p.NominalVolts(); math.Abs(got-c.volts) > 1e-12 {
			t.Errorf("%d × %s NominalVolts = %g; E3 gives %g", c.series, c.name, got, c.volts)
		}
		if c.wh != 0 {
			if got := p.NominalEnergyWh(); math.Abs(got-c.wh) > 1e-9 {
				t.Errorf("%d × %s NominalEnergyWh = %g; E3 gives %g", c.series, c.name, got, c.wh)
			}
		}
	}
}

// TestLeadAcidRestVoltageE12 checks REFERENCE.md E12: BCI gives 12.24 V at 50 % for a
// 12 V block, 2.040 V per cell, and the other BCI points 12.65 / 12.45 / 12.06 / 11.89 V
// at 100 / 75 / 25 / 0 %. The 75 % and 25 % points sit between the table's 10 % knots,
// so they agree only to the interpolation error (under 3 mV per block).
func TestLeadAcidRestVoltageE12(t *testing.T) {
	for _, name := range []string{"generic-vrla-2v-cell", "generic-flooded-2v-cell"} {
		p, err := cell.NewPack(mustLookup(t, name), 6, 1)
		if err != nil {
			t.Fatal(err)
		}
		for _, c := range []struct{ soc, volts, tol float64 }{
			{0.5, 12.24, 1e-9}, {1, 12.65, 0.003}, {0.75, 12.45, 0.003}, {0.25, 12.06, 0.003}, {0, 11.89, 0.003},
		} {
			s := cell.State{SOC: c.soc}
			got := p.Voltage(&s, 0, cell.Kelvin(25))
			if math.Abs(got-c.volts) > c.tol {
				t.Errorf("%s 6s rest voltage at SOC %g = %.4f V; BCI gives %.2f V (tolerance %g)", name, c.soc, got, c.volts, c.tol)
			}
		}
		s := cell.State{SOC: 0.5}
		if got := p.OCV(&s, cell.Kelvin(25)); math.Abs(got-2.040) > 1e-12 {
			t.Errorf("%s OCV(50 %%) = %g V/cell; E12 gives 2.040", name, got)
		}
	}
}

// TestOCVMonotoneAndInverse checks every OCV table is non-decreasing on a fine grid
// (REFERENCE.md §4: OCV rises with SOC for every chemistry listed) and that the inverse
// SOC(OCV) recovers the SOC.
func TestOCVMonotoneAndInverse(t *testing.T) {
	tk := cell.Kelvin(25)
	for _, typ := range All() {
		prev := math.Inf(-1)
		for i := 0; i <= 1000; i++ {
			z := float64(i) / 1000
			v := typ.OCV.At(z, tk)
			if v < prev-1e-12 {
				t.Errorf("%s: OCV(%g) = %g below OCV at the previous grid point %g", typ.Name, z, v, prev)
				break
			}
			prev = v
		}
		for _, z := range []float64{0.03, 0.17, 0.5, 0.81, 0.99} {
			v := typ.OCV.At(z, tk)
			if got := typ.OCV.Inverse(v, tk); math.Abs(got-z) > 1e-9 {
				t.Errorf("%s: Inverse(OCV(%g)) = %g", typ.Name, z, got)
			}
		}
	}
}

// TestSourcedLimits spot-checks limits against REFERENCE.md §1a/§1b.
func TestSourcedLimits(t *testing.T) {
	for _, c := range []struct {
		name                  string
		charge, cutoff, floor float64
		chargeMin, chargeMax  float64
		method                cell.ChargeMethod
		rechargeable          bool
	}{
		{"generic-nmc-18650", 4.20, 3.0, 2.5, 0, 45, cell.ChargeCCCV, true},             // BU-205, BU-410
		{"generic-nca-18650", 4.20, 3.0, 2.5, 0, 45, cell.ChargeCCCV, true},             // BU-205, BU-410
		{"generic-lfp-26650", 3.65, 2.5, 2.0, 0, 45, cell.ChargeCCCV, true},             // BU-205, LFP-DS
		{"generic-vrla-2v-cell", 2.40, 1.75, 1.6, -20, 50, cell.ChargeThreeStage, true}, // BU-LA, BU-410
		{"generic-nimh-aa", 1.55, 1.0, 0.9, 0, 45, cell.ChargeNickel, true},             // IEC 61951-2 via summaries, BU-410
		{"generic-alkaline-aa", 0, 0.9, 0.8, 0, 0, cell.ChargeNone, false},              // never charge
		{"generic-li-mno2-coin", 0, 2.0, 2.0, 0, 0, cell.ChargeNone, false},             // CR2032
	} {
		typ := mustLookup(t, c.name)
		l := typ.Limits
		got := []float64{l.ChargeVolts, l.CutoffVolts, l.FloorVolts, l.ChargeMinCelsius, l.ChargeMaxCelsius}
		want := []float64{c.charge, c.cutoff, c.floor, c.chargeMin, c.chargeMax}
		for i := range got {
			if math.Abs(got[i]-want[i]) > 1e-12 {
				t.Errorf("%s limits %d = %g; want %g", c.name, i, got[i], want[i])
			}
		}
		if typ.ChargeMethod != c.method || typ.Rechargeable() != c.rechargeable {
			t.Errorf("%s charge method %s (rechargeable %v); want %s (%v)", c.name, typ.ChargeMethod, typ.Rechargeable(), c.method, c.rechargeable)
		}
	}
}

// TestLeadAcidPeukert checks the resistance table built by peukertR0 against Peukert's
// law itself (REFERENCE.md §2.4, E2): for the flooded cell (k = 1.2, 100 Ah at the 20 h
// rate), a constant 20 A discharge from full reaches the 1.75 V cut-off, at steady
// state, near z = 1 − (5/20)^0.2 = 0.242, i.e. after 75.8 Ah (E2). The steady-state
// voltage at that point is OCV − (R0 + R1)·I; the check is at a table knot's
// neighbourhood, so it holds to the interpolation error (a few mV).
func TestLeadAcidPeukert(t *testing.T) {
	typ := mustLookup(t, "generic-flooded-2v-cell")
	tk := cell.Kelvin(25)
	z := 1 - math.Pow(5.0/20, 0.2)
	if math.Abs((1-z)*100-75.8) > 0.05 {
		t.Fatalf("E2 arithmetic: delivered %g Ah; want 75.8", (1-z)*100)
	}
	v := typ.OCV.At(z, tk) - (typ.R0.At(z, tk)+typ.Branches[0].R.At(z, tk))*20
	if math.Abs(v-1.75) > 0.002 {
		t.Errorf("steady-state voltage at 20 A, z = %.3f: %.4f V; want the 1.75 V cut-off", z, v)
	}
	// Resistance grows in the cold (Arrhenius rows) and towards empty.
	if typ.R0.At(0.5, cell.Kelvin(0)) <= typ.R0.At(0.5, tk) {
		t.Error("lead-acid R0 does not grow in the cold")
	}
	if typ.R0.At(0.05, tk) <= typ.R0.At(0.5, tk) {
		t.Error("lead-acid R0 does not grow towards empty")
	}
}

func TestJSONRoundTrip(t *testing.T) {
	for _, typ := range All() {
		b, err := json.Marshal(typ)
		if err != nil {
			t.Fatalf("%s: %v", typ.Name, err)
		}
		var back cell.Type
		if err := json.Unmarshal(b, &back); err != nil {
			t.Fatalf("%s: %v", typ.Name, err)
		}
		if err := back.Validate(); err != nil {
			t.Errorf("%s: decoded type invalid: %v", typ.Name, err)
		}
		tk := cell.Kelvin(10)
		for _, z := range []float64{0.1, 0.55, 0.9} {
			if a, b := typ.OCV.At(z, tk), back.OCV.At(z, tk); math.Abs(a-b) > 1e-12 {
				t.Errorf("%s: OCV(%g) %g after round trip, %g before", typ.Name, z, b, a)
			}
			if a, b := typ.R0.At(z, tk), back.R0.At(z, tk); math.Abs(a-b) > 1e-12*math.Max(1, a) {
				t.Errorf("%s: R0(%g) %g after round trip, %g before", typ.Name, z, b, a)
			}
		}
	}
}

func ExampleLookup() {
	typ, err := Lookup("generic-nimh-aa")
	if err != nil {
		fmt.Println(err)
		return
	}
	p, _ := cell.NewPack(typ, 8, 1)
	fmt.Printf("%s: %.1f V, %.2f Wh\n", typ.Name, p.NominalVolts(), p.NominalEnergyWh())
	// Output: generic-nimh-aa: 9.6 V, 23.04 Wh
}
