package oapi

import (
	"bytes"
	"encoding/json"
	"strings"
	"testing"

	"github.com/getkin/kin-openapi/openapi3"

	"curvekeeper/openapi"
)

// TestEmbeddedSpecIsCurrent fails when openapi/openapi.yaml changed and
// `go generate ./api/oapi` was not run: the spec embedded in the generated
// code must be the document the server serves.
func TestEmbeddedSpecIsCurrent(t *testing.T) {
	embedded, err := GetSwagger()
	if err != nil {
		t.Fatalf("embedded spec: %v", err)
	}
	served, err := openapi3.NewLoader().LoadFromData(openapi.YAML)
	if err != nil {
		t.Fatalf("openapi.yaml: %v", err)
	}
	// oapi-codegen capitalises the operation ids of the spec it embeds
	// (createRun becomes CreateRun); compare them apart.
	for path, item := range served.Paths.Map() {
		for method, op := range item.Operations() {
			e := embedded.Paths.Find(path).GetOperation(method)
			if e == nil || !strings.EqualFold(e.OperationID, op.OperationID) {
				t.Fatalf("%s %s: embedded spec lacks operation %q; run go generate ./api/oapi", method, path, op.OperationID)
			}
			e.OperationID, op.OperationID = "", ""
		}
	}
	got, err := json.Marshal(embedded)
	if err != nil {
		t.Fatal(err)
	}
	want, err := json.Marshal(served)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(got, want) {
		t.Error("api/oapi/oapi.gen.go embeds another version of openapi/openapi.yaml; run go generate ./api/oapi")
	}
}
