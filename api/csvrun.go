package api

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"regexp"
	"strconv"
	"strings"
	"unicode/utf8"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// Limits of the CSV run body. The per-group and per-run numbers are the JSON
// schema's, said once as the fast paths' constants (fastResponsesMax,
// fastStandardsMax, fastRunSamplesMax, fastConcentrationMax,
// fastResponseAbsMax, fastDilutionMax, isIdentifier), which
// validate_*_test.go checks against openapi/openapi.yaml; the line length is
// the CSV section of POST /v1/runs.
const (
	csvMaxLineBytes = 4096 // bytes of one line, not counting its LF or CRLF
	csvMaxErrors    = 20   // breaches collected before decoding stops
	csvMaxEcho      = 64   // bytes of an offending cell quoted back in a detail

	// csvMaxRows caps the data rows of one body. The schema's own limits
	// allow 1000 levels × 1000 readings + 1000 samples × 1000 readings =
	// 2 million readings, more than any run needs and more than is safe to
	// hold per request; 200,000 rows is the service's own cap for memory
	// safety (a few MB of decoded values at most). The server's body limit
	// (8 MiB by default) applies upstream as well.
	csvMaxRows = 200_000
)

// csvNumber is the number syntax of the CSV layout: '.' as decimal point, an
// optional exponent; no hex, no thousands separators, no NaN or Inf.
var csvNumber = regexp.MustCompile(`^[+-]?([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]+)?$`)

// Column names of the CSV layout.
const (
	csvColKind          = "kind"
	csvColAnalyte       = "analyte"
	csvColLevel         = "level"
	csvColConcentration = "concentration"
	csvColResponse      = "response"
	csvColSampleID      = "sample_id"
	csvColDilution      = "dilution"
	csvColISResponse    = "is_response"
)

// csvColumns lists every known column; the first five are required.
var csvColumns = []string{csvColKind, csvColAnalyte, csvColLevel, csvColConcentration, csvColResponse, csvColSampleID, csvColDilution, csvColISResponse}

const csvRequiredColumns = 5

// csvLineError is one breach of the CSV layout, with a JSON-pointer-like
// location /lines/<n>[/<column>] (n = 1-based physical line number).
type csvLineError struct {
	Pointer string
	Detail  string
}

// csvRunError holds every breach found, at most csvMaxErrors of them.
type csvRunError struct {
	Errors []csvLineError
}

func (e *csvRunError) Error() string {
	switch n := len(e.Errors); {
	case n == 0:
		return "csv: invalid run body"
	case n == 1:
		return fmt.Sprintf("csv: %s: %s", e.Errors[0].Pointer, e.Errors[0].Detail)
	case n >= csvMaxErrors:
		return fmt.Sprintf("csv: %d or more breaches of the layout, stopped there; first %s: %s", n, e.Errors[0].Pointer, e.Errors[0].Detail)
	default:
		return fmt.Sprintf("csv: %d breaches of the layout; first %s: %s", n, e.Errors[0].Pointer, e.Errors[0].Detail)
	}
}

// errCSVLineTooLong reports a line over csvMaxLineBytes; the rest of the
// line has been discarded.
var errCSVLineTooLong = errors.New("line too long")

// csvLineReader yields physical lines without their LF or CRLF, never
// buffering more than csvMaxLineBytes+2 bytes.
type csvLineReader struct {
	br *bufio.Reader
	n  int // number of the line last returned, 1-based
}

func newCSVLineReader(r io.Reader) *csvLineReader {
	return &csvLineReader{br: bufio.NewReaderSize(r, csvMaxLineBytes+2)}
}

// next returns the next line, valid until the following call. It returns
// io.EOF after the last line, errCSVLineTooLong for an over-long line, and
// any other error of the underlying reader as is.
func (lr *csvLineReader) next() ([]byte, error) {
	line, err := lr.br.ReadSlice('\n')
	if err == bufio.ErrBufferFull {
		lr.n++
		for err == bufio.ErrBufferFull {
			_, err = lr.br.ReadSlice('\n')
		}
		if err != nil && err != io.EOF {
			return nil, err
		}
		return nil, errCSVLineTooLong
	}
	if err == io.EOF {
		if len(line) == 0 {
			return nil, io.EOF
		}
	} else if err != nil {
		return nil, err
	}
	lr.n++
	line = bytes.TrimSuffix(line, []byte("\n"))
	line = bytes.TrimSuffix(line, []byte("\r"))
	if len(line) > csvMaxLineBytes {
		return nil, errCSVLineTooLong
	}
	return line, nil
}

// splitCSVLine splits one line into RFC 4180 fields. A quoted field must
// close on the same line: no column of the layout can hold a line break.
func splitCSVLine(line []byte) ([]string, error) {
	var fields []string
	var b strings.Builder
	i := 0
	for {
		b.Reset()
		if i < len(line) && line[i] == '"' {
			i++
			closed := false
			for i < len(line) {
				c := line[i]
				i++
				if c != '"' {
					b.WriteByte(c)
					continue
				}
				if i < len(line) && line[i] == '"' {
					b.WriteByte('"')
					i++
					continue
				}
				closed = true
				break
			}
			if !closed {
				return nil, fmt.Errorf("field %d: quoted field not closed on this line (a field cannot hold a line break)", len(fields)+1)
			}
			if i < len(line) && line[i] != ',' {
				return nil, fmt.Errorf("field %d: text after the closing quote", len(fields)+1)
			}
		} else {
			for i < len(line) && line[i] != ',' {
				if line[i] == '"' {
					return nil, fmt.Errorf("field %d: quote inside an unquoted field", len(fields)+1)
				}
				b.WriteByte(line[i])
				i++
			}
		}
		fields = append(fields, b.String())
		if i >= len(line) {
			return fields, nil
		}
		i++ // the comma
	}
}

// csvBlank reports whether a line is empty or only spaces and tabs.
func csvBlank(line []byte) bool {
	return len(bytes.Trim(line, " \t")) == 0
}

// csvQuote quotes a cell for a detail message, shortened if long.
func csvQuote(s string) string {
	if len(s) > csvMaxEcho {
		s = s[:csvMaxEcho] + "…"
	}
	return strconv.Quote(s)
}

// parseCSVNumber parses a cell as a finite number in [lo, hi] (lo excluded
// when loOpen).
func parseCSVNumber(s string, lo, hi float64, loOpen bool) (float64, error) {
	if !csvNumber.MatchString(s) {
		return 0, fmt.Errorf("%s is not a number (use '.' as decimal point, an optional exponent, no thousands separators, no NaN or Inf)", csvQuote(s))
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil || math.IsInf(v, 0) || math.IsNaN(v) {
		return 0, fmt.Errorf("%s is out of range [%g, %g]", csvQuote(s), lo, hi)
	}
	if v == 0 {
		v = 0 // no negative zero
	}
	if v > hi || v < lo || (loOpen && v == lo) {
		if loOpen {
			return 0, fmt.Errorf("%s is out of range (%g, %g]", csvQuote(s), lo, hi)
		}
		return 0, fmt.Errorf("%s is out of range [%g, %g]", csvQuote(s), lo, hi)
	}
	return v, nil
}

// csvRunDecoder holds the state of one decodeCSVRun call.
type csvRunDecoder struct {
	errs     []csvLineError
	col      map[string]int // column name → field index
	nfields  int
	rows     int
	noSample bool // the missing sample_id column has been reported

	standards []oapi.StandardInput
	stdIndex  map[[2]string]int // (analyte, level) → index in standards
	stdConcs  [][]float64       // each reading's concentration, per level (judged at the end)
	samples   []oapi.RunSampleInput
	smpIndex  map[[2]string]int // (analyte, sample_id) → index in samples
	smpLine   []int             // line that fixed each sample's dilution
	smpDil    []float64         // effective dilution of each sample
	lines     csvLines
}

// csvLines maps the decoded run back to the CSV: the line of each reading
// of each standard level and sample, in replicate order.
type csvLines struct {
	standards, samples [][]int
}

// locate rewrites a rule's breach reported on the decoded run (a JSON
// pointer such as /standards/2/analyte) to the CSV line and column it came
// from (/lines/4/analyte), as the spec promises for CSV bodies; the run's
// header fields become their query parameters. Other errors pass unchanged.
func (l *csvLines) locate(err error) error {
	var le *lab.Error
	if l == nil || !errors.As(err, &le) || le.In != lab.InBody {
		return err
	}
	out := *le
	out.Field = l.pointer(le.Field)
	if q, ok := strings.CutPrefix(out.Field, "query:"); ok {
		out.In, out.Field = lab.InQuery, "/"+q
	}
	out.Fields = make([]lab.FieldIssue, len(le.Fields))
	for i, f := range le.Fields {
		out.Fields[i] = lab.FieldIssue{Field: l.pointer(f.Field), Message: f.Message}
	}
	return &out
}

// pointer is locate for one pointer.
func (l *csvLines) pointer(p string) string {
	parts := strings.Split(strings.TrimPrefix(p, "/"), "/")
	switch parts[0] {
	case "method", "instrument", "acquired_at", "operator":
		return "query:" + parts[0]
	case "standards", "samples":
	default:
		return p
	}
	groups := l.standards
	if parts[0] == "samples" {
		groups = l.samples
	}
	if len(parts) < 2 {
		return p
	}
	i, err := strconv.Atoi(parts[1])
	if err != nil || i < 0 || i >= len(groups) || len(groups[i]) == 0 {
		return p
	}
	lines := groups[i]
	if len(parts) == 2 {
		return "/lines/" + strconv.Itoa(lines[0])
	}
	column := parts[2]
	switch column {
	case "id":
		column = csvColSampleID
	case "responses", "is_responses":
		column = csvColResponse
		if parts[2] == "is_responses" {
			column = csvColISResponse
		}
		if len(parts) == 4 {
			if j, err := strconv.Atoi(parts[3]); err == nil && j >= 0 && j < len(lines) {
				return "/lines/" + strconv.Itoa(lines[j]) + "/" + column
			}
		}
	}
	return "/lines/" + strconv.Itoa(lines[0]) + "/" + column
}

// fail records a breach; it reports whether decoding must stop.
func (d *csvRunDecoder) fail(line int, column, format string, args ...any) bool {
	p := "/lines/" + strconv.Itoa(line)
	if column != "" {
		p += "/" + column
	}
	d.errs = append(d.errs, csvLineError{Pointer: p, Detail: fmt.Sprintf(format, args...)})
	return len(d.errs) >= csvMaxErrors
}

// decodeCSVRun decodes a run body in the CSV layout of POST /v1/runs
// (openapi/openapi.yaml, "### CSV (`text/csv`)"). Standards come back
// grouped by (analyte, level) and samples by (analyte, sample_id), each in
// order of first appearance, with readings in row order.
//
// Every breach of the layout or of the schema's limits yields a
// *csvRunError (422 with /lines/... pointers); an error of r itself (such
// as the body limit's *http.MaxBytesError) is returned wrapped with %w.
func decodeCSVRun(r io.Reader) (standards []oapi.StandardInput, samples []oapi.RunSampleInput, err error) {
	standards, samples, _, err = decodeCSVRunLines(r)
	return standards, samples, err
}

// decodeCSVRunLines is decodeCSVRun that also says which line each reading
// came from.
func decodeCSVRunLines(r io.Reader) (standards []oapi.StandardInput, samples []oapi.RunSampleInput, lines *csvLines, err error) {
	d := &csvRunDecoder{stdIndex: map[[2]string]int{}, smpIndex: map[[2]string]int{}}
	lr := newCSVLineReader(r)
	header := true
	lastLine := 0
	for {
		line, err := lr.next()
		if err == io.EOF {
			break
		}
		if err == errCSVLineTooLong {
			lastLine = lr.n
			if d.fail(lr.n, "", "line longer than %d bytes", csvMaxLineBytes) || header {
				return nil, nil, nil, &csvRunError{Errors: d.errs}
			}
			continue
		}
		if err != nil {
			return nil, nil, nil, fmt.Errorf("csv: read line %d: %w", lr.n+1, err)
		}
		lastLine = lr.n
		if lr.n == 1 {
			line = bytes.TrimPrefix(line, []byte("\uFEFF"))
		}
		if !utf8.Valid(line) {
			if d.fail(lr.n, "", "line is not valid UTF-8") || header {
				return nil, nil, nil, &csvRunError{Errors: d.errs}
			}
			continue
		}
		if csvBlank(line) || line[0] == '#' {
			continue
		}
		fields, err := splitCSVLine(line)
		if err != nil {
			if d.fail(lr.n, "", "%v", err) || header {
				return nil, nil, nil, &csvRunError{Errors: d.errs}
			}
			continue
		}
		if header {
			header = false
			if !d.header(lr.n, fields) {
				return nil, nil, nil, &csvRunError{Errors: d.errs}
			}
			continue
		}
		if d.rows++; d.rows > csvMaxRows {
			d.fail(lr.n, "", "more than %d data rows", csvMaxRows)
			return nil, nil, nil, &csvRunError{Errors: d.errs}
		}
		if d.row(lr.n, fields) {
			return nil, nil, nil, &csvRunError{Errors: d.errs}
		}
	}
	if !header {
		d.judgeConcentrations()
	}
	if header {
		d.fail(lastLine+1, "", "no header line (expected the columns %s)", strings.Join(csvColumns[:csvRequiredColumns], ","))
	} else if len(d.standards) == 0 && len(d.errs) == 0 {
		d.fail(lastLine+1, "", "no standard rows: a run needs at least one standard")
	}
	if len(d.errs) > 0 {
		return nil, nil, nil, &csvRunError{Errors: d.errs}
	}
	return d.standards, d.samples, &d.lines, nil
}

// judgeConcentrations reports each reading whose concentration differs from
// the one most readings of its level give (the earliest, on a tie): a typo
// on one line is blamed on that line, not on the lines that agree.
func (d *csvRunDecoder) judgeConcentrations() {
	for i, concs := range d.stdConcs {
		counts := map[float64]int{}
		best := concs[0]
		for _, c := range concs {
			if counts[c]++; counts[c] > counts[best] {
				best = c
			}
		}
		if counts[best] == len(concs) {
			continue
		}
		s := &d.standards[i]
		s.Concentration = best
		var agree []string
		for j, c := range concs {
			if c == best {
				agree = append(agree, strconv.Itoa(d.lines.standards[i][j]))
			}
		}
		for j, c := range concs {
			if c != best && d.fail(d.lines.standards[i][j], csvColConcentration,
				"concentration %g differs from %g given on %s for analyte %s level %s: replicates of a level repeat its concentration",
				c, best, lineList(agree), s.Analyte, s.Level) {
				return
			}
		}
	}
}

// header reads the column names; it reports whether they are usable.
func (d *csvRunDecoder) header(n int, fields []string) bool {
	d.col = map[string]int{}
	d.nfields = len(fields)
	ok := true
	for i, name := range fields {
		known := false
		for _, c := range csvColumns {
			known = known || c == name
		}
		switch {
		case !known:
			ok = false
			if d.fail(n, "", "field %d: unknown column %s (known: %s)", i+1, csvQuote(name), strings.Join(csvColumns, ", ")) {
				return false
			}
		case d.col[name] != 0:
			ok = false
			if d.fail(n, name, "column %q appears more than once (fields %d and %d)", name, d.col[name], i+1) {
				return false
			}
		default:
			d.col[name] = i + 1 // 1-based while checking; shifted below
		}
	}
	for _, c := range csvColumns[:csvRequiredColumns] {
		if d.col[c] == 0 {
			ok = false
			if d.fail(n, c, "required column %q is missing", c) {
				return false
			}
		}
	}
	for k, v := range d.col {
		d.col[k] = v - 1
	}
	return ok
}

// cell returns the field of a column, and whether the header has it.
func (d *csvRunDecoder) cell(fields []string, name string) (string, bool) {
	i, ok := d.col[name]
	if !ok {
		return "", false
	}
	return fields[i], true
}

// row decodes one data row; it reports whether decoding must stop.
func (d *csvRunDecoder) row(n int, fields []string) bool {
	if len(fields) != d.nfields {
		return d.fail(n, "", "%d fields, the header has %d%s", len(fields), d.nfields, decimalCommaHint(fields, d.nfields))
	}
	kind, _ := d.cell(fields, csvColKind)
	bad := false
	failed := func(column, format string, args ...any) bool {
		bad = true
		return d.fail(n, column, format, args...)
	}
	mustBeEmpty := func(column, why string) bool {
		if v, ok := d.cell(fields, column); ok && v != "" {
			return failed(column, "must be empty in a %s row, got %s", why, csvQuote(v))
		}
		return false
	}
	identifier := func(column string) (string, bool) {
		v, _ := d.cell(fields, column)
		if v == "" {
			return "", failed(column, "required in a %s row", kind)
		}
		if !isIdentifier(v) {
			return "", failed(column, "%s is not an identifier (1 to 64 of A-Z a-z 0-9 . _ : -, starting with a letter or digit)", csvQuote(v))
		}
		return v, false
	}
	switch kind {
	case "standard":
		analyte, stop := identifier(csvColAnalyte)
		if stop {
			return true
		}
		level, stop := identifier(csvColLevel)
		if stop {
			return true
		}
		var conc, resp float64
		var err error
		if c, _ := d.cell(fields, csvColConcentration); c == "" {
			if failed(csvColConcentration, "required in a standard row") {
				return true
			}
		} else if conc, err = parseCSVNumber(c, 0, fastConcentrationMax, false); err != nil {
			if failed(csvColConcentration, "%v", err) {
				return true
			}
		}
		isr, hasIS, stop := d.isResponse(fields, failed)
		if stop || d.response(n, fields, &resp, failed) || mustBeEmpty(csvColSampleID, kind) || mustBeEmpty(csvColDilution, kind) {
			return true
		}
		if bad {
			return false
		}
		key := [2]string{analyte, level}
		i, seen := d.stdIndex[key]
		if !seen {
			if len(d.standards) == fastStandardsMax {
				return d.fail(n, csvColLevel, "more than %d standard levels in one run", fastStandardsMax)
			}
			i = len(d.standards)
			d.stdIndex[key] = i
			d.standards = append(d.standards, oapi.StandardInput{Analyte: analyte, Level: level, Concentration: conc})
			d.stdConcs = append(d.stdConcs, nil)
			d.lines.standards = append(d.lines.standards, nil)
		}
		s := &d.standards[i]
		if len(s.Responses) == fastResponsesMax {
			return d.fail(n, csvColResponse, "more than %d readings for analyte %s level %s", fastResponsesMax, analyte, level)
		}
		if d.sameIS(n, &s.IsResponses, len(s.Responses), hasIS, isr, d.lines.standards[i], "analyte "+analyte+" level "+level) {
			return true
		}
		s.Responses = append(s.Responses, resp)
		d.stdConcs[i] = append(d.stdConcs[i], conc)
		d.lines.standards[i] = append(d.lines.standards[i], n)
	case "sample":
		if _, ok := d.col[csvColSampleID]; !ok {
			if d.noSample {
				return false
			}
			d.noSample = true
			return d.fail(n, csvColSampleID, "the header has no sample_id column, which is required when any row is a sample")
		}
		analyte, stop := identifier(csvColAnalyte)
		if stop {
			return true
		}
		id, stop := identifier(csvColSampleID)
		if stop || mustBeEmpty(csvColLevel, kind) || mustBeEmpty(csvColConcentration, kind) {
			return true
		}
		var resp float64
		isr, hasIS, stop := d.isResponse(fields, failed)
		if stop || d.response(n, fields, &resp, failed) {
			return true
		}
		var dil *float64
		if c, _ := d.cell(fields, csvColDilution); c != "" {
			v, err := parseCSVNumber(c, 0, fastDilutionMax, true)
			if err != nil {
				if failed(csvColDilution, "%v", err) {
					return true
				}
			} else {
				dil = &v
			}
		}
		if bad {
			return false
		}
		eff := 1.0
		if dil != nil {
			eff = *dil
		}
		key := [2]string{analyte, id}
		i, seen := d.smpIndex[key]
		if !seen {
			if len(d.samples) == fastRunSamplesMax {
				return d.fail(n, csvColSampleID, "more than %d samples in one run", fastRunSamplesMax)
			}
			i = len(d.samples)
			d.smpIndex[key] = i
			d.samples = append(d.samples, oapi.RunSampleInput{Analyte: analyte, ID: id, Dilution: dil})
			d.smpLine = append(d.smpLine, n)
			d.smpDil = append(d.smpDil, eff)
			d.lines.samples = append(d.lines.samples, nil)
		}
		s := &d.samples[i]
		if d.smpDil[i] != eff {
			return d.fail(n, csvColDilution, "dilution %g differs from %g given on line %d for analyte %s sample %s (empty means 1)", eff, d.smpDil[i], d.smpLine[i], analyte, id)
		}
		if len(s.Responses) == fastResponsesMax {
			return d.fail(n, csvColResponse, "more than %d readings for analyte %s sample %s", fastResponsesMax, analyte, id)
		}
		if d.sameIS(n, &s.IsResponses, len(s.Responses), hasIS, isr, d.lines.samples[i], "analyte "+analyte+" sample "+id) {
			return true
		}
		s.Responses = append(s.Responses, resp)
		d.lines.samples[i] = append(d.lines.samples[i], n)
	default:
		return d.fail(n, csvColKind, "%s is not a kind (want \"standard\" or \"sample\")", csvQuote(kind))
	}
	return false
}

// lineList names lines in words: "line 3", "lines 3 and 4", "lines 2, 3 and 4".
func lineList(lines []string) string {
	if len(lines) == 1 {
		return "line " + lines[0]
	}
	return "lines " + strings.Join(lines[:len(lines)-1], ", ") + " and " + lines[len(lines)-1]
}

// decimalCommaHint explains a row with more fields than the header when two
// neighbouring fields are both bare digits, as a number written with a
// decimal comma ("0,5") splits into.
func decimalCommaHint(fields []string, want int) string {
	if len(fields) <= want {
		return ""
	}
	digits := func(s string) bool {
		s = strings.TrimPrefix(s, "-")
		return s != "" && strings.Trim(s, "0123456789") == ""
	}
	for i := 0; i+1 < len(fields); i++ {
		if digits(fields[i]) && digits(fields[i+1]) {
			return fmt.Sprintf(`: "%s,%s" looks like a number with a decimal comma; numbers use "." (%s.%s), or quote the field`,
				fields[i], fields[i+1], fields[i], fields[i+1])
		}
	}
	return ""
}

// response parses the row's reading into *v; it reports whether decoding
// must stop.
func (d *csvRunDecoder) response(n int, fields []string, v *float64, failed func(string, string, ...any) bool) bool {
	c, _ := d.cell(fields, csvColResponse)
	if c == "" {
		return failed(csvColResponse, "required: one instrument reading")
	}
	r, err := parseCSVNumber(c, -fastResponseAbsMax, fastResponseAbsMax, false)
	if err != nil {
		return failed(csvColResponse, "%v", err)
	}
	*v = r
	return false
}

// isResponse parses the row's optional internal-standard reading (column
// is_response; empty or absent: none); it reports the value, whether the
// row has one, and whether decoding must stop.
func (d *csvRunDecoder) isResponse(fields []string, failed func(string, string, ...any) bool) (float64, bool, bool) {
	c, _ := d.cell(fields, csvColISResponse)
	if c == "" {
		return 0, false, false
	}
	r, err := parseCSVNumber(c, -fastResponseAbsMax, fastResponseAbsMax, false)
	if err != nil {
		return 0, false, failed(csvColISResponse, "%v", err)
	}
	return r, true, false
}

// sameIS appends the row's IS reading to a level's or sample's is_responses
// (read so far: have readings, from lines); every reading of a group gives
// one or none does. It reports whether decoding must stop.
func (d *csvRunDecoder) sameIS(n int, is **oapi.Responses, have int, hasIS bool, v float64, lines []int, what string) bool {
	if have > 0 && (*is != nil) != hasIS {
		if hasIS {
			return d.fail(n, csvColISResponse, "%s has no is_response on line %d: give it on every reading of a level or sample, or on none", what, lines[0])
		}
		return d.fail(n, csvColISResponse, "required: %s has an is_response on line %d; give it on every reading of a level or sample, or on none", what, lines[0])
	}
	if !hasIS {
		return false
	}
	if *is == nil {
		*is = &oapi.Responses{}
	}
	**is = append(**is, v)
	return false
}
