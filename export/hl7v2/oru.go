// Package hl7v2 encodes quantitative laboratory results as an HL7 v2.5.1
// ORU^R01 message (unsolicited observation result): MSH, an optional PID,
// OBR, and per result an OBX (value type NM) followed by NTE comments, with
// MLLP framing for a TCP interface.
//
// Every result is sent with an NTE carrying export.Caution: the laboratory's
// accreditation, its regulator and its SOP come first, and a qualified
// person reviews results. A receiving system is configured by the
// laboratory; nothing here replaces its interface validation.
package hl7v2

import (
	"errors"
	"fmt"
	"strconv"
	"strings"
	"time"

	"curvekeeper/export"
)

// Delimiters of every message this package writes (HL7 v2.5.1 Ch. 2 §2.5):
// segment terminator CR, field |, component ^, repetition ~, escape \,
// subcomponent &.
const (
	SegmentTerminator = '\r'
	Encoding          = `^~\&` // MSH-2
)

// MLLP framing bytes (HL7 v2 Minimal Lower Layer Protocol): start block
// VT, end block FS followed by CR.
const (
	StartBlock = 0x0B
	EndBlock   = 0x1C
)

// Message is one ORU^R01 report of results of one sample.
type Message struct {
	SendingApplication, SendingFacility     string // MSH-3, MSH-4
	ReceivingApplication, ReceivingFacility string // MSH-5, MSH-6
	// Time is MSH-7, the time the message was created (injected, never read
	// from the clock here).
	Time time.Time
	// ControlID is MSH-10, unique per message; the receiver's ACK quotes it.
	ControlID string
	// ProcessingID is MSH-11: "P" production (the default), "T" training,
	// "D" debugging.
	ProcessingID string
	Patient      *Patient // PID, omitted when nil (e.g. an environmental sample)
	Order        Order
	Results      []Result
}

// Patient is a minimal PID.
type Patient struct {
	ID            string // PID-3.1
	AssigningAuth string // PID-3.4
	Family, Given string // PID-5.1, PID-5.2
	BirthDate     string // PID-7, YYYYMMDD, optional
	Sex           string // PID-8 (F, M, O, U), optional
}

// Order is the OBR of the sample.
type Order struct {
	PlacerNumber string // OBR-2
	FillerNumber string // OBR-3, e.g. the laboratory's sample id
	// ServiceCode, ServiceText, ServiceSystem: OBR-4 (CE), the test or
	// panel ordered, e.g. a local code with system "L".
	ServiceCode, ServiceText, ServiceSystem string
	ObservedAt                              time.Time // OBR-7; zero: empty
}

// Result is one quantitative result, one OBX.
type Result struct {
	// Code, Text, System: OBX-3 (CE), the analyte, e.g. a LOINC code with
	// system "LN" or a local code with "L".
	Code, Text, System string
	// Value is OBX-5 (NM). ValueText, when set, is sent instead (e.g. the
	// result rounded to the place of its uncertainty); it must be a number.
	Value     float64
	ValueText string
	// UnitCode is the UCUM code (OBX-6.1, system "UCUM" in OBX-6.3) and
	// UnitText its display text (OBX-6.2; the code when empty).
	UnitCode, UnitText string
	ReferenceRange     string   // OBX-7, e.g. "0.5-10"
	AbnormalFlags      []string // OBX-8 (HL7 table 0078: L, H, LL, HH, N, A, …), repeated with ~
	// ReleaseState is the service's plain release state (see
	// export.Release*); Corrected marks a result that replaces one already
	// sent as final. Status maps them to OBX-11.
	ReleaseState string
	Corrected    bool
	ObservedAt   time.Time // OBX-14; zero: empty
	// MethodCode, MethodText: OBX-17 (CE), the analytical method.
	MethodCode, MethodText string
	Equipment              string // OBX-18 (EI), the instrument's identifier
	// Uncertainty, when set, is written as an NTE after the OBX, e.g. from
	// export.UncertaintyStatement: "Expanded uncertainty U = 0.89 mg/L
	// (k = 2.16, coverage probability about 95 %)".
	Uncertainty string
	Notes       []string // more NTE comments
}

// Status maps a release state to OBX-11 (HL7 table 0085): releasable → F
// (final), or C (correction) when the result replaces one sent as final;
// provisional → P (preliminary); withheld → X (results cannot be obtained:
// the value is not sent). An unknown state is an error, never a guess.
func Status(releaseState string, corrected bool) (string, error) {
	switch releaseState {
	case export.ReleaseReleasable:
		if corrected {
			return "C", nil
		}
		return "F", nil
	case export.ReleaseProvisional:
		return "P", nil
	case export.ReleaseWithheld:
		return "X", nil
	}
	return "", fmt.Errorf("hl7v2: unknown release state %q", releaseState)
}

// Escape returns s with the delimiters escaped for a field of this
// package's messages (HL7 v2.5.1 Ch. 2 §2.7): | → \F\, ^ → \S\, & → \T\,
// ~ → \R\, \ → \E\, CR → \X0D\, LF → \X0A\.
func Escape(s string) string {
	if !strings.ContainsAny(s, "|^&~\\\r\n") {
		return s
	}
	var b strings.Builder
	b.Grow(len(s) + 8)
	for i := 0; i < len(s); i++ {
		switch c := s[i]; c {
		case '|':
			b.WriteString(`\F\`)
		case '^':
			b.WriteString(`\S\`)
		case '&':
			b.WriteString(`\T\`)
		case '~':
			b.WriteString(`\R\`)
		case '\\':
			b.WriteString(`\E\`)
		case '\r':
			b.WriteString(`\X0D\`)
		case '\n':
			b.WriteString(`\X0A\`)
		default:
			b.WriteByte(c)
		}
	}
	return b.String()
}

// timestamp formats a DTM to the second with its UTC offset
// (YYYYMMDDHHMMSS+ZZZZ); zero time gives "".
func timestamp(t time.Time) string {
	if t.IsZero() {
		return ""
	}
	return t.Format("20060102150405-0700")
}

// components joins already escaped components with ^, dropping empty
// trailing ones.
func components(c ...string) string {
	n := len(c)
	for n > 0 && c[n-1] == "" {
		n--
	}
	return strings.Join(c[:n], "^")
}

// segment writes one segment: its name and fields joined by |, empty
// trailing fields dropped, then CR.
func segment(b *strings.Builder, name string, fields ...string) {
	n := len(fields)
	for n > 0 && fields[n-1] == "" {
		n--
	}
	b.WriteString(name)
	for _, f := range fields[:n] {
		b.WriteByte('|')
		b.WriteString(f)
	}
	b.WriteByte(SegmentTerminator)
}

// isNM reports whether s is an HL7 NM value: an optional sign, digits and
// at most one decimal point, at least one digit.
func isNM(s string) bool {
	digits, point := 0, false
	for i := 0; i < len(s); i++ {
		switch c := s[i]; {
		case c >= '0' && c <= '9':
			digits++
		case c == '.' && !point:
			point = true
		case (c == '+' || c == '-') && i == 0:
		default:
			return false
		}
	}
	return digits > 0
}

// Encode returns the message's segments, each ended by CR (no MLLP frame;
// see Frame). Preconditions: a control id, a non-zero Time, at least one
// result, each with a code, a UCUM unit code, a known release state and a
// numeric ValueText when one is given.
func Encode(m Message) ([]byte, error) {
	if m.ControlID == "" {
		return nil, errors.New("hl7v2: message needs a control id (MSH-10)")
	}
	if m.Time.IsZero() {
		return nil, errors.New("hl7v2: message needs its creation time (MSH-7)")
	}
	if len(m.Results) == 0 {
		return nil, errors.New("hl7v2: message has no results")
	}
	pid := m.ProcessingID
	if pid == "" {
		pid = "P"
	}
	var b strings.Builder
	// MSH-1 is the field separator itself, so the segment starts "MSH|^~\&|".
	b.WriteString("MSH|")
	b.WriteString(Encoding)
	for _, f := range []string{Escape(m.SendingApplication), Escape(m.SendingFacility),
		Escape(m.ReceivingApplication), Escape(m.ReceivingFacility), timestamp(m.Time), "",
		"ORU^R01^ORU_R01", Escape(m.ControlID), Escape(pid), "2.5.1"} {
		b.WriteByte('|')
		b.WriteString(f)
	}
	b.WriteByte(SegmentTerminator)
	if p := m.Patient; p != nil {
		if p.ID == "" {
			return nil, errors.New("hl7v2: patient needs an id (PID-3)")
		}
		segment(&b, "PID", "1", "", components(Escape(p.ID), "", "", Escape(p.AssigningAuth)), "",
			components(Escape(p.Family), Escape(p.Given)), "", Escape(p.BirthDate), Escape(p.Sex))
	}
	o := m.Order
	segment(&b, "OBR", "1", Escape(o.PlacerNumber), Escape(o.FillerNumber),
		components(Escape(o.ServiceCode), Escape(o.ServiceText), Escape(o.ServiceSystem)), "", "", timestamp(o.ObservedAt))
	for i, r := range m.Results {
		if err := writeOBX(&b, i+1, r); err != nil {
			return nil, err
		}
	}
	return []byte(b.String()), nil
}

// writeOBX writes the OBX of result r with set id n and its NTE segments.
func writeOBX(b *strings.Builder, n int, r Result) error {
	where := "hl7v2: result " + strconv.Itoa(n)
	if r.Code == "" {
		return errors.New(where + ": needs an observation code (OBX-3)")
	}
	if r.UnitCode == "" {
		return errors.New(where + ": needs a UCUM unit code (OBX-6), \"1\" for a unitless value")
	}
	status, err := Status(r.ReleaseState, r.Corrected)
	if err != nil {
		return fmt.Errorf("%s: %w", where, err)
	}
	value := r.ValueText
	if value == "" {
		value = strconv.FormatFloat(r.Value, 'f', -1, 64)
	}
	if !isNM(value) {
		return fmt.Errorf("%s: value %q is not an HL7 NM number", where, value)
	}
	if status == "X" {
		value = "" // a withheld result is not sent
	}
	unitText := r.UnitText
	if unitText == "" {
		unitText = r.UnitCode
	}
	flags := make([]string, len(r.AbnormalFlags))
	for i, f := range r.AbnormalFlags {
		flags[i] = Escape(f)
	}
	segment(b, "OBX", strconv.Itoa(n), "NM",
		components(Escape(r.Code), Escape(r.Text), Escape(r.System)), "", value,
		components(Escape(r.UnitCode), Escape(unitText), "UCUM"), Escape(r.ReferenceRange),
		strings.Join(flags, "~"), "", "", status, "", "", timestamp(r.ObservedAt), "", "",
		components(Escape(r.MethodCode), Escape(r.MethodText)), Escape(r.Equipment))
	notes := make([]string, 0, len(r.Notes)+2)
	if r.Uncertainty != "" {
		notes = append(notes, r.Uncertainty)
	}
	notes = append(notes, r.Notes...)
	notes = append(notes, export.Caution)
	for i, c := range notes {
		segment(b, "NTE", strconv.Itoa(i+1), "L", Escape(c))
	}
	return nil
}

// Frame wraps an encoded message in an MLLP block: 0x0B, the message,
// 0x1C 0x0D.
func Frame(msg []byte) []byte {
	out := make([]byte, 0, len(msg)+3)
	out = append(out, StartBlock)
	out = append(out, msg...)
	return append(out, EndBlock, '\r')
}
