package csvout

import (
	"bytes"
	"encoding/csv"
	"strings"
	"testing"
	"time"

	"curvekeeper/export"
)

// OWASP "CSV Injection": cells starting with =, +, -, @, tab or CR are
// prefixed with an apostrophe; plain decimal numbers, negative ones
// included, are legitimate values and stay as they are.
func TestNeutralise(t *testing.T) {
	for _, c := range []struct{ in, want string }{
		{"=HYPERLINK(\"http://x\",\"y\")", "'=HYPERLINK(\"http://x\",\"y\")"},
		{"+cmd|' /C calc'!A0", "'+cmd|' /C calc'!A0"},
		{"-2+3", "'-2+3"},
		{"@SUM(A1:A2)", "'@SUM(A1:A2)"},
		{"\t=1", "'\t=1"},
		{"\r=1", "'\r=1"},
		{"-", "'-"},
		{"-Inf", "'-Inf"},
		{"-0x1p3", "'-0x1p3"},
		{"-0.5", "-0.5"},
		{"+1.25", "+1.25"},
		{"-1.2e-3", "-1.2e-3"},
		{"-.5", "-.5"},
		{"-1e", "'-1e"},
		{"4.63", "4.63"},
		{"nitrate = NO3", "nitrate = NO3"},
		{"", ""},
	} {
		if got := Neutralise(c.in); got != c.want {
			t.Errorf("Neutralise(%q) = %q, want %q", c.in, got, c.want)
		}
	}
}

// RFC 4180: the file reads back with encoding/csv to the same cells (after
// neutralisation), records end with CRLF, and quotes, commas and line
// breaks inside cells survive.
func TestWriteRoundTrip(t *testing.T) {
	rs := []Result{{
		SampleID: "S-1, \"dup\"", Analyte: "Nitrate as N", Value: "4.63", Unit: "mg/L", ExpandedUncertainty: "0.21",
		CoverageFactor: "2.09", Level: "0.95", ReleaseState: export.ReleaseReleasable, Flags: []string{"below_loq", "extrapolated"},
		Conformity: "pass (guard_band_u)", CurveID: "c-12", Instrument: "=cmd|'/C calc'!A0",
		ObservedAt: time.Date(2026, 3, 9, 9, 30, 0, 0, time.FixedZone("", 3600)),
	}, {
		SampleID: "S-2\nsecond line", Analyte: "Nitrite as N", Value: "-0.004", Unit: "mg/L", ReleaseState: export.ReleaseProvisional,
	}}
	var buf bytes.Buffer
	if err := Write(&buf, rs); err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(buf.String(), strings.Join(Header, ",")+"\r\n") {
		t.Errorf("header line %q", strings.SplitN(buf.String(), "\n", 2)[0])
	}
	recs, err := csv.NewReader(&buf).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(recs) != 3 {
		t.Fatalf("%d records, want 3", len(recs))
	}
	col := map[string]int{}
	for i, h := range recs[0] {
		col[h] = i
	}
	for _, c := range []struct {
		row       int
		col, want string
	}{
		{1, "sample_id", "S-1, \"dup\""}, {1, "value", "4.63"}, {1, "flags", "below_loq;extrapolated"},
		{1, "instrument", "'=cmd|'/C calc'!A0"}, {1, "observed_at", "2026-03-09T09:30:00+01:00"},
		{1, "caution", export.Caution}, {2, "sample_id", "S-2\nsecond line"}, {2, "value", "-0.004"},
		{2, "release_state", "provisional"}, {2, "caution", export.Caution},
	} {
		if got := recs[c.row][col[c.col]]; got != c.want {
			t.Errorf("row %d %s = %q, want %q", c.row, c.col, got, c.want)
		}
	}
}

// FuzzNeutralise: no written cell can start a formula unless it is a plain
// number.
func FuzzNeutralise(f *testing.F) {
	for _, s := range []string{"=1", "-0.5", "@x", "\t", "+1e5"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		got := Neutralise(s)
		if got != "" && strings.ContainsRune("=+-@\t\r", rune(got[0])) && !IsNumber(got) {
			t.Fatalf("Neutralise(%q) = %q starts a formula", s, got)
		}
		if got != s && got != "'"+s {
			t.Fatalf("Neutralise(%q) = %q changed more than a prefix", s, got)
		}
	})
}
