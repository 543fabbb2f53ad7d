package main

import "testing"

func TestRename(t *testing.T) {
	in := `{"paths": {"/v1/batteries/{batterie}:planCharge": {"post": {"parameters": [{"name": "batterie", "in": "path"}]}}, "/v1/batteryTypes/{batteryType}": {}}}`
	want := `{"paths": {"/v1/batteries/{battery}:planCharge": {"post": {"parameters": [{"name": "battery", "in": "path"}]}}, "/v1/batteryTypes/{batteryType}": {}}}`
	if got := string(rename([]byte(in))); got != want {
		t.Errorf("rename = %s; want %s", got, want)
	}
	if got := string(rename([]byte(want))); got != want {
		t.Errorf("rename is not idempotent: %s", got)
	}
}
