package store

import (
	"fmt"
	"strings"
	"unicode/utf8"
)

// Limits the store enforces. The service may enforce tighter ones at the API.
const (
	// MaxIDBytes is the longest id: battery type names, battery and calibration ids,
	// tenant ids.
	MaxIDBytes = 63
	// MaxRequestIDBytes is the longest request id.
	MaxRequestIDBytes = 128
	// MaxDisplayNameBytes is the longest display name (room for 200 characters of
	// any script).
	MaxDisplayNameBytes = 1024
	// MaxChemistryBytes is the longest chemistry name.
	MaxChemistryBytes = 32
	// MaxErrorBytes is the longest calibration error message.
	MaxErrorBytes = 4096
	// MaxBlobBytes is the largest JSON blob (parameters, estimator state, calibration
	// input and report).
	MaxBlobBytes = 16 << 20
	// MaxCellCount is the most cells in series, and the most in parallel.
	MaxCellCount = 10000
	// MaxLabels is the most labels on one battery.
	MaxLabels = 64
	// MaxLabelKeyBytes bounds a label's key (ASCII), MaxLabelValueChars its value
	// (characters, that is Unicode code points).
	MaxLabelKeyBytes, MaxLabelValueChars = 63, 63
	// DefaultPageSize is the page size when a request asks for 0.
	DefaultPageSize = 50
	// MaxPageSize is the largest page; larger requests are clamped to it.
	MaxPageSize = 1000
	// DefaultHealthLimit is the number of health records returned when a query asks
	// for 0.
	DefaultHealthLimit = 1000
	// MaxHealthLimit is the most health records one query returns.
	MaxHealthLimit = 10000
	// MaxHealthAppend is the most health records one append may carry.
	MaxHealthAppend = 1000
	// MaxStateBatch is the most writes one PutStates call may carry.
	MaxStateBatch = 1000
)

// ValidID reports whether s is a valid id for a tenant, battery type, battery or
// calibration run: 1 to [MaxIDBytes] characters of lowercase ASCII letters, digits and
// hyphens, starting with a letter and not ending with a hyphen (the resource id form of
// AIP-122, which follows RFC 1034 labels).
func ValidID(s string) bool {
	if len(s) == 0 || len(s) > MaxIDBytes {
		return false
	}
	for i := 0; i < len(s); i++ {
		c := s[i]
		switch {
		case 'a' <= c && c <= 'z':
		case ('0' <= c && c <= '9') || c == '-':
			if i == 0 {
				return false
			}
		default:
			return false
		}
	}
	return s[len(s)-1] != '-'
}

// ValidLabels reports whether labels can be stored, and if not, why: at most
// [MaxLabels] pairs; each key 1 to [MaxLabelKeyBytes] bytes of lowercase ASCII
// letters, digits, '_' and '-', starting with a letter; each value at most
// [MaxLabelValueChars] characters of valid UTF-8 (the label rules of common cloud APIs,
// restricted to ASCII keys: common practice).
func ValidLabels(labels map[string]string) error {
	if len(labels) > MaxLabels {
		return fmt.Errorf("%d labels, more than %d", len(labels), MaxLabels)
	}
	for k, v := range labels {
		if !validLabelKey(k) {
			return fmt.Errorf("label key %q: want 1 to %d of a-z, 0-9, '_' or '-', starting with a letter", k, MaxLabelKeyBytes)
		}
		if !utf8.ValidString(v) || utf8.RuneCountInString(v) > MaxLabelValueChars || strings.IndexByte(v, 0) >= 0 {
			return fmt.Errorf("label %q: value must be valid UTF-8 of at most %d characters, without NUL", k, MaxLabelValueChars)
		}
	}
	return nil
}

func validLabelKey(k string) bool {
	if len(k) == 0 || len(k) > MaxLabelKeyBytes || k[0] < 'a' || k[0] > 'z' {
		return false
	}
	for i := 1; i < len(k); i++ {
		c := k[i]
		if !('a' <= c && c <= 'z' || '0' <= c && c <= '9' || c == '_' || c == '-') {
			return false
		}
	}
	return true
}
