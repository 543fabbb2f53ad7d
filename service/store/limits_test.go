package store

import (
	"strconv"
	"strings"
	"testing"
)

// The id rule is AIP-122's resource id form (RFC 1034 labels: lowercase letters,
// digits and hyphens, starting with a letter, not ending with a hyphen, at most 63).
func TestValidID(t *testing.T) {
	for _, tc := range []struct {
		id   string
		want bool
	}{
		{"a", true},
		{"default", true},
		{"cargo-bike-7", true},
		{"generic-nmc-18650", true},
		{"a" + strings.Repeat("0", 62), true},
		{"a" + strings.Repeat("0", 63), false},
		{"", false},
		{"7bike", false},
		{"-bike", false},
		{"bike-", false},
		{"Bike", false},
		{"bike_7", false},
		{"batteries/bike", false},
		{"bïke", false},
		{"bike 7", false},
	} {
		if got := ValidID(tc.id); got != tc.want {
			t.Errorf("ValidID(%q) = %v; want %v", tc.id, got, tc.want)
		}
	}
}

func TestValidLabels(t *testing.T) {
	many := map[string]string{}
	for i := range MaxLabels + 1 { // MaxLabels+1 distinct keys
		many["k"+strconv.Itoa(i)] = "v"
	}
	for _, tc := range []struct {
		name   string
		labels map[string]string
		ok     bool
	}{
		{"nil", nil, true},
		{"simple", map[string]string{"fleet": "cargo", "site_2": "north-east", "empty": ""}, true},
		{"unicode value", map[string]string{"note": strings.Repeat("é", MaxLabelValueChars)}, true},
		{"value too long", map[string]string{"note": strings.Repeat("é", MaxLabelValueChars+1)}, false},
		{"key too long", map[string]string{"k" + strings.Repeat("x", MaxLabelKeyBytes): "v"}, false},
		{"key longest", map[string]string{"k" + strings.Repeat("x", MaxLabelKeyBytes-1): "v"}, true},
		{"upper key", map[string]string{"Fleet": "v"}, false},
		{"key starts with digit", map[string]string{"1a": "v"}, false},
		{"key starts with underscore", map[string]string{"_a": "v"}, false},
		{"empty key", map[string]string{"": "v"}, false},
		{"bad UTF-8", map[string]string{"a": "\xff"}, false},
		{"NUL", map[string]string{"a": "x\x00y"}, false},
		{"too many", many, false},
	} {
		err := ValidLabels(tc.labels)
		if (err == nil) != tc.ok {
			t.Errorf("ValidLabels(%s) = %v; want ok %v", tc.name, err, tc.ok)
		}
	}
}

func TestCalibrationStatusValid(t *testing.T) {
	for _, s := range []CalibrationStatus{CalibrationPending, CalibrationRunning, CalibrationSucceeded, CalibrationFailed, CalibrationCancelled} {
		if !s.Valid() {
			t.Errorf("%q.Valid() = false", s)
		}
	}
	for _, s := range []CalibrationStatus{"", "RUNNING", "done"} {
		if s.Valid() {
			t.Errorf("%q.Valid() = true", s)
		}
	}
}
