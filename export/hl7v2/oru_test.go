package hl7v2

import (
	"bytes"
	"encoding/hex"
	"strings"
	"testing"
	"time"

	"curvekeeper/export"
)

// reader is the test's own small HL7 v2 reader: segments split on CR,
// fields on |, repetitions on ~, components on ^, then unescaped (HL7
// v2.5.1 Ch. 2 §2.7).
type reader struct{ segs [][]string }

func parse(t *testing.T, msg []byte) reader {
	t.Helper()
	s := string(msg)
	if !strings.HasSuffix(s, "\r") {
		t.Fatalf("message does not end with the segment terminator CR: %q", s)
	}
	if strings.Contains(s, "\n") {
		t.Fatalf("message holds a raw LF: %q", s)
	}
	var r reader
	for _, seg := range strings.Split(strings.TrimSuffix(s, "\r"), "\r") {
		r.segs = append(r.segs, strings.Split(seg, "|"))
	}
	return r
}

// field returns field n of the k-th segment named name (k from 0), raw.
// MSH-1 is the field separator itself, so MSH-n is the n−1-th piece.
func (r reader) field(name string, k, n int) string {
	for _, s := range r.segs {
		if s[0] != name {
			continue
		}
		if k > 0 {
			k--
			continue
		}
		if name == "MSH" {
			n--
		}
		if n < len(s) {
			return s[n]
		}
		return ""
	}
	return "<no segment>"
}

// comp returns component c (from 1) of a raw field, unescaped.
func comp(f string, c int) string {
	parts := strings.Split(f, "^")
	if c > len(parts) {
		return ""
	}
	return unescape(parts[c-1])
}

func unescape(s string) string {
	var b strings.Builder
	for i := 0; i < len(s); i++ {
		if s[i] != '\\' {
			b.WriteByte(s[i])
			continue
		}
		j := strings.IndexByte(s[i+1:], '\\')
		if j < 0 {
			b.WriteString(s[i:])
			break
		}
		seq := s[i+1 : i+1+j]
		switch {
		case seq == "F":
			b.WriteByte('|')
		case seq == "S":
			b.WriteByte('^')
		case seq == "T":
			b.WriteByte('&')
		case seq == "R":
			b.WriteByte('~')
		case seq == "E":
			b.WriteByte('\\')
		case strings.HasPrefix(seq, "X"):
			raw, err := hex.DecodeString(seq[1:])
			if err != nil {
				return "<bad hex escape>"
			}
			b.Write(raw)
		default:
			return "<unknown escape " + seq + ">"
		}
		i += j + 1
	}
	return b.String()
}

func (r reader) names() string {
	var n []string
	for _, s := range r.segs {
		n = append(n, s[0])
	}
	return strings.Join(n, " ")
}

// An invented nitrate sample, results at fixed times in a +01:00 zone.
func sample() Message {
	zone := time.FixedZone("", 3600)
	return Message{
		SendingApplication: "curvekeeper", SendingFacility: "Example Water Lab",
		ReceivingApplication: "LIS", ReceivingFacility: "Example Water Lab",
		Time: time.Date(2026, 3, 9, 14, 5, 0, 0, zone), ControlID: "MSG-0001",
		Patient: &Patient{ID: "P-77", AssigningAuth: "EXLAB", Family: "Doe", Given: "Sam"},
		Order: Order{FillerNumber: "S-2026-0042", ServiceCode: "NO3", ServiceText: "Nitrate panel", ServiceSystem: "L",
			ObservedAt: time.Date(2026, 3, 9, 9, 30, 0, 0, zone)},
		Results: []Result{{
			Code: "NO3-N", Text: "Nitrate as N", System: "L", Value: 4.63, ValueText: "4.63",
			UnitCode: "mg/L", UnitText: "mg/L", ReferenceRange: "0-11.3", AbnormalFlags: []string{"N"},
			ReleaseState: export.ReleaseReleasable, ObservedAt: time.Date(2026, 3, 9, 11, 0, 0, 0, zone),
			MethodCode: "M-17", MethodText: "photometry, curve C-12", Equipment: "PHOTOMETER-2",
			Uncertainty: export.UncertaintyStatement("0.21", "mg/L", 2.09, 0.95),
		}, {
			Code: "NO2-N", Text: "Nitrite as N", System: "L", Value: -0.004,
			UnitCode: "mg/L", AbnormalFlags: []string{"L", "A"}, ReleaseState: export.ReleaseProvisional,
		}},
	}
}

func TestEncodeRoundTrip(t *testing.T) {
	msg, err := Encode(sample())
	if err != nil {
		t.Fatal(err)
	}
	r := parse(t, msg)
	if got, want := r.names(), "MSH PID OBR OBX NTE NTE OBX NTE"; got != want {
		t.Fatalf("segments %q, want %q\n%q", got, want, msg)
	}
	for _, c := range []struct {
		what      string
		got, want string
	}{
		{"MSH-2", r.field("MSH", 0, 2), `^~\&`},
		{"MSH-3", r.field("MSH", 0, 3), "curvekeeper"},
		{"MSH-7", r.field("MSH", 0, 7), "20260309140500+0100"},
		{"MSH-9", r.field("MSH", 0, 9), "ORU^R01^ORU_R01"},
		{"MSH-10", r.field("MSH", 0, 10), "MSG-0001"},
		{"MSH-11", r.field("MSH", 0, 11), "P"},
		{"MSH-12", r.field("MSH", 0, 12), "2.5.1"},
		{"PID-3.1", comp(r.field("PID", 0, 3), 1), "P-77"},
		{"PID-3.4", comp(r.field("PID", 0, 3), 4), "EXLAB"},
		{"PID-5.1", comp(r.field("PID", 0, 5), 1), "Doe"},
		{"OBR-3", r.field("OBR", 0, 3), "S-2026-0042"},
		{"OBR-4.2", comp(r.field("OBR", 0, 4), 2), "Nitrate panel"},
		{"OBR-7", r.field("OBR", 0, 7), "20260309093000+0100"},
		{"OBX-1", r.field("OBX", 0, 1), "1"},
		{"OBX-2", r.field("OBX", 0, 2), "NM"},
		{"OBX-3.1", comp(r.field("OBX", 0, 3), 1), "NO3-N"},
		{"OBX-3.3", comp(r.field("OBX", 0, 3), 3), "L"},
		{"OBX-5", r.field("OBX", 0, 5), "4.63"},
		{"OBX-6.1", comp(r.field("OBX", 0, 6), 1), "mg/L"},
		{"OBX-6.3", comp(r.field("OBX", 0, 6), 3), "UCUM"},
		{"OBX-7", r.field("OBX", 0, 7), "0-11.3"},
		{"OBX-8", r.field("OBX", 0, 8), "N"},
		{"OBX-11", r.field("OBX", 0, 11), "F"},
		{"OBX-14", r.field("OBX", 0, 14), "20260309110000+0100"},
		{"OBX-17.2", comp(r.field("OBX", 0, 17), 2), "photometry, curve C-12"},
		{"OBX-18", r.field("OBX", 0, 18), "PHOTOMETER-2"},
		{"NTE-3 (uncertainty)", unescape(r.field("NTE", 0, 3)), "Expanded uncertainty U = 0.21 mg/L (k = 2.09, coverage probability about 95 %)"},
		{"NTE-3 (caution)", unescape(r.field("NTE", 1, 3)), export.Caution},
		{"second OBX-5 (negative)", r.field("OBX", 1, 5), "-0.004"},
		{"second OBX-6.2 (text from code)", comp(r.field("OBX", 1, 6), 2), "mg/L"},
		{"second OBX-8 (repeats)", r.field("OBX", 1, 8), "L~A"},
		{"second OBX-11", r.field("OBX", 1, 11), "P"},
		{"second OBX caution", unescape(r.field("NTE", 2, 3)), export.Caution},
	} {
		if c.got != c.want {
			t.Errorf("%s = %q, want %q", c.what, c.got, c.want)
		}
	}
}

// HL7 v2.5.1 Ch. 2 §2.7.1: \F\ field, \S\ component, \T\ subcomponent,
// \R\ repetition, \E\ escape; §2.7.4: \Xdddd\ hexadecimal data, used here
// for CR (and LF), which would otherwise end the segment.
func TestEscape(t *testing.T) {
	for _, c := range []struct{ in, want string }{
		{"a|b", `a\F\b`},
		{"a^b", `a\S\b`},
		{"a&b", `a\T\b`},
		{"a~b", `a\R\b`},
		{`a\b`, `a\E\b`},
		{"a\rb", `a\X0D\b`},
		{"a\nb", `a\X0A\b`},
		{`\F\`, `\E\F\E\`},
		{"plain, text (µg/L)", "plain, text (µg/L)"},
	} {
		if got := Escape(c.in); got != c.want {
			t.Errorf("Escape(%q) = %q, want %q", c.in, got, c.want)
		}
		if back := unescape(Escape(c.in)); back != c.in {
			t.Errorf("unescape(Escape(%q)) = %q", c.in, back)
		}
	}
	// Every delimiter and a CR inside fields survive the message.
	m := sample()
	nasty := "ratio 1|2 ^ & ~ \\ line1\rline2"
	m.Results[0].Text = nasty
	m.Results[0].Notes = []string{nasty}
	msg, err := Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	r := parse(t, msg)
	if got := r.names(); got != "MSH PID OBR OBX NTE NTE NTE OBX NTE" {
		t.Fatalf("segments %q: a delimiter leaked", got)
	}
	if got := comp(r.field("OBX", 0, 3), 2); got != nasty {
		t.Errorf("OBX-3.2 = %q, want %q", got, nasty)
	}
	if got := unescape(r.field("NTE", 1, 3)); got != nasty {
		t.Errorf("NTE-3 = %q, want %q", got, nasty)
	}
}

func TestStatusAndWithheld(t *testing.T) {
	for _, c := range []struct {
		state     string
		corrected bool
		want      string
	}{
		{export.ReleaseReleasable, false, "F"}, {export.ReleaseReleasable, true, "C"},
		{export.ReleaseProvisional, false, "P"}, {export.ReleaseWithheld, false, "X"},
	} {
		if got, err := Status(c.state, c.corrected); err != nil || got != c.want {
			t.Errorf("Status(%q, %v) = %q, %v; want %q (HL7 table 0085)", c.state, c.corrected, got, err, c.want)
		}
	}
	if _, err := Status("approved", false); err == nil {
		t.Error("unknown release state accepted")
	}
	m := sample()
	m.Results[0].ReleaseState = export.ReleaseWithheld
	msg, err := Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	r := parse(t, msg)
	if r.field("OBX", 0, 5) != "" || r.field("OBX", 0, 11) != "X" {
		t.Errorf("withheld result: OBX-5 %q, OBX-11 %q; want empty, X", r.field("OBX", 0, 5), r.field("OBX", 0, 11))
	}
}

func TestEncodeRejects(t *testing.T) {
	for name, edit := range map[string]func(*Message){
		"no control id":    func(m *Message) { m.ControlID = "" },
		"no time":          func(m *Message) { m.Time = time.Time{} },
		"no results":       func(m *Message) { m.Results = nil },
		"no code":          func(m *Message) { m.Results[0].Code = "" },
		"no unit":          func(m *Message) { m.Results[0].UnitCode = "" },
		"unknown state":    func(m *Message) { m.Results[0].ReleaseState = "done" },
		"text value":       func(m *Message) { m.Results[0].ValueText = "<0.5" },
		"patient, no id":   func(m *Message) { m.Patient.ID = "" },
		"value, two signs": func(m *Message) { m.Results[0].ValueText = "--1" },
	} {
		m := sample()
		edit(&m)
		if _, err := Encode(m); err == nil {
			t.Errorf("%s: accepted", name)
		}
	}
}

func TestFrame(t *testing.T) {
	msg, err := Encode(sample())
	if err != nil {
		t.Fatal(err)
	}
	f := Frame(msg)
	if f[0] != 0x0B || !bytes.Equal(f[len(f)-2:], []byte{0x1C, 0x0D}) || !bytes.Equal(f[1:len(f)-2], msg) {
		t.Errorf("MLLP frame %q", f)
	}
	m := sample()
	m.Patient = nil
	msg, err = Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	if got := parse(t, msg).names(); got != "MSH OBR OBX NTE NTE OBX NTE" {
		t.Errorf("without a patient: segments %q", got)
	}
}

// FuzzEscape: escaped text holds no field, component, repetition or
// subcomponent delimiter and no CR or LF, and unescapes to the input.
func FuzzEscape(f *testing.F) {
	for _, s := range []string{"", "a|b^c~d\\e&f", "\r\n", `\X0D\`} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		e := Escape(s)
		if strings.ContainsAny(e, "|^~&\r\n") {
			t.Fatalf("Escape(%q) = %q holds a delimiter", s, e)
		}
		if back := unescape(e); back != s {
			t.Fatalf("unescape(Escape(%q)) = %q", s, back)
		}
	})
}
