//go:build go1.27 && goexperiment.jsonv2

package api

// specAcceptsDuplicateNames: kin-openapi's JSON body decoder refuses duplicate
// member names when built with encoding/json/v2 (Go 1.27 and later; its file
// req_resp_decoder_jsonv2.go has the same build constraint).
const specAcceptsDuplicateNames = false
