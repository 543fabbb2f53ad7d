// Command openapifix corrects the path-parameter names of the generated OpenAPI
// document. With expand_slashed_path_patterns, protoc-gen-openapiv2 names the
// parameter of a path like /v1/{name=batteries/*} after the collection with its final
// "s" cut off, which gives "{batterie}" for our one irregular plural. `make generate`
// runs this after buf generate:
//
//	go run ./gateway/internal/openapifix gateway/openapi/voltcast.swagger.json
//
// It rewrites the file in place and is idempotent.
package main

import (
	"bytes"
	"fmt"
	"os"
)

// singulars maps the generator's cut-off plurals to the right singular.
var singulars = map[string]string{"batterie": "battery"}

func main() {
	if len(os.Args) != 2 {
		fmt.Fprintln(os.Stderr, "usage: openapifix FILE")
		os.Exit(2)
	}
	if err := fix(os.Args[1]); err != nil {
		fmt.Fprintln(os.Stderr, "openapifix:", err)
		os.Exit(1)
	}
}

func fix(path string) error {
	b, err := os.ReadFile(path)
	if err != nil {
		return err
	}
	out := rename(b)
	if bytes.Equal(out, b) {
		return nil
	}
	return os.WriteFile(path, out, 0o644)
}

// rename replaces the wrong names in path templates ("{batterie}") and in the
// parameter objects ("name": "batterie").
func rename(b []byte) []byte {
	for wrong, right := range singulars {
		b = bytes.ReplaceAll(b, []byte("{"+wrong+"}"), []byte("{"+right+"}"))
		b = bytes.ReplaceAll(b, []byte(`"name": "`+wrong+`"`), []byte(`"name": "`+right+`"`))
	}
	return b
}
