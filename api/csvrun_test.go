package api

import (
	"errors"
	"fmt"
	"math"
	"os"
	"reflect"
	"regexp"
	"strings"
	"testing"
	"testing/iotest"

	"curvekeeper/api/oapi"
)

// specCSVExample returns the example body of the CSV section of POST /v1/runs
// in openapi/openapi.yaml, so the test follows the spec as written there.
func specCSVExample(t *testing.T) string {
	t.Helper()
	doc, err := os.ReadFile("../openapi/openapi.yaml")
	if err != nil {
		t.Fatalf("read the spec: %v", err)
	}
	s := string(doc)
	i := strings.Index(s, "### CSV (`text/csv`)")
	if i < 0 {
		t.Fatal("spec has no CSV section")
	}
	s = s[i:]
	const open = "Example:\n        ```\n"
	j := strings.Index(s, open)
	if j < 0 {
		t.Fatal("CSV section has no example block")
	}
	s = s[j+len(open):]
	k := strings.Index(s, "        ```")
	if k < 0 {
		t.Fatal("CSV example block is not closed")
	}
	var b strings.Builder
	for _, line := range strings.SplitAfter(s[:k], "\n") {
		b.WriteString(strings.TrimPrefix(line, "        "))
	}
	return b.String()
}

func csvPtr(v float64) *float64 { return &v }

func TestDecodeCSVRunSpecExample(t *testing.T) {
	// Expected groups read off the example by hand (openapi/openapi.yaml,
	// POST /v1/runs, CSV section).
	wantStd := []oapi.StandardInput{
		{Analyte: "nitrate", Level: "L1", Concentration: 0.5, Responses: []float64{0.0102, 0.0098}},
		{Analyte: "nitrate", Level: "L2", Concentration: 1.0, Responses: []float64{0.0205}},
		{Analyte: "nitrate", Level: "L3", Concentration: 2.0, Responses: []float64{0.0411}},
	}
	wantSmp := []oapi.RunSampleInput{
		{Analyte: "nitrate", ID: "W-0042", Responses: []float64{0.0250}},
		{Analyte: "nitrate", ID: "W-0043", Dilution: csvPtr(2), Responses: []float64{0.0133}},
	}
	body := specCSVExample(t)
	variants := map[string]string{
		"as in the spec": body,
		"CRLF":           strings.ReplaceAll(body, "\n", "\r\n"),
		"BOM":            "\uFEFF" + body,
		"BOM and CRLF":   "\uFEFF" + strings.ReplaceAll(body, "\n", "\r\n"),
		"no final LF":    strings.TrimSuffix(body, "\n"),
		"blank lines":    strings.ReplaceAll(body, "\n", "\n\n  \t\n"),
		"all quoted":     csvQuoteAll(body),
		"columns reordered": "dilution,sample_id,response,concentration,level,analyte,kind\n" +
			",,0.0102,0.5,L1,nitrate,standard\n" +
			"# a comment between rows\n" +
			",,0.0098,0.50,L1,nitrate,standard\n" +
			",,0.0205,1,L2,nitrate,standard\n" +
			",,4.11e-2,2.0e0,L3,nitrate,standard\n" +
			",W-0042,.025,,,nitrate,sample\n" +
			"2.0,W-0043,0.0133,,,nitrate,sample\n",
	}
	for name, in := range variants {
		t.Run(name, func(t *testing.T) {
			gotStd, gotSmp, err := decodeCSVRun(strings.NewReader(in))
			if err != nil {
				t.Fatalf("decodeCSVRun: %v", err)
			}
			if !reflect.DeepEqual(gotStd, wantStd) {
				t.Errorf("standards:\n got %+v\nwant %+v", gotStd, wantStd)
			}
			if !reflect.DeepEqual(gotSmp, wantSmp) {
				t.Errorf("samples:\n got %s\nwant %s", csvFmtSamples(gotSmp), csvFmtSamples(wantSmp))
			}
		})
	}
}

// csvQuoteAll quotes every field of every non-comment line of body.
func csvQuoteAll(body string) string {
	var b strings.Builder
	for _, line := range strings.SplitAfter(body, "\n") {
		if line == "" || strings.HasPrefix(line, "#") {
			b.WriteString(line)
			continue
		}
		fields := strings.Split(strings.TrimSuffix(line, "\n"), ",")
		for i, f := range fields {
			fields[i] = `"` + f + `"`
		}
		b.WriteString(strings.Join(fields, ",") + "\n")
	}
	return b.String()
}

func csvFmtSamples(s []oapi.RunSampleInput) string {
	var parts []string
	for _, x := range s {
		d := "nil"
		if x.Dilution != nil {
			d = fmt.Sprint(*x.Dilution)
		}
		parts = append(parts, fmt.Sprintf("{%s %s dil=%s %v}", x.Analyte, x.ID, d, x.Responses))
	}
	return "[" + strings.Join(parts, " ") + "]"
}

func TestDecodeCSVRunAccepts(t *testing.T) {
	const hdr = "kind,analyte,level,concentration,response,sample_id,dilution\n"
	tests := []struct {
		name    string
		in      string
		wantStd []oapi.StandardInput
		wantSmp []oapi.RunSampleInput
	}{
		{
			name:    "required columns only",
			in:      "kind,analyte,level,concentration,response\nstandard,Cd,blank,0,-0.0004\nstandard,Cd,blank,0,0.0003\n",
			wantStd: []oapi.StandardInput{{Analyte: "Cd", Level: "blank", Concentration: 0, Responses: []float64{-0.0004, 0.0003}}},
		},
		{
			name:    "quoted quote-free identifier and doubled quotes in an empty cell",
			in:      hdr + `"standard","Pb:208","L.1","1.5e-3","12",,""` + "\n",
			wantStd: []oapi.StandardInput{{Analyte: "Pb:208", Level: "L.1", Concentration: 1.5e-3, Responses: []float64{12}}},
		},
		{
			name: "two analytes interleaved keep first-appearance order",
			in: hdr + "standard,b,L1,1,10,,\nstandard,a,L1,2,20,,\nstandard,b,L1,1,11,,\n" +
				"sample,a,,,5,S1,\nsample,b,,,6,S1,\nsample,a,,,7,S1,\n",
			wantStd: []oapi.StandardInput{
				{Analyte: "b", Level: "L1", Concentration: 1, Responses: []float64{10, 11}},
				{Analyte: "a", Level: "L1", Concentration: 2, Responses: []float64{20}},
			},
			wantSmp: []oapi.RunSampleInput{
				{Analyte: "a", ID: "S1", Responses: []float64{5, 7}},
				{Analyte: "b", ID: "S1", Responses: []float64{6}},
			},
		},
		{
			name:    "empty dilution equals 1",
			in:      hdr + "standard,a,L1,1,10,,\nsample,a,,,5,S1,\nsample,a,,,6,S1,1\n",
			wantStd: []oapi.StandardInput{{Analyte: "a", Level: "L1", Concentration: 1, Responses: []float64{10}}},
			wantSmp: []oapi.RunSampleInput{{Analyte: "a", ID: "S1", Responses: []float64{5, 6}}},
		},
		{
			name:    "range edges are inclusive where the schema says so",
			in:      hdr + "standard,a,L1,1e12,1e15,,\nstandard,a,L1,1.0e+12,-1e15,,\nsample,a,,,0,S1,1e6\n",
			wantStd: []oapi.StandardInput{{Analyte: "a", Level: "L1", Concentration: 1e12, Responses: []float64{1e15, -1e15}}},
			wantSmp: []oapi.RunSampleInput{{Analyte: "a", ID: "S1", Dilution: csvPtr(1e6), Responses: []float64{0}}},
		},
		{
			name:    "negative zero concentration is zero",
			in:      hdr + "standard,a,L0,-0,1,,\nstandard,a,L0,0,2,,\n",
			wantStd: []oapi.StandardInput{{Analyte: "a", Level: "L0", Concentration: 0, Responses: []float64{1, 2}}},
		},
		{
			name:    "line of exactly 4096 bytes",
			in:      "#" + strings.Repeat("x", 4095) + "\r\n" + hdr + "standard,a,L1,1,10,,\n",
			wantStd: []oapi.StandardInput{{Analyte: "a", Level: "L1", Concentration: 1, Responses: []float64{10}}},
		},
		{
			name:    "64-character identifier",
			in:      hdr + "standard," + strings.Repeat("a", 64) + ",L1,1,10,,\n",
			wantStd: []oapi.StandardInput{{Analyte: strings.Repeat("a", 64), Level: "L1", Concentration: 1, Responses: []float64{10}}},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			gotStd, gotSmp, err := decodeCSVRun(strings.NewReader(tt.in))
			if err != nil {
				t.Fatalf("decodeCSVRun: %v", err)
			}
			if !reflect.DeepEqual(gotStd, tt.wantStd) {
				t.Errorf("standards:\n got %+v\nwant %+v", gotStd, tt.wantStd)
			}
			if !reflect.DeepEqual(gotSmp, tt.wantSmp) {
				t.Errorf("samples:\n got %s\nwant %s", csvFmtSamples(gotSmp), csvFmtSamples(tt.wantSmp))
			}
		})
	}
}

// csvRows builds a body of the full header and n rows made by row(i).
func csvRows(n int, row func(i int) string) string {
	var b strings.Builder
	b.WriteString("kind,analyte,level,concentration,response,sample_id,dilution\n")
	for i := range n {
		b.WriteString(row(i))
		b.WriteByte('\n')
	}
	return b.String()
}

func TestDecodeCSVRunRefuses(t *testing.T) {
	const hdr = "kind,analyte,level,concentration,response,sample_id,dilution\n"
	const std = "standard,nitrate,L1,0.5,0.0102,,\n"
	tests := []struct {
		name string
		in   string
		want []string // pointers, in order
	}{
		{"empty body", "", []string{"/lines/1"}},
		{"comments only", "# a\n\n", []string{"/lines/3"}},
		{"header only", hdr, []string{"/lines/2"}},
		{"samples only", hdr + "sample,nitrate,,,0.02,W-1,\n", []string{"/lines/3"}},
		{"missing column", "kind,analyte,level,response\n" + "standard,nitrate,L1,0.0102\n", []string{"/lines/1/concentration"}},
		{"two missing columns", "kind,analyte,level\n", []string{"/lines/1/concentration", "/lines/1/response"}},
		{"unknown column", "kind,analyte,level,concentration,response,unit\n", []string{"/lines/1"}},
		{"column name case", "Kind,analyte,level,concentration,response\n", []string{"/lines/1", "/lines/1/kind"}},
		{"duplicated column", "kind,analyte,level,concentration,response,analyte\n", []string{"/lines/1/analyte"}},
		{"extra field", hdr + "standard,nitrate,L1,0.5,0.0102,,,\n", []string{"/lines/2"}},
		{"missing field", hdr + "standard,nitrate,L1,0.5,0.0102,\n", []string{"/lines/2"}},
		{"quoted field with a comma is one field", hdr + `standard,"nitrate,x",L1,0.5,0.0102,,` + "\n", []string{"/lines/2/analyte"}},
		{"doubled quote kept in the value", hdr + `standard,"ni""trate",L1,0.5,0.0102,,` + "\n", []string{"/lines/2/analyte"}},
		{"unclosed quote", hdr + `standard,"nitrate,L1,0.5,0.0102,,` + "\n", []string{"/lines/2"}},
		{"quoted field spanning lines", hdr + `standard,"nitrate` + "\n" + `",L1,0.5,0.0102,,` + "\n", []string{"/lines/2", "/lines/3"}},
		{"text after closing quote", hdr + `standard,"nitrate"x,L1,0.5,0.0102,,` + "\n", []string{"/lines/2"}},
		{"quote in unquoted field", hdr + `standard,nit"rate,L1,0.5,0.0102,,` + "\n", []string{"/lines/2"}},
		{"unknown kind", hdr + "Standard,nitrate,L1,0.5,0.0102,,\n", []string{"/lines/2/kind"}},
		{"empty analyte", hdr + "standard,,L1,0.5,0.0102,,\n", []string{"/lines/2/analyte"}},
		{"identifier with a space", hdr + "standard,nitrate,L 1,0.5,0.0102,,\n", []string{"/lines/2/level"}},
		{"identifier starting with a dash", hdr + "standard,-nitrate,L1,0.5,0.0102,,\n", []string{"/lines/2/analyte"}},
		{"65-character identifier", hdr + "standard," + strings.Repeat("a", 65) + ",L1,0.5,0.0102,,\n", []string{"/lines/2/analyte"}},
		{"NaN", hdr + "standard,nitrate,L1,0.5,NaN,,\n", []string{"/lines/2/response"}},
		{"Inf", hdr + "standard,nitrate,L1,0.5,Inf,,\n", []string{"/lines/2/response"}},
		{"-Infinity", hdr + "standard,nitrate,L1,0.5,-Infinity,,\n", []string{"/lines/2/response"}},
		{"hex float", hdr + "standard,nitrate,L1,0x1p-2,0.01,,\n", []string{"/lines/2/concentration"}},
		{"thousands separator", hdr + `standard,nitrate,L1,"1,000",0.01,,` + "\n", []string{"/lines/2/concentration"}},
		{"decimal comma", hdr + `standard,nitrate,L1,0.5,"0,01",,` + "\n", []string{"/lines/2/response"}},
		{"underscore digits", hdr + "standard,nitrate,L1,1_000,0.01,,\n", []string{"/lines/2/concentration"}},
		{"padded number", hdr + "standard,nitrate,L1, 0.5,0.01,,\n", []string{"/lines/2/concentration"}},
		{"1e308 concentration", hdr + "standard,nitrate,L1,1e308,0.01,,\n", []string{"/lines/2/concentration"}},
		{"1e308 response", hdr + "standard,nitrate,L1,0.5,1e308,,\n", []string{"/lines/2/response"}},
		{"1e400 overflows", hdr + "standard,nitrate,L1,0.5,-1e400,,\n", []string{"/lines/2/response"}},
		{"negative concentration", hdr + "standard,nitrate,L1,-1,0.01,,\n", []string{"/lines/2/concentration"}},
		{"empty concentration", hdr + "standard,nitrate,L1,,0.01,,\n", []string{"/lines/2/concentration"}},
		{"empty response", hdr + "standard,nitrate,L1,0.5,,,\n", []string{"/lines/2/response"}},
		{"changing concentration", hdr + std + "standard,nitrate,L1,0.6,0.0098,,\n", []string{"/lines/3/concentration"}},
		{"standard with sample_id", hdr + "standard,nitrate,L1,0.5,0.01,W-1,\n", []string{"/lines/2/sample_id"}},
		{"standard with dilution", hdr + "standard,nitrate,L1,0.5,0.01,,2\n", []string{"/lines/2/dilution"}},
		{"sample with level", hdr + std + "sample,nitrate,L1,,0.02,W-1,\n", []string{"/lines/3/level"}},
		{"sample with concentration", hdr + std + "sample,nitrate,,0.5,0.02,W-1,\n", []string{"/lines/3/concentration"}},
		{"sample without sample_id", hdr + std + "sample,nitrate,,,0.02,,\n", []string{"/lines/3/sample_id"}},
		{"sample_id column missing", "kind,analyte,level,concentration,response\n" + "standard,nitrate,L1,0.5,0.01\nsample,nitrate,,,0.02\nsample,nitrate,,,0.03\n", []string{"/lines/3/sample_id"}},
		{"zero dilution", hdr + std + "sample,nitrate,,,0.02,W-1,0\n", []string{"/lines/3/dilution"}},
		{"negative dilution", hdr + std + "sample,nitrate,,,0.02,W-1,-2\n", []string{"/lines/3/dilution"}},
		{"dilution above 1e6", hdr + std + "sample,nitrate,,,0.02,W-1,1000001\n", []string{"/lines/3/dilution"}},
		{"changing dilution", hdr + std + "sample,nitrate,,,0.02,W-1,2\nsample,nitrate,,,0.02,W-1,5\n", []string{"/lines/4/dilution"}},
		{"empty then explicit dilution", hdr + std + "sample,nitrate,,,0.02,W-1,\nsample,nitrate,,,0.02,W-1,2\n", []string{"/lines/4/dilution"}},
		{"over-long data line", hdr + "standard,nitrate,L1,0.5," + strings.Repeat("1", 4096) + ",,\n" + std, []string{"/lines/2"}},
		{"over-long comment line", "#" + strings.Repeat("x", 4096) + "\n" + hdr + std, []string{"/lines/1"}},
		{"over-long line, CRLF not counted but one more byte is", "#" + strings.Repeat("x", 4096) + "\r\n" + hdr + std, []string{"/lines/1"}},
		{"over-long line at the end", hdr + std + strings.Repeat("y", 5000), []string{"/lines/3"}},
		{"non-UTF-8 byte", hdr + "standard,nitr\xe9te,L1,0.5,0.01,,\n", []string{"/lines/2"}},
		{"non-UTF-8 byte in a comment", "# caf\xe9\n" + hdr + std, []string{"/lines/1"}},
		{"BOM not at the start", hdr + "\uFEFFstandard,nitrate,L1,0.5,0.01,,\n", []string{"/lines/2/kind"}},
		{"line numbers count comments, blanks and CRLF", "# c\r\n\r\n" + strings.ReplaceAll(hdr+std, "\n", "\r\n") + "# c\r\nstandard,nitrate,L2,1,x,,\r\n", []string{"/lines/6/response"}},
		{"BOM then error", "\uFEFF" + hdr + "standard,nitrate,L1,0.5,NaN,,\n", []string{"/lines/2/response"}},
		{"several breaches in one row", hdr + "sample,-a,L1,1,NaN,,0\n", []string{"/lines/2/analyte", "/lines/2/sample_id", "/lines/2/level", "/lines/2/concentration", "/lines/2/response", "/lines/2/dilution"}},
		{"breaches in several rows", hdr + std + "standard,nitrate,L2,x,1,,\nstandard,nitrate,L3,1,y,,\n", []string{"/lines/3/concentration", "/lines/4/response"}},
		{
			"more than 1000 readings for one level",
			csvRows(1001, func(int) string { return "standard,a,L1,1,0.5,," }),
			[]string{"/lines/1002/response"},
		},
		{
			"more than 1000 readings for one sample",
			csvRows(1002, func(i int) string {
				if i == 0 {
					return "standard,a,L1,1,0.5,,"
				}
				return "sample,a,,,0.5,S1,"
			}),
			[]string{"/lines/1003/response"},
		},
		{
			"more than 1000 levels",
			csvRows(1001, func(i int) string { return fmt.Sprintf("standard,a,L%d,1,0.5,,", i) }),
			[]string{"/lines/1002/level"},
		},
		{
			"more than 1000 samples",
			csvRows(1002, func(i int) string {
				if i == 0 {
					return "standard,a,L1,1,0.5,,"
				}
				return fmt.Sprintf("sample,a,,,0.5,S%d,", i)
			}),
			[]string{"/lines/1003/sample_id"},
		},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			std, smp, err := decodeCSVRun(strings.NewReader(tt.in))
			if err == nil {
				t.Fatalf("decodeCSVRun succeeded with %d standards, %d samples; want pointers %v", len(std), len(smp), tt.want)
			}
			got := csvPointers(t, err)
			if !reflect.DeepEqual(got, tt.want) {
				t.Errorf("pointers: got %v, want %v (%v)", got, tt.want, err)
			}
		})
	}
}

// csvPointers returns the pointers of a *csvRunError, failing otherwise.
func csvPointers(t *testing.T, err error) []string {
	t.Helper()
	var ce *csvRunError
	if !errors.As(err, &ce) {
		t.Fatalf("error %v (%T) is not a *csvRunError", err, err)
	}
	var ps []string
	for _, e := range ce.Errors {
		if e.Detail == "" {
			t.Errorf("%s has no detail", e.Pointer)
		}
		ps = append(ps, e.Pointer)
	}
	return ps
}

func TestDecodeCSVRunStopsAfterMaxErrors(t *testing.T) {
	in := csvRows(30, func(i int) string { return "standard,a,L1,1,NaN,," })
	_, _, err := decodeCSVRun(strings.NewReader(in))
	got := csvPointers(t, err)
	if len(got) != csvMaxErrors {
		t.Fatalf("got %d errors, want %d", len(got), csvMaxErrors)
	}
	if got[0] != "/lines/2/response" || got[csvMaxErrors-1] != fmt.Sprintf("/lines/%d/response", csvMaxErrors+1) {
		t.Errorf("got first %s last %s", got[0], got[csvMaxErrors-1])
	}
	if !strings.Contains(err.Error(), "stopped") {
		t.Errorf("Error() = %q, want it to say decoding stopped", err)
	}
}

func TestDecodeCSVRunRowCap(t *testing.T) {
	if testing.Short() {
		t.Skip("builds a body of 200,001 rows")
	}
	// 201 levels × 1000 readings stay within every schema limit; only the
	// row cap is passed.
	in := csvRows(csvMaxRows+1, func(i int) string { return fmt.Sprintf("standard,a,L%d,1,0.5,,", i/1000) })
	_, _, err := decodeCSVRun(strings.NewReader(in))
	got := csvPointers(t, err)
	want := []string{fmt.Sprintf("/lines/%d", csvMaxRows+2)}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("got %v, want %v", got, want)
	}
	std, _, err := decodeCSVRun(strings.NewReader(in[:strings.LastIndex(in[:len(in)-1], "\n")+1]))
	if err != nil {
		t.Fatalf("%d rows: %v", csvMaxRows, err)
	}
	if len(std) != csvMaxRows/1000 {
		t.Errorf("got %d levels, want %d", len(std), csvMaxRows/1000)
	}
}

func TestDecodeCSVRunLongLineKeepsCounting(t *testing.T) {
	// A 1 MB line is refused and the following lines are still numbered.
	in := "kind,analyte,level,concentration,response\n" + strings.Repeat("z", 1<<20) + "\nstandard,a,L1,1,x\n"
	_, _, err := decodeCSVRun(strings.NewReader(in))
	got := csvPointers(t, err)
	want := []string{"/lines/2", "/lines/3/response"}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("got %v, want %v", got, want)
	}
}

func TestDecodeCSVRunReadError(t *testing.T) {
	errBoom := errors.New("boom")
	r := iotest.TimeoutReader(strings.NewReader("kind,analyte,level,concentration,response\nstandard,a,L1,1,2\n"))
	_, _, err := decodeCSVRun(&csvErrAfter{r: strings.NewReader("kind,analyte,level,concentration,response\n"), err: errBoom})
	if !errors.Is(err, errBoom) {
		t.Errorf("got %v, want it to wrap %v", err, errBoom)
	}
	var ce *csvRunError
	if errors.As(err, &ce) {
		t.Errorf("a read error is reported as a layout breach: %v", err)
	}
	_, _, err = decodeCSVRun(r)
	if !errors.Is(err, iotest.ErrTimeout) {
		t.Errorf("got %v, want it to wrap %v", err, iotest.ErrTimeout)
	}
}

// csvErrAfter reads r, then fails with err instead of io.EOF.
type csvErrAfter struct {
	r   *strings.Reader
	err error
}

func (e *csvErrAfter) Read(p []byte) (int, error) {
	if e.r.Len() == 0 {
		return 0, e.err
	}
	return e.r.Read(p)
}

func FuzzDecodeCSVRun(f *testing.F) {
	f.Add([]byte("kind,analyte,level,concentration,response,sample_id,dilution\nstandard,nitrate,L1,0.5,0.0102,,\nsample,nitrate,,,0.0133,W-0043,2\n"))
	f.Add([]byte("\uFEFF# c\r\n\r\nresponse,kind,\"analyte\",level,concentration\r\nstandard,a,L1,1e3,-2.5E-1\r\n"))
	f.Add([]byte("kind,analyte,level,concentration,response\nstandard,\"a,b\",L1,1,NaN\n"))
	f.Add([]byte("kind,analyte,level,concentration,response,sample_id\nsample,a,,,1,S\"1\n"))
	f.Add([]byte("kind,kind\n\xff\n"))
	f.Fuzz(func(t *testing.T, in []byte) {
		std, smp, err := decodeCSVRun(strings.NewReader(string(in)))
		if err != nil {
			// strings.Reader never fails, so every error is a layout breach.
			var ce *csvRunError
			if !errors.As(err, &ce) {
				t.Fatalf("error %v (%T) is not a *csvRunError", err, err)
			}
			if len(ce.Errors) == 0 || len(ce.Errors) > csvMaxErrors {
				t.Fatalf("%d line errors", len(ce.Errors))
			}
			for _, e := range ce.Errors {
				if !strings.HasPrefix(e.Pointer, "/lines/") || e.Detail == "" {
					t.Fatalf("line error %+v", e)
				}
			}
			return
		}
		if len(std) == 0 || len(std) > fastStandardsMax || len(smp) > fastRunSamplesMax {
			t.Fatalf("%d standards, %d samples", len(std), len(smp))
		}
		checkResponses := func(what string, rs []float64) {
			if len(rs) == 0 || len(rs) > fastResponsesMax {
				t.Fatalf("%s: %d readings", what, len(rs))
			}
			for _, r := range rs {
				if math.IsNaN(r) || r < -fastResponseAbsMax || r > fastResponseAbsMax {
					t.Fatalf("%s: reading %v out of range", what, r)
				}
			}
		}
		seen := map[[3]string]bool{}
		for _, s := range std {
			if !csvIdentifier.MatchString(s.Analyte) || !csvIdentifier.MatchString(s.Level) {
				t.Fatalf("standard identifiers %q %q", s.Analyte, s.Level)
			}
			c := s.Concentration
			if math.IsNaN(c) || c < 0 || c > fastConcentrationMax {
				t.Fatalf("concentration %v out of range", c)
			}
			key := [3]string{"std", s.Analyte, s.Level}
			if seen[key] {
				t.Fatalf("level %v appears twice", key)
			}
			seen[key] = true
			checkResponses(s.Analyte+"/"+s.Level, s.Responses)
		}
		for _, s := range smp {
			if !csvIdentifier.MatchString(s.Analyte) || !csvIdentifier.MatchString(s.ID) {
				t.Fatalf("sample identifiers %q %q", s.Analyte, s.ID)
			}
			if d := s.Dilution; d != nil && (math.IsNaN(*d) || *d <= 0 || *d > fastDilutionMax) {
				t.Fatalf("dilution %v out of range", *d)
			}
			key := [3]string{"smp", s.Analyte, s.ID}
			if seen[key] {
				t.Fatalf("sample %v appears twice", key)
			}
			seen[key] = true
			checkResponses(s.Analyte+"/"+s.ID, s.Responses)
		}
	})
}

// csvIdentifier is the Identifier schema's pattern, compiled as written in
// openapi/openapi.yaml, to check the decoder's output independently.
var csvIdentifier = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9._:-]{0,63}$`)
