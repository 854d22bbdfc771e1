// Package openapi holds curvekeeper's OpenAPI 3 document, the source of truth
// of the HTTP contract. The server serves it at GET /openapi.yaml and the code
// in api/oapi is generated from it.
package openapi

import _ "embed"

// YAML is the OpenAPI document, openapi.yaml, as written.
//
//go:embed openapi.yaml
var YAML []byte
