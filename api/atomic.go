package api

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"fmt"
	"net/http"
	"reflect"
	"strconv"
	"strings"

	"github.com/getkin/kin-openapi/openapi3"
	"github.com/labstack/echo/v4"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// A write and its answer are one unit. Every write operation of the
// contract (but createRun, see below) runs its handler and encodes its
// answer inside one transaction (lab.Service.Atomically): the bytes the
// client will receive exist before the commit, so an answer that cannot be
// made (a 5xx) leaves nothing behind, not the write, its audit row or its
// feed event. The answer is sent after the commit.
//
// A POST that writes accepts an Idempotency-Key: in the same unit the key is
// claimed before the handler runs and the answer stored with it, so a retry
// of the same request (same key, operation and body) is answered with the
// stored answer and writes nothing; the key on another request is 422.
//
// createRun is decoded on its own route (decode.go) and written in groups
// (store/run_writes.go) that cannot join a unit: its answer is made and
// encoded before any of its SQL runs (RunInput.CheckAnswer), and its key is
// kept by the run's own statements.

// unitOps are the operations answered as a unit: every operation of the
// spec that is not a GET and stores records (storesRecords). idem are those of them that declare the Idempotency-Key
// parameter.
func unitOps(doc *openapi3.T) (unit, idem map[string]bool) {
	unit, idem = map[string]bool{}, map[string]bool{}
	for _, item := range doc.Paths.Map() {
		for method, op := range item.Operations() {
			id := specName(op.OperationID) // the embedded document names operations as Go does (CreateRun)
			if method == http.MethodGet || !storesRecords(id) {
				continue
			}
			unit[goName(id)] = true
			for _, p := range op.Parameters {
				if p.Value != nil && p.Value.In == openapi3.ParameterInHeader && p.Value.Name == headerIdempotencyKey {
					idem[goName(id)] = true
				}
			}
		}
	}
	return unit, idem
}

// storesRecords is false for the operations that are not GETs but store
// nothing (the predictions, a batch of them and a recalculation compute; see
// their descriptions), and for createRun and its CSV route createRunCsv,
// which are not units (see above).
func storesRecords(id string) bool {
	switch id {
	case "createRun", "createRunCsv", "recalculateCurve", "createInstrumentPredictionBatch":
		return false
	}
	return !strings.HasSuffix(id, "Predictions")
}

// goName is an operationId as the generated code names it (createRun →
// CreateRun).
func goName(id string) string { return strings.ToUpper(id[:1]) + id[1:] }

// specName is goName's inverse, the operation as the spec and the stored
// keys name it.
func specName(op string) string { return strings.ToLower(op[:1]) + op[1:] }

// unitMiddleware is the strict handler middleware that makes each unit
// operation one transaction with its answer.
func (s *Server) unitMiddleware(unit, idem map[string]bool) oapi.StrictMiddlewareFunc {
	return func(f oapi.StrictHandlerFunc, op string) oapi.StrictHandlerFunc {
		if !unit[op] {
			return f
		}
		return func(c echo.Context, req any) (any, error) {
			var claim *lab.KeyClaim
			if key := c.Request().Header.Get(headerIdempotencyKey); key != "" && idem[op] {
				hash, err := requestHash(op, req)
				if err != nil {
					return nil, err
				}
				claim = &lab.KeyClaim{TokenID: mustPrincipal(c.Request().Context()).TokenID, Key: key, Operation: specName(op), RequestHash: hash}
			}
			var ans *recorded
			replayed := false
			outer := c.Request()
			err := s.lab.Atomically(outer.Context(), func(ctx context.Context) error {
				ans, replayed = nil, false
				if claim != nil {
					stored, err := s.lab.ClaimKey(ctx, *claim)
					if err != nil {
						return err
					}
					if stored != nil && op == opCreateToken {
						return tokenReplayed(stored)
					}
					if stored != nil {
						ans, replayed = replay(stored), true
						return nil
					}
				}
				c.SetRequest(outer.WithContext(ctx))
				resp, err := f(c, req)
				c.SetRequest(outer)
				if err != nil {
					return err
				}
				if ans, err = recordAnswer(op, resp); err != nil {
					return err
				}
				if s.answerFault != nil {
					if err := s.answerFault(op); err != nil {
						return err
					}
				}
				if claim != nil {
					stored := lab.StoredAnswer{Status: ans.status, Location: ans.header.Get("Location"), Body: ans.body.Bytes()}
					if op == opCreateToken {
						stored.Body = nil // the secret is shown once and never stored
						stored.Location = "/v1/tokens/" + resp.(oapi.CreateToken201JSONResponse).ID.String()
					}
					return s.lab.StoreAnswer(ctx, *claim, stored)
				}
				return nil
			})
			c.SetRequest(outer)
			if err != nil {
				return nil, err
			}
			if claim != nil {
				ans.header.Set(headerIdempotencyReplayed, strconv.FormatBool(replayed))
			}
			return nil, ans.send(c.Response())
		}
	}
}

// opCreateToken is the one write whose answer is not replayed: it holds the
// token's secret, which is never stored.
const opCreateToken = "CreateToken"

// tokenReplayed answers a createToken retry: 409 naming the token.
func tokenReplayed(a *lab.StoredAnswer) error {
	return &lab.Error{Kind: lab.KindConflict, In: lab.InHeader, Field: "/" + headerIdempotencyKey,
		Message: "a token was issued under this Idempotency-Key (" + a.Location + "); its secret is shown only once: revoke it and issue another if the secret was lost"}
}

// headerIdempotencyReplayed says whether an answer is a stored one.
const headerIdempotencyReplayed = "Idempotency-Replayed"

// requestHash identifies a request for its Idempotency-Key: the operation
// and its typed request (path parameters and decoded body) as JSON, so the
// same body hashes the same whatever its spacing or member order. A
// password in the body (signing, a new person) is left out: the hash is
// kept, and a fast hash of a password is not.
func requestHash(op string, req any) ([]byte, error) {
	b, err := json.Marshal(req)
	if err != nil {
		return nil, fmt.Errorf("api: hash request: %w", err)
	}
	var v any
	if err := json.Unmarshal(b, &v); err != nil {
		return nil, fmt.Errorf("api: hash request: %w", err)
	}
	dropPasswords(v)
	canon, err := json.Marshal(v) // maps are written in key order
	if err != nil {
		return nil, fmt.Errorf("api: hash request: %w", err)
	}
	h := sha256.New()
	h.Write([]byte(op + "\n"))
	h.Write(canon)
	return h.Sum(nil), nil
}

// dropPasswords removes every member named password from v, at any depth.
func dropPasswords(v any) {
	switch x := v.(type) {
	case map[string]any:
		delete(x, "password")
		for _, m := range x {
			dropPasswords(m)
		}
	case []any:
		for _, m := range x {
			dropPasswords(m)
		}
	}
}

// recorded is an answer made before the commit and sent after it.
type recorded struct {
	status int
	header http.Header
	body   bytes.Buffer
}

func (r *recorded) Header() http.Header         { return r.header }
func (r *recorded) Write(b []byte) (int, error) { return r.body.Write(b) }
func (r *recorded) WriteHeader(status int)      { r.status = status }

// recordAnswer makes resp's answer as the generated code would send it (its
// Visit<op>Response method), into memory.
func recordAnswer(op string, resp any) (*recorded, error) {
	m := reflect.ValueOf(resp).MethodByName("Visit" + op + "Response")
	if !m.IsValid() {
		return nil, fmt.Errorf("api: %T has no Visit%sResponse", resp, op)
	}
	r := &recorded{status: http.StatusOK, header: http.Header{}}
	out := m.Call([]reflect.Value{reflect.ValueOf(http.ResponseWriter(r))})
	if err, _ := out[0].Interface().(error); err != nil {
		return nil, fmt.Errorf("api: encode the answer of %s: %w", op, err)
	}
	return r, nil
}

// replay is a stored answer as recorded.
func replay(a *lab.StoredAnswer) *recorded {
	r := &recorded{status: a.Status, header: http.Header{}}
	if len(a.Body) > 0 {
		r.header.Set(echo.HeaderContentType, echo.MIMEApplicationJSON)
	}
	if a.Location != "" {
		r.header.Set("Location", a.Location)
	}
	r.body.Write(a.Body)
	return r
}

// send writes the answer.
func (r *recorded) send(w *echo.Response) error {
	for k, v := range r.header {
		w.Header()[k] = v
	}
	w.WriteHeader(r.status)
	_, err := w.Write(r.body.Bytes())
	return err
}
