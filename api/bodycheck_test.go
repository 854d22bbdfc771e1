package api

import (
	"bytes"
	"errors"
	"math"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"github.com/getkin/kin-openapi/openapi3filter"
	"github.com/labstack/echo/v4"
)

// bigInvalidRun is a JSON run of about size bytes whose standards array is
// far over its maxItems and whose every standard breaks the schema
// (a concentration given as a string): the body the validator used to judge
// item by item.
func bigInvalidRun(size int) []byte {
	var b bytes.Buffer
	b.WriteString(`{"method":"nitrate-uv","instrument":"photometer-7","acquired_at":"2026-03-02T08:00:00Z","standards":[`)
	const item = `{"analyte":"nitrate","level":"L1","concentration":"0.5","responses":[0.0102,0.0098]}`
	for i := 0; b.Len() < size-len(item)-2; i++ {
		if i > 0 {
			b.WriteByte(',')
		}
		b.WriteString(item)
	}
	b.WriteString(`]}`)
	return b.Bytes()
}

func validateRun(v *specValidator, body []byte) error {
	req := httptest.NewRequest(http.MethodPost, "/v1/runs", bytes.NewReader(body))
	req.Header.Set("Content-Type", "application/json")
	return v.validate(echo.New().NewContext(req, httptest.NewRecorder()))
}

// TestLargeInvalidBodyFirstBreachOnly: a 4 MB run over maxItems is answered
// 400 naming the first breach (the standards' count), not one error per
// item; a small invalid body still lists every breach.
func TestLargeInvalidBodyFirstBreachOnly(t *testing.T) {
	v := newTestSpecValidator(t)
	var pe *problemError
	if err := validateRun(v, bigInvalidRun(4<<20)); !errors.As(err, &pe) || pe.p.Status != http.StatusBadRequest {
		t.Fatalf("4 MB invalid run: %v", err)
	}
	if len(pe.p.Errors) != 1 || pe.p.Errors[0].Pointer != "/standards" || !strings.Contains(pe.p.Errors[0].Detail, "maximum number of items") {
		t.Errorf("4 MB invalid run: %d errors %+v, want the one breach of /standards' maxItems", len(pe.p.Errors), pe.p.Errors[:min(3, len(pe.p.Errors))])
	}
	small := bigInvalidRun(1 << 10) // 11 standards, each invalid
	if err := validateRun(v, small); !errors.As(err, &pe) || len(pe.p.Errors) < 2 {
		t.Errorf("small invalid run: want every breach listed, got %v", err)
	}
}

// BenchmarkInvalidRunBody measures the spec validator's refusal of a 4 MB
// invalid run: as before (every breach collected, each error's message
// carrying the offending value), every breach with short messages, and the
// first breach only (what a body over multiErrorLimit gets). Compare the two lines' ns/op, B/op and allocs/op
// from one run (ratios only; the machine is shared).
func BenchmarkInvalidRunBody(b *testing.B) {
	body := bigInvalidRun(4 << 20)
	for _, c := range []struct {
		name     string
		limit    int
		messages bool // the schema errors' default messages, with the value
	}{{"before", math.MaxInt, true}, {"every_breach", math.MaxInt, false}, {"first_breach", multiErrorLimit, false}} {
		b.Run(c.name, func(b *testing.B) {
			v := newTestSpecValidator(b)
			v.multiLimit = c.limit
			if c.messages {
				o := *v.opts
				o.Options = openapi3filter.Options{MultiError: true, AuthenticationFunc: openapi3filter.NoopAuthenticationFunc}
				v.opts = &o
			}
			b.ReportAllocs()
			b.SetBytes(int64(len(body)))
			for b.Loop() {
				if validateRun(v, body) == nil {
					b.Fatal("the invalid run was accepted")
				}
			}
		})
	}
}
