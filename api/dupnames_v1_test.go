//go:build !go1.27 || !goexperiment.jsonv2

package api

// specAcceptsDuplicateNames: kin-openapi's JSON body decoder keeps the last of
// duplicate member names when built without encoding/json/v2 (its file
// req_resp_decoder_jsonv1.go has the same build constraint).
const specAcceptsDuplicateNames = true
