package calib

import "fmt"

// InputError reports input that cannot be fitted or predicted from. Field
// names the offending input in the caller's terms ("points[3].y",
// "responses", "dilution", "options.confidence"); Reason says why.
type InputError struct {
	Field  string
	Reason string
}

func (e *InputError) Error() string {
	return fmt.Sprintf("calib: %s: %s", e.Field, e.Reason)
}

func inputErr(field, format string, args ...any) error {
	return &InputError{Field: field, Reason: fmt.Sprintf(format, args...)}
}
