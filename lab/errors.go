package lab

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
)

// Kind classifies an error for the caller; api maps each kind to one HTTP
// status in a single table.
type Kind int

// The error kinds.
const (
	KindInternal    Kind = iota // anything unexpected; its text never reaches a client
	KindInvalid                 // the request is well-formed but breaks a rule (422)
	KindNotFound                // the named thing does not exist (404)
	KindConflict                // the state forbids it (reviewed twice, key reused) (409)
	KindUnavailable             // the database cannot be reached now (503)
	KindForbidden               // the caller may not act on what it names, or the person may not do this: wrong password, locked, disabled, lacking the role (403)
)

// Error is an error with a kind, an optional JSON pointer to the offending
// field of the request and a message fit for the client.
type Error struct {
	Kind    Kind
	Field   string // JSON pointer, e.g. "/standards/2/concentration"; may be empty
	Message string
	Err     error // the cause, for the log; may be nil
	// In says where Field was given: in the body (the default) or as a
	// parameter of the request's query, path or headers.
	In Place
	// Fields lists every offending field when there is more than one (rule
	// breaches checked together); Field and Message then repeat the first.
	Fields []FieldIssue
	// ShortOfData marks a well-formed request that the stored data cannot
	// answer (too little history): unprocessable, even when In names a
	// query parameter.
	ShortOfData bool
}

// Place is where an input was given.
type Place int

// The places of an input.
const (
	InBody   Place = iota // a field of the body; Field is a JSON pointer
	InQuery               // a query parameter; Field is "/" and its name
	InPath                // a path parameter; Field is "/" and its name
	InHeader              // a header; Field is "/" and its name
)

// ParamError makes an *Error of kind k about the request parameter name
// given in place in.
func ParamError(k Kind, in Place, name, format string, args ...any) error {
	return &Error{Kind: k, In: in, Field: "/" + name, Message: fmt.Sprintf(format, args...)}
}

// FieldIssue is one offending field and the rule it breaks.
type FieldIssue struct {
	Field   string // JSON pointer
	Message string
}

func (e *Error) Error() string {
	if e.Err != nil {
		return fmt.Sprintf("%s: %v", e.Message, e.Err)
	}
	return e.Message
}

func (e *Error) Unwrap() error { return e.Err }

// Errorf makes an *Error of kind k with a client-facing message.
func Errorf(k Kind, format string, args ...any) error {
	return &Error{Kind: k, Message: fmt.Sprintf(format, args...)}
}

// FieldError makes a KindInvalid *Error that names a field.
func FieldError(field, format string, args ...any) error {
	return &Error{Kind: KindInvalid, Field: field, Message: fmt.Sprintf(format, args...)}
}

// KindOf returns the kind of err, KindInternal when it carries none.
func KindOf(err error) Kind {
	var e *Error
	if errors.As(err, &e) {
		return e.Kind
	}
	return KindInternal
}

// Pointer builds a JSON pointer (RFC 6901) from reference tokens (strings
// and ints), e.g. Pointer("standards", 2, "level") is "/standards/2/level".
func Pointer(tokens ...any) string {
	var b strings.Builder
	for _, t := range tokens {
		b.WriteByte('/')
		switch v := t.(type) {
		case int:
			b.WriteString(strconv.Itoa(v))
		case string:
			b.WriteString(pointerEscaper.Replace(v))
		}
	}
	return b.String()
}

// pointerEscaper escapes a reference token of a JSON pointer (RFC 6901).
var pointerEscaper = strings.NewReplacer("~", "~0", "/", "~1")
