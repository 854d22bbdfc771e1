package api

import (
	"errors"
	"regexp"
	"strings"

	"github.com/getkin/kin-openapi/openapi3"
)

// What a person reads when a value breaks the spec: what was expected, in
// words, with an example, instead of the validator's regular expression or
// its "doesn't match all schemas from allOf". The validator's own words stay
// for every breach this does not know.

// patternWords says in words what each pattern of the spec accepts.
var patternWords = map[string]string{
	`^[0-9a-fA-F]{8}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{4}-[0-9a-fA-F]{12}$`: "must be a UUID such as 01a242fb-d46d-790e-8293-11f8c4644479",
	`^[A-Za-z0-9][A-Za-z0-9._:-]{0,63}$`:                                            "must be an identifier: 1 to 64 characters of A-Z a-z 0-9 . _ : -, starting with a letter or digit",
	`^[A-Za-z0-9][A-Za-z0-9._:@-]{0,127}$`:                                          "must be 1 to 128 characters of A-Z a-z 0-9 . _ : @ -, starting with a letter or digit",
	`^[A-Za-z0-9._:-]{1,128}$`:                                                      "must be 1 to 128 characters of A-Z a-z 0-9 . _ : -",
	`^[!-~]{1,32}$`:                                                                 "must be a unit of 1 to 32 printable ASCII characters without spaces, such as mg/L or ug/L",
	`^[^\x00-\x08\x0B\x0C\x0E-\x1F\x7F]+$`:                                          "must not be empty or hold control characters",
	`^[A-Za-z0-9_-]+$`:                                                              "must be a cursor as the previous page's next_cursor gave it",
	`^[a-z0-9][a-z0-9._-]{0,63}$`:                                                   "must be a login: 1 to 64 characters of a-z 0-9 . _ -, starting with a letter or digit",
}

// dateTimeWords is what every date-time field and parameter accepts.
const dateTimeWords = "must be an RFC 3339 date-time with a time zone, such as 2026-03-02T08:00:00Z or 2026-03-02T09:00:00+01:00"

// patternInMessage finds the pattern a validator's message quotes, in the
// forms kin-openapi writes: `doesn't match the regular expression "…"`,
// `doesn't match pattern "…"` and `does not match pattern '…'`.
var patternInMessage = regexp.MustCompile(`(?:regular expression|pattern) ["'](.+?)["']\)?$`)

// humanReason is the detail of a schema breach: se's reason in words where
// it is one of the known kinds, else the validator's reason.
func humanReason(se *openapi3.SchemaError) string {
	// allOf wraps the breach of the schema it refers to: say that one.
	if se.SchemaField == "allOf" || se.SchemaField == "oneOf" || se.SchemaField == "anyOf" {
		var inner *openapi3.SchemaError
		if se.Origin != nil && errors.As(se.Origin, &inner) && inner != se {
			return humanReason(inner)
		}
	}
	if s := se.Schema; s != nil {
		switch se.SchemaField {
		case "format":
			if s.Format == "date-time" && !strings.Contains(se.Reason, "leap second") {
				return dateTimeWords
			}
		case "pattern":
			if w, ok := patternWords[s.Pattern]; ok {
				return w
			}
		case "minLength":
			if s.MinLength == 1 {
				return "must not be empty"
			}
		}
	}
	return humanMessage(se.Reason)
}

// humanMessage is humanReason for a breach known only by its message (a
// parameter judged by the JSON Schema validator).
func humanMessage(msg string) string {
	// A leap second has its own sentence (oapi.LeapSecondError): keep it,
	// without the validator's words around it.
	if i := strings.Index(msg, "names a leap second"); i >= 0 {
		if j := strings.LastIndex(msg[:i], "the time "); j >= 0 {
			return msg[j:]
		}
		return msg
	}
	if strings.Contains(msg, `format "date-time"`) || strings.Contains(msg, `format 'date-time'`) {
		return dateTimeWords
	}
	if m := patternInMessage.FindStringSubmatch(msg); m != nil {
		p := strings.ReplaceAll(m[1], `\\`, `\`)
		if w, ok := patternWords[p]; ok {
			return w
		}
	}
	return msg
}
