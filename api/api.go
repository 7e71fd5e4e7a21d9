// Package api holds the OpenAPI 3 document of the Mottle HTTP service,
// the contract that the service's router is tested against and that the
// browser preview and lab automation code to.
package api

import (
	"bytes"
	_ "embed"
)

//go:embed openapi.json
var doc []byte

// OpenAPI returns a copy of the OpenAPI 3.1 document (JSON).
func OpenAPI() []byte { return bytes.Clone(doc) }
