// Package export holds what every export format of reported results shares.
// The formats live in its subpackages: hl7v2 (HL7 v2.5.1 ORU^R01), fhir
// (FHIR R4 Observation and Bundle) and csvout (RFC 4180 CSV).
//
// Every exported value is a laboratory result that a qualified person
// reviews; the laboratory's accreditation, its regulator and its method SOP
// come first. Each format carries Caution beside the values it exports.
package export

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
