// Package export holds what every export format of reported results shares.
// The formats live in its subpackages: hl7v2 (HL7 v2.5.1 ORU^R01), fhir
// (FHIR R4 Observation and Bundle) and csvout (RFC 4180 CSV).
//
// Every exported value is a laboratory result that a qualified person
// reviews; the laboratory's accreditation, its regulator and its method SOP
// come first. Each format carries Caution beside the values it exports.
package export

import (
	"strconv"
	"strings"
)

// Caution travels with every exported result (HL7 v2 NTE, FHIR note, CSV
// column). Short on purpose: it is repeated for every value.
const Caution = "Local accreditation, regulation and the laboratory's SOP take precedence; a qualified person reviews results before use."

// Release states of a result as the service reports them (a plain value;
// see ReleaseState in openapi/openapi.yaml). The formats map them to their
// own status codes.
const (
	ReleaseProvisional = "provisional" // the curve awaits review
	ReleaseReleasable  = "releasable"  // the curve is approved and no verification failed before the sample
	ReleaseWithheld    = "withheld"    // rejected, failed, unfittable or superseded curve, or a failed verification
)

// IntervalStatement states a Monte Carlo coverage interval a result reports
// in words, e.g. "Monte Carlo coverage interval 0.12 to 0.31 mg/L (coverage
// probability about 95 %, JCGM 101)"; low and high as reported.
func IntervalStatement(low, high, unit string, level float64) string {
	s := "Monte Carlo coverage interval " + low + " to " + high
	if unit != "" {
		s += " " + unit
	}
	return s + " (coverage probability about " + strconv.FormatFloat(100*level, 'f', -1, 64) + " %, JCGM 101)"
}

// UncertaintyStatement states an expanded uncertainty in words, e.g.
// "Expanded uncertainty U = 0.21 mg/L (k = 2.09, coverage probability about
// 95 %)". expanded is U as it is reported (two significant figures); k ≤ 0
// or level ≤ 0 leave that part out.
func UncertaintyStatement(expanded, unit string, k, level float64) string {
	s := "Expanded uncertainty U = " + expanded
	if unit != "" {
		s += " " + unit
	}
	var parts []string
	if k > 0 {
		parts = append(parts, "k = "+strconv.FormatFloat(k, 'f', 2, 64))
	}
	if level > 0 {
		parts = append(parts, "coverage probability about "+strconv.FormatFloat(100*level, 'f', -1, 64)+" %")
	}
	if len(parts) > 0 {
		s += " (" + strings.Join(parts, ", ") + ")"
	}
	return s
}
