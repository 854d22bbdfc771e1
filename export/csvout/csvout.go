// Package csvout writes reported results as CSV (RFC 4180: comma
// separated, fields quoted where needed, CRLF line ends) that is safe to
// open in a spreadsheet.
//
// Formula injection (OWASP, "CSV Injection"): a text cell that begins with
// =, +, -, @, a tab or a carriage return is written with a leading
// apostrophe, so a spreadsheet shows it as text instead of evaluating it.
// Numbers are left as they are: a cell that is a plain decimal number
// (optional sign, digits, optional fraction and exponent, e.g. -0.5 or
// 1.2e-3) cannot be a formula, and a negative result must stay a number.
//
// Every row carries export.Caution in its caution column: the laboratory's
// accreditation, its regulator and its SOP come first, and a qualified
// person reviews results.
package csvout

import (
	"encoding/csv"
	"io"
	"strings"
	"time"

	"curvekeeper/export"
)

// Header is the first row written by Write.
//
// Columns are only ever added at the end, so that a reader that takes
// them by position keeps working: interval_method, interval_low and
// interval_high came after caution.
var Header = []string{"sample_id", "analyte", "value", "unit", "expanded_uncertainty", "coverage_factor",
	"coverage_level", "release_state", "flags", "conformity", "curve_id", "instrument", "observed_at", "caution",
	"interval_method", "interval_low", "interval_high"}

// Result is one row. Numbers come as text, already formatted (e.g. the
// value rounded to the place of its uncertainty), so the file shows what the
// report shows.
type Result struct {
	SampleID, Analyte     string
	Value, Unit           string
	ExpandedUncertainty   string
	CoverageFactor, Level string
	ReleaseState          string
	Flags                 []string // joined with ";"
	Conformity            string   // e.g. "pass (guard_band_u)"
	// IntervalMethod ("gum" or "monte_carlo"), IntervalLow and IntervalHigh
	// are the coverage interval the result reports once a Monte Carlo
	// check ran; empty otherwise (y ± U).
	IntervalMethod, IntervalLow, IntervalHigh string
	CurveID, Instrument                       string
	ObservedAt                                time.Time // RFC 3339 in its own zone; zero: empty
}

// Write writes Header and one row per result to w.
func Write(w io.Writer, results []Result) error {
	cw := csv.NewWriter(w)
	cw.UseCRLF = true
	if err := cw.Write(Header); err != nil {
		return err
	}
	row := make([]string, len(Header))
	for _, r := range results {
		obs := ""
		if !r.ObservedAt.IsZero() {
			obs = r.ObservedAt.Format(time.RFC3339)
		}
		copy(row, []string{r.SampleID, r.Analyte, r.Value, r.Unit, r.ExpandedUncertainty, r.CoverageFactor,
			r.Level, r.ReleaseState, strings.Join(r.Flags, ";"), r.Conformity, r.CurveID, r.Instrument, obs, export.Caution,
			r.IntervalMethod, r.IntervalLow, r.IntervalHigh})
		for i := range row {
			row[i] = Neutralise(row[i])
		}
		if err := cw.Write(row); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// Neutralise returns the cell prefixed with an apostrophe when it begins
// with =, +, -, @, tab or CR and is not a plain decimal number; otherwise
// the cell unchanged.
func Neutralise(cell string) string {
	if cell == "" || !strings.ContainsRune("=+-@\t\r", rune(cell[0])) || IsNumber(cell) {
		return cell
	}
	return "'" + cell
}

// IsNumber reports whether s is a plain decimal number:
// [+-]? (digits [. digits?] | . digits) ([eE] [+-]? digits)?. Hexadecimal,
// "Inf", "NaN", separators and spaces are not numbers here.
func IsNumber(s string) bool {
	i := 0
	if i < len(s) && (s[i] == '+' || s[i] == '-') {
		i++
	}
	mant := 0
	for i < len(s) && s[i] >= '0' && s[i] <= '9' {
		i++
		mant++
	}
	if i < len(s) && s[i] == '.' {
		i++
		for i < len(s) && s[i] >= '0' && s[i] <= '9' {
			i++
			mant++
		}
	}
	if mant == 0 {
		return false
	}
	if i < len(s) && (s[i] == 'e' || s[i] == 'E') {
		i++
		if i < len(s) && (s[i] == '+' || s[i] == '-') {
			i++
		}
		exp := 0
		for i < len(s) && s[i] >= '0' && s[i] <= '9' {
			i++
			exp++
		}
		if exp == 0 {
			return false
		}
	}
	return i == len(s)
}
