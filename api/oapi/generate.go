// Package oapi holds the types and the Echo strict-server interface generated
// by oapi-codegen from openapi/openapi.yaml, the source of truth of the HTTP
// contract. Do not edit oapi.gen.go; edit the spec and run go generate.
package oapi

//go:generate go tool oapi-codegen -config ../../openapi/oapi-codegen.yaml ../../openapi/openapi.yaml
