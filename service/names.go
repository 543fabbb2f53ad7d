package service

import (
	"strings"

	"github.com/voltcast/voltcast/service/store"
)

// Collections of the API's resource names (AIP-122).
const (
	collBatteryTypes = "batteryTypes"
	collBatteries    = "batteries"
	collCalibrations = "calibrations"
)

// parseName checks that name is "{collection}/{id}" with a valid id and returns the id.
// field is the request field path used in the error.
func parseName(field, name, collection string) (string, error) {
	if name == "" {
		return "", invalid(field, "is required")
	}
	id, ok := strings.CutPrefix(name, collection+"/")
	if !ok || !store.ValidID(id) {
		return "", invalid(field, "must be %q followed by an id of 1 to 63 lowercase letters, digits and hyphens (starting with a letter), got %q",
			collection+"/", truncate(name, 100))
	}
	return id, nil
}

// checkID validates a resource id given on Create.
func checkID(v *violations, field, id string) {
	if !store.ValidID(id) {
		v.add(field, "must be 1 to 63 lowercase letters, digits and hyphens, starting with a letter and not ending with a hyphen, got %q", truncate(id, 100))
	}
}

func batteryTypeName(id string) string { return collBatteryTypes + "/" + id }
func batteryName(id string) string     { return collBatteries + "/" + id }
func calibrationName(id string) string { return collCalibrations + "/" + id }

// resourceType returns the google.rpc.ResourceInfo type of a resource name.
func resourceType(name string) string {
	coll, _, _ := strings.Cut(name, "/")
	switch coll {
	case collBatteryTypes:
		return ErrorDomain + "/BatteryType"
	case collBatteries:
		return ErrorDomain + "/Battery"
	case collCalibrations:
		return ErrorDomain + "/Calibration"
	}
	return ""
}

// truncate shortens s for an error message (callers may send megabytes of junk).
func truncate(s string, n int) string {
	if len(s) <= n {
		return s
	}
	return strings.ToValidUTF8(s[:n], "") + "…"
}
