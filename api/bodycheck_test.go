package api

import (
	"bytes"
	"errors"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"

	"github.com/labstack/echo/v4"
	oapimw "github.com/oapi-codegen/echo-middleware"
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

// BenchmarkInvalidRunBody measures the refusal of a 4 MB invalid run (50,000
// standards, over maxItems 1000, each invalid) by three steps, side by side:
//   - validator_every_breach: the spec's validator alone, every breach
//     collected (what a body of any size got two rounds ago);
//   - validator_first_breach: the validator alone, first breach only (what
//     a body over multiErrorLimit got before shapeCheck);
//   - shape_first: the whole check as served (readBody, shapeCheck, which
//     stops at the 1001st standard, then the validator only if needed).
//
// Compare ns/op, B/op and allocs/op of the lines from one run (ratios only;
// the machine is shared):
//
//	go test ./api -run '^$' -bench InvalidRunBody -benchtime 5x -count 3
func BenchmarkInvalidRunBody(b *testing.B) {
	body := bigInvalidRun(4 << 20)
	longNames := []byte(`{"method":"nitrate-uv","instrument":"photometer-7","acquired_at":"2026-03-02T08:00:00Z","standards":[` +
		strings.TrimSuffix(strings.Repeat(`{"analyte":"`+strings.Repeat("n", 8000)+`","level":"L1","concentration":0.5,"responses":[0.01]},`, 500), ",") + `]}`)
	request := func() echo.Context {
		req := httptest.NewRequest(http.MethodPost, "/v1/runs", bytes.NewReader(body))
		req.Header.Set("Content-Type", "application/json")
		return echo.New().NewContext(req, httptest.NewRecorder())
	}
	v := newTestSpecValidator(b)
	validatorOnly := func(opts *oapimw.Options) func() error {
		return func() error {
			if he := oapimw.ValidateRequestFromContext(request(), v.router, opts); he != nil {
				return he
			}
			return nil
		}
	}
	for _, c := range []struct {
		name string
		run  func() error
	}{
		{"validator_every_breach", validatorOnly(v.opts)},
		{"validator_first_breach", validatorOnly(v.firstOnly)},
		{"shape_first", func() error { return v.validate(request()) }},
		// The same size inside every count: 500 standards whose analyte
		// names run to 8,000 characters (maxLength 64), refused at the
		// first name (500, within the bound of 1000).
		{"long_names_served", func() error {
			req := httptest.NewRequest(http.MethodPost, "/v1/runs", bytes.NewReader(longNames))
			req.Header.Set("Content-Type", "application/json")
			return v.validate(echo.New().NewContext(req, httptest.NewRecorder()))
		}},
	} {
		b.Run(c.name, func(b *testing.B) {
			b.ReportAllocs()
			b.SetBytes(int64(len(body)))
			for b.Loop() {
				if c.run() == nil {
					b.Fatal("the invalid run was accepted")
				}
			}
		})
	}
}

// TestShapeCheck: the breaches shapeCheck answers before the validator
// decodes the body, each with its pointer, and what it leaves to the
// validator.
func TestShapeCheck(t *testing.T) {
	v := newTestSpecValidator(t)
	route, _, err := v.router.FindRoute(httptest.NewRequest(http.MethodPost, "/v1/runs", nil))
	if err != nil {
		t.Fatal(err)
	}
	schema := jsonBodySchema(route.Operation)
	var junk strings.Builder
	junk.WriteString(`{"method":"nitrate-uv","notes":[`)
	for i := range 200000 {
		if i > 0 {
			junk.WriteByte(',')
		}
		junk.WriteString(`[1,2]`)
	}
	junk.WriteString(`]}`)
	std := `{"analyte":"nitrate","level":"L1","concentration":0.5,"responses":[0.01]}`
	for _, c := range []struct {
		name, body, pointer, detail string
	}{
		{"member a closed object does not name, holding 2 MB", junk.String(), "/notes", `property "notes" is unsupported`},
		{"nested member", `{"method":"m","standards":[` + std + `,{"analyte":"nitrate","lvel":"L2"}]}`, "/standards/1/lvel", `property "lvel" is unsupported`},
		{"array over maxItems", `{"standards":[` + strings.Repeat(std+",", 1000) + std + `]}`, "/standards", "maximum number of items is 1000"},
		{"string over maxLength", `{"method":"` + strings.Repeat("é", 65) + `"}`, "/method", "maximum string length is 64"},
		{"malformed JSON", "{\n  \"method\": ]", "/", "the body is not JSON (line 2, column 13: invalid character ']'"},
		{"truncated JSON", `{"method":`, "/", "the body is not JSON (line 1, column 11: the body ends before its JSON value does)"},
		{"trailing data", `{"method":"m"} {"method":"n"}`, "/", "data after the JSON value"},
	} {
		t.Run(c.name, func(t *testing.T) {
			p := shapeCheck([]byte(c.body), schema)
			if p == nil || p.p.Status != http.StatusBadRequest || len(p.p.Errors) != 1 ||
				p.p.Errors[0].Pointer != c.pointer || !strings.Contains(p.p.Errors[0].Detail, c.detail) {
				t.Fatalf("shapeCheck = %+v, want 400 at %s: %s", p, c.pointer, c.detail)
			}
		})
	}
	for _, c := range []struct{ name, body string }{
		{"a valid run", `{"method":"m","instrument":"i","acquired_at":"2026-03-02T08:00:00Z","standards":[` + std + `]}`},
		{"wrong types are the validator's", `{"method":1,"standards":"many"}`},
		{"64 characters of two bytes each", `{"method":"` + strings.Repeat("é", 64) + `"}`},
		{"1000 standards, the maximum", `{"standards":[` + strings.Repeat(std+",", 999) + std + `]}`},
	} {
		t.Run(c.name, func(t *testing.T) {
			if p := shapeCheck([]byte(c.body), schema); p != nil {
				t.Fatalf("shapeCheck = %+v, want nil", p.p)
			}
		})
	}
}
