package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"strings"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
)

// maxTypeFileBytes bounds a parameter file; a real one is a few kilobytes.
const maxTypeFileBytes = 4 << 20

// loadType returns the cell type named by nameOrPath: a built-in type of the catalogue
// (see voltcast types), or else a JSON parameter file in the cell.Type JSON form. A
// file's type is validated before it is returned.
func loadType(nameOrPath string) (*cell.Type, error) {
	if nameOrPath == "" {
		return nil, fmt.Errorf("%w: --type is required (a built-in name such as generic-nmc-18650, or a JSON parameter file)", errUsage)
	}
	typ, err := chem.Lookup(nameOrPath)
	if err == nil {
		return typ, nil
	}
	if !looksLikePath(nameOrPath) {
		return nil, fmt.Errorf("%w: %w", errUsage, err)
	}
	f, err := os.Open(nameOrPath)
	if err != nil {
		return nil, fmt.Errorf("read cell type: %w", err)
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, maxTypeFileBytes+1))
	if err != nil {
		return nil, fmt.Errorf("read cell type %s: %w", nameOrPath, err)
	}
	if len(b) > maxTypeFileBytes {
		return nil, fmt.Errorf("read cell type %s: file is larger than %d bytes", nameOrPath, maxTypeFileBytes)
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	var t cell.Type
	if err := dec.Decode(&t); err != nil {
		return nil, fmt.Errorf("decode cell type %s: %w", nameOrPath, err)
	}
	if dec.More() {
		return nil, fmt.Errorf("decode cell type %s: trailing data after the JSON object", nameOrPath)
	}
	if err := t.Validate(); err != nil {
		return nil, fmt.Errorf("cell type %s: %w", nameOrPath, err)
	}
	return &t, nil
}

// looksLikePath reports whether s names a file rather than a built-in type: it has a
// path separator or a .json suffix, or such a file exists.
func looksLikePath(s string) bool {
	if strings.ContainsRune(s, os.PathSeparator) || strings.HasSuffix(strings.ToLower(s), ".json") {
		return true
	}
	_, err := os.Stat(s)
	return !errors.Is(err, os.ErrNotExist)
}
