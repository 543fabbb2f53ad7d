package main

import (
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/voltcast/voltcast/model/chem"
)

func TestTypesTable(t *testing.T) {
	code, out, errs := runVoltcast(t, "types")
	if code != 0 {
		t.Fatalf("voltcast types exit %d: %s", code, errs)
	}
	for _, n := range chem.Names() {
		if !strings.Contains(out, n) {
			t.Errorf("types table lacks %s", n)
		}
	}
	if !strings.Contains(out, "datasheet") {
		t.Error("types table lacks the datasheet caution")
	}
}

func TestTypesJSON(t *testing.T) {
	code, out, errs := runVoltcast(t, "types", "--json")
	if code != 0 {
		t.Fatalf("voltcast types --json exit %d: %s", code, errs)
	}
	var got struct {
		Types []typeSummary `json:"types"`
	}
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatal(err)
	}
	if len(got.Types) != len(chem.Names()) {
		t.Fatalf("%d types in JSON; want %d", len(got.Types), len(chem.Names()))
	}
	for _, r := range got.Types {
		// REFERENCE.md §1a: primaries are never charged.
		if (r.Chemistry == "alkaline" || r.Chemistry == "li-mno2") && r.Rechargeable {
			t.Errorf("%s listed as rechargeable", r.Name)
		}
	}
}

func TestTypesBadFlag(t *testing.T) {
	code, _, errs := runVoltcast(t, "types", "--nope")
	if code != 2 || strings.Count(strings.TrimSpace(errs), "\n") > 20 {
		t.Errorf("types --nope: exit %d; want 2 (stderr %q)", code, errs)
	}
}

func TestLoadType(t *testing.T) {
	if typ, err := loadType("generic-lfp-26650"); err != nil || typ.Name != "generic-lfp-26650" {
		t.Fatalf("loadType(built-in) = %v, %v", typ, err)
	}
	if _, err := loadType("generic-nosuch"); !errors.Is(err, chem.ErrUnknownType) {
		t.Errorf("loadType(unknown) = %v; want ErrUnknownType", err)
	}
	dir := t.TempDir()
	typ, _ := chem.Lookup("generic-nmc-18650")
	typ.Name = "bench-cell-a"
	b, _ := json.Marshal(typ)
	good := filepath.Join(dir, "good.json")
	if err := os.WriteFile(good, b, 0o600); err != nil {
		t.Fatal(err)
	}
	got, err := loadType(good)
	if err != nil || got.Name != "bench-cell-a" {
		t.Fatalf("loadType(file) = %v, %v", got, err)
	}
	// A file that decodes but is physically impossible must be rejected.
	typ.CapacityAh = -1
	b, _ = json.Marshal(typ)
	bad := filepath.Join(dir, "bad.json")
	if err := os.WriteFile(bad, b, 0o600); err != nil {
		t.Fatal(err)
	}
	if _, err := loadType(bad); err == nil || !strings.Contains(err.Error(), "capacity_amp_hours") {
		t.Errorf("loadType(negative capacity) = %v; want a capacity error", err)
	}
	garbage := filepath.Join(dir, "garbage.json")
	if err := os.WriteFile(garbage, []byte(`{"name": 3}`), 0o600); err != nil {
		t.Fatal(err)
	}
	if _, err := loadType(garbage); err == nil {
		t.Error("loadType(garbage) succeeded")
	}
	if _, err := loadType(filepath.Join(dir, "missing.json")); err == nil {
		t.Error("loadType(missing file) succeeded")
	}
}
