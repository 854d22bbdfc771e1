package api

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"net/http"
	"strconv"
	"strings"
	"unicode/utf8"

	"github.com/getkin/kin-openapi/openapi3"
)

// shapeCheck walks a JSON body token by token beside its schema before the
// spec's validator decodes it into generic values, and answers at once the
// breaches that make a body large without making it valid:
//   - an array over its maxItems (the walk stops at the first item too many,
//     so a 4 MB array of 50,000 standards costs the first 501);
//   - a member a closed object (additionalProperties: false) does not name,
//     whatever its value holds;
//   - a string over its maxLength;
//   - data after the JSON value.
//
// A body that is not well-formed JSON is refused with the line and column
// where it stops being JSON (and a word on CSV when it looks like CSV).
//
// It holds no decoded value, so its memory does not grow with the body.
// Everything else (types, patterns, required members, the schema's
// composition) stays the validator's: where a schema composes others (allOf,
// oneOf, anyOf) the walk goes on below it without judging.
func shapeCheck(raw []byte, schema *openapi3.Schema) *problemError {
	w := shapeWalker{dec: json.NewDecoder(bytes.NewReader(raw))}
	w.dec.UseNumber() // numbers stay text: nothing is converted
	if err := w.value(schema, ""); err != nil {
		if b, ok := err.(*shapeBreach); ok {
			return newProblem(http.StatusBadRequest, "the body does not match the schema: "+b.detail,
				ProblemField{Pointer: b.pointer, Detail: b.detail})
		}
		detail := notJSON(raw, err, w.dec.InputOffset())
		return newProblem(http.StatusBadRequest, detail, ProblemField{Pointer: "/", Detail: detail})
	}
	end := w.dec.InputOffset()
	if len(bytes.TrimLeft(raw[end:], " \t\r\n")) != 0 {
		return newProblem(http.StatusBadRequest,
			fmt.Sprintf("the body holds data after its JSON value (from byte %d); send exactly one JSON value", end),
			ProblemField{Pointer: "/", Detail: "data after the JSON value"})
	}
	return nil
}

// notJSON says where raw stops being JSON: the decoder's complaint at its
// line and column (1-based, in bytes of the line), and a word on CSV when
// the body's first line looks like a CSV header.
func notJSON(raw []byte, err error, offset int64) string {
	var se *json.SyntaxError
	if errors.As(err, &se) {
		offset = se.Offset
	}
	if offset > 0 && se != nil {
		offset-- // SyntaxError.Offset counts the offending byte
	}
	offset = min(max(offset, 0), int64(len(raw)))
	before := raw[:offset]
	line := bytes.Count(before, []byte("\n")) + 1
	col := int(offset) - (bytes.LastIndexByte(before, '\n') + 1) + 1
	what := "the body ends before its JSON value does"
	if se != nil {
		what = se.Error()
	}
	msg := fmt.Sprintf("the body is not JSON (line %d, column %d: %s)", line, col, what)
	first, _, _ := bytes.Cut(bytes.TrimLeft(raw, " \t\r\n"), []byte("\n"))
	if bytes.Count(first, []byte(",")) >= 2 && len(first) > 0 && first[0] != '{' && first[0] != '[' {
		msg += "; it looks like CSV: send a CSV run to POST /v1/runs/csv (Content-Type: text/csv) with method, instrument and acquired_at as query parameters"
	}
	return msg
}

// shapeBreach is the first breach shapeCheck found.
type shapeBreach struct{ pointer, detail string }

func (b *shapeBreach) Error() string { return b.pointer + ": " + b.detail }

type shapeWalker struct{ dec *json.Decoder }

// value consumes one JSON value at pointer, judged against s (nil: not
// judged).
func (w *shapeWalker) value(s *openapi3.Schema, pointer string) error {
	tok, err := w.dec.Token()
	if err != nil {
		return err
	}
	switch tok {
	case json.Delim('{'):
		return w.object(s, pointer)
	case json.Delim('['):
		return w.array(s, pointer)
	}
	if str, ok := tok.(string); ok && s != nil && s.MaxLength != nil && uint64(len(str)) > *s.MaxLength &&
		uint64(utf8.RuneCountInString(str)) > *s.MaxLength {
		return &shapeBreach{pointer, "maximum string length is " + strconv.FormatUint(*s.MaxLength, 10)}
	}
	return nil
}

func (w *shapeWalker) object(s *openapi3.Schema, pointer string) error {
	judged := s != nil && len(s.AllOf) == 0 && len(s.OneOf) == 0 && len(s.AnyOf) == 0
	closed := judged && s.AdditionalProperties.Has != nil && !*s.AdditionalProperties.Has
	for w.dec.More() {
		tok, err := w.dec.Token()
		if err != nil {
			return err
		}
		key, _ := tok.(string)
		var at string // built only where something below is judged
		var sub *openapi3.Schema
		if judged {
			at = pointer + "/" + escapePointer(key)
			if ref := s.Properties[key]; ref != nil {
				sub = ref.Value
			} else if closed {
				return &shapeBreach{at, fmt.Sprintf("property %q is unsupported", key)}
			} else if ap := s.AdditionalProperties.Schema; ap != nil {
				sub = ap.Value
			}
		}
		if err := w.value(sub, at); err != nil {
			return err
		}
	}
	_, err := w.dec.Token() // '}'
	return err
}

func (w *shapeWalker) array(s *openapi3.Schema, pointer string) error {
	var items *openapi3.Schema
	limit := -1
	if s != nil && len(s.AllOf) == 0 && len(s.OneOf) == 0 && len(s.AnyOf) == 0 {
		if s.Items != nil {
			items = s.Items.Value
		}
		if s.MaxItems != nil {
			limit = int(*s.MaxItems)
		}
	}
	for n := 0; w.dec.More(); n++ {
		if limit >= 0 && n == limit {
			return &shapeBreach{pointer, "maximum number of items is " + strconv.Itoa(limit)}
		}
		var at string
		if items != nil {
			at = pointer + "/" + strconv.Itoa(n)
		}
		if err := w.value(items, at); err != nil {
			return err
		}
	}
	_, err := w.dec.Token() // ']'
	return err
}

// escapePointer escapes a member name for a JSON pointer (RFC 6901).
func escapePointer(s string) string {
	if !strings.ContainsAny(s, "~/") {
		return s
	}
	return strings.NewReplacer("~", "~0", "/", "~1").Replace(s)
}
