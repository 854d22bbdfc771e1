// Package record prints a curve's calibration record as a PDF: everything a
// reviewer or an inspector needs to see whole, on paper, with the plot on
// the first page (codeberg.org/go-pdf/fpdf, with the Liberation Sans faces
// that gonum/plot already ships, so every character of the record prints).
// It knows nothing of HTTP or SQL: the api gathers the record and passes it.
//
// The record is an aid: local accreditation, regulation and the
// laboratory's SOP come first, and a qualified person reviews the results.
package record

import (
	"bytes"
	"encoding/hex"
	"fmt"
	"strconv"
	"strings"
	"time"

	"codeberg.org/go-fonts/liberation/liberationsansbold"
	"codeberg.org/go-fonts/liberation/liberationsansregular"
	"codeberg.org/go-pdf/fpdf"

	"curvekeeper/calib"
	"curvekeeper/lab"
)

// Input is everything the record shows, gathered by the caller.
type Input struct {
	Curve         *lab.Curve
	Run           *lab.Run // nil when unavailable
	Method        *lab.Method
	Verifications []lab.Verification
	Results       []lab.Result
	Signatures    []lab.Signature
	SignatureOK   []bool // per signature: the curve still has the hash it signed
	Audit         []lab.AuditEvent
	PlotPNG       []byte
	ContentHash   [32]byte // SHA-256 of lab.CanonicalCurve
	Software      string   // the service's version
	Zone          *time.Location
	PrintedAt     time.Time // injected
}

// Changed reports whether anything changed after the original entry, and
// what: the curve is a revision (an exclusion refitted it), a signature was
// withdrawn, or the content no longer matches a signature.
func (in *Input) Changed() []string {
	var out []string
	if in.Curve.RevisionOf != "" {
		out = append(out, "this curve is a revision of curve "+in.Curve.RevisionOf+" (standards excluded after the original fit)")
	}
	for i, s := range in.Signatures {
		if s.WithdrawnAt != nil {
			out = append(out, "the "+s.Meaning+" signature of "+s.PrintedName+" was withdrawn: "+s.WithdrawalReason)
		}
		if i < len(in.SignatureOK) && !in.SignatureOK[i] {
			out = append(out, "the record changed after the "+s.Meaning+" signature of "+s.PrintedName)
		}
	}
	return out
}

const caution = "This record is an aid. Local accreditation, regulation and the laboratory's SOP come first, and a qualified person reviews the results."

type doc struct {
	*fpdf.Fpdf
	zone *time.Location
}

func (d *doc) when(t time.Time) string {
	s := t.UTC().Format("2006-01-02 15:04:05 UTC")
	if d.zone != nil && d.zone != time.UTC {
		s += " (" + t.In(d.zone).Format("2006-01-02 15:04:05 MST") + ")"
	}
	return s
}

func (d *doc) heading(s string) {
	d.Ln(2)
	d.SetFont("sans", "B", 11)
	d.CellFormat(0, 6, s, "B", 1, "L", false, 0, "")
	d.SetFont("sans", "", 8.5)
	d.Ln(1)
}

func (d *doc) para(s string) { d.MultiCell(0, 4.2, s, "", "L", false) }

func (d *doc) kv(k, v string) {
	d.SetFont("sans", "B", 8.5)
	d.CellFormat(45, 4.6, k, "", 0, "L", false, 0, "")
	d.SetFont("sans", "", 8.5)
	d.MultiCell(0, 4.6, v, "", "L", false)
}

// table prints a header row and rows with the given column widths (mm).
func (d *doc) table(widths []float64, head []string, rows [][]string) {
	if d.GetY() > 250 { // keep a header with its first rows
		d.AddPage()
	}
	d.SetFont("sans", "B", 7.5)
	d.SetFillColor(230, 234, 238)
	for i, h := range head {
		d.CellFormat(widths[i], 5, h, "1", 0, "L", true, 0, "")
	}
	d.Ln(-1)
	d.SetFont("sans", "", 7.5)
	for _, r := range rows {
		if d.GetY() > 270 {
			d.AddPage()
		}
		for i, c := range r {
			// Long cells are cut to the column; the full text is in the
			// API and on the QA page.
			c = d.fit(c, widths[i]-1.5)
			d.CellFormat(widths[i], 4.6, c, "1", 0, "L", false, 0, "")
		}
		d.Ln(-1)
	}
}

func (d *doc) fit(s string, w float64) string {
	if d.GetStringWidth(s) <= w {
		return s
	}
	r := []rune(s)
	for len(r) > 1 && d.GetStringWidth(string(r)+"…") > w {
		r = r[:len(r)-1]
	}
	return string(r) + "…"
}

func g(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }

func optional(v *float64) string {
	if v == nil {
		return "—"
	}
	return g(*v)
}

// PDF renders the record.
func PDF(in *Input) ([]byte, error) {
	c, r := in.Curve, in.Curve.Report
	f := fpdf.New("P", "mm", "A4", "")
	f.AddUTF8FontFromBytes("sans", "", liberationsansregular.TTF)
	f.AddUTF8FontFromBytes("sans", "B", liberationsansbold.TTF)
	f.SetCreationDate(in.PrintedAt)
	f.SetModificationDate(in.PrintedAt)
	f.SetTitle("Calibration record "+c.ID, true)
	f.SetMargins(14, 14, 14)
	f.SetAutoPageBreak(true, 16)
	d := &doc{Fpdf: f, zone: in.Zone}
	hash := hex.EncodeToString(in.ContentHash[:])
	f.SetFooterFunc(func() {
		f.SetY(-12)
		f.SetFont("sans", "", 6.5)
		f.CellFormat(0, 4, fmt.Sprintf("Curve %s · content SHA-256 %s · page %d/{nb}", c.ID, hash, f.PageNo()), "", 0, "C", false, 0, "")
	})
	f.AliasNbPages("{nb}")
	f.AddPage()

	f.SetFont("sans", "B", 14)
	f.CellFormat(0, 7, "Calibration record: "+c.Analyte+" on "+c.Instrument, "", 1, "L", false, 0, "")
	f.SetFont("sans", "", 8.5)
	changed := in.Changed()
	if len(changed) > 0 {
		f.SetTextColor(160, 40, 30)
		d.para("CHANGED AFTER ORIGINAL ENTRY: " + strings.Join(changed, "; ") + ".")
		f.SetTextColor(0, 0, 0)
	} else {
		d.para("Unchanged since original entry (no revision, no withdrawn signature, every signature matches the content).")
	}
	d.kv("Verdict, status", strings.ToUpper(c.Verdict)+", "+c.Status)
	d.kv("Content SHA-256", hash)

	// The plot first: a person would rather look than read.
	if len(in.PlotPNG) > 0 {
		opt := fpdf.ImageOptions{ImageType: "PNG", ReadDpi: true}
		f.RegisterImageOptionsReader("plot", opt, bytes.NewReader(in.PlotPNG))
		if err := f.Error(); err != nil {
			return nil, fmt.Errorf("record: plot: %w", err)
		}
		f.ImageOptions("plot", 14, f.GetY()+1, 182, 0, true, opt, 0, "")
	}

	d.heading("Identification")
	d.kv("Curve", c.ID)
	d.kv("Method", fmt.Sprintf("%s, revision %d", c.Method, c.MethodRevision))
	if in.Method != nil && in.Method.Description != "" {
		d.kv("Method description", in.Method.Description)
	}
	d.kv("Instrument", c.Instrument)
	if in.Run != nil {
		d.kv("Run", in.Run.ID)
		d.kv("Operator", in.Run.Operator)
		d.kv("Posted by", in.Run.ReceivedBy+" at "+d.when(in.Run.ReceivedAt))
	}
	d.kv("Acquired", d.when(c.AcquiredAt))
	d.kv("Fitted", d.when(c.CreatedAt)+" by "+c.CreatedBy)
	d.kv("Software", in.Software)
	d.kv("Engine", c.EngineVersion)
	d.kv("Printed", d.when(in.PrintedAt))

	d.heading("Model and weighting")
	d.kv("Model, weighting", fmt.Sprintf("%s, %s (requested %s; auto would choose %s)", r.Model, r.Weighting, r.WeightingRequested, r.WeightingAdvised))
	d.kv("Equation", equation(r))
	if len(r.Coefficients) > 0 {
		d.kv("R², s(y/x), df", fmt.Sprintf("%s, %s, %d", g(r.RSquared), g(r.ResidualSD), r.DF))
	}
	d.kv("Weights", r.WeightConvention)
	if len(r.WeightCandidates) > 0 {
		var rows [][]string
		for _, w := range r.WeightCandidates {
			score := "not scored"
			if w.Scored {
				score = g(w.SumAbsRE)
			}
			chosen := ""
			if w.Chosen {
				chosen = "used"
			}
			rows = append(rows, []string{string(w.Weighting), score, g(w.MaxLevelShare), chosen})
		}
		d.table([]float64{35, 45, 45, 25}, []string{"Candidate weighting", "Σ|%RE| of standards", "Largest level weight share", ""}, rows)
	}

	d.heading("Standards")
	var rows [][]string
	for _, p := range r.Points {
		used := "used"
		if p.Excluded {
			used = "EXCLUDED"
		}
		re := "—"
		if p.HasRelativeError {
			re = strconv.FormatFloat(p.RelativeErrorPct, 'f', 2, 64)
		}
		back := "—"
		if p.HasBackCalc {
			back = g(p.BackCalculated)
		}
		rows = append(rows, []string{p.Level, g(p.X), g(p.Y), back, re, used})
	}
	d.table([]float64{22, 30, 30, 34, 22, 44}, []string{"Level", "Nominal (" + c.Unit + ")", "Response", "Back-calculated", "%RE", "Used / excluded"}, rows)
	for _, e := range in.Audit {
		if strings.Contains(e.Action, "exclu") {
			d.para("Exclusion by " + e.Actor + " at " + d.when(e.At) + ": " + string(e.Detail))
		}
	}

	d.heading("Acceptance checks")
	rows = rows[:0]
	for _, ch := range r.Checks {
		res := "pass"
		switch {
		case !ch.Computed:
			res = "not computed"
		case !ch.Passed:
			res = "FAIL"
		}
		role := "advisory"
		if ch.Mandatory {
			role = "mandatory"
		}
		stat, lim := "—", "—"
		if ch.Computed {
			stat, lim = g(ch.Statistic), g(ch.Limit)
		}
		rows = append(rows, []string{ch.Name, res, role, stat, lim, ch.Source})
	}
	d.table([]float64{40, 20, 20, 24, 24, 54}, []string{"Check", "Result", "Role", "Statistic", "Limit", "Source"}, rows)

	d.heading("Limits and working range")
	if r.Limits.Computed {
		d.kv("LOD, LOQ", fmt.Sprintf("%s, %s %s (ICH Q2: 3.3·σ/S, 10·σ/S)", g(r.Limits.LOD), g(r.Limits.LOQ), c.Unit))
	}
	d.para(r.Limits.Detail)
	d.kv("Working range", fmt.Sprintf("%s to %s %s", g(r.Range.Low), g(r.Range.High), c.Unit))

	d.heading("Verification standards")
	if len(in.Verifications) == 0 {
		d.para("None recorded.")
	} else {
		rows = rows[:0]
		for _, v := range in.Verifications {
			ok := "FAIL"
			if v.Passed {
				ok = "pass"
			}
			rows = append(rows, []string{v.Kind, v.Level, g(v.Concentration), optional(v.Found), optional(v.RecoveryPct), ok, d.when(v.At)})
		}
		d.table([]float64{22, 18, 24, 24, 22, 14, 58}, []string{"Kind", "Level", "Nominal", "Found", "Recovery %", "Result", "Measured"}, rows)
	}

	d.heading("Samples")
	if len(in.Results) == 0 {
		d.para("None.")
	} else {
		rows = rows[:0]
		for _, s := range in.Results {
			rows = append(rows, []string{s.SampleID, optional(s.Concentration), s.Unit, g(s.Dilution), s.ReleaseState, s.ReleaseReason})
		}
		d.table([]float64{34, 28, 18, 16, 30, 56}, []string{"Sample", "Result", "Unit", "Dilution", "Release state", "Reason"}, rows)
	}

	d.heading("Signatures")
	if len(in.Signatures) == 0 {
		d.para("Not signed.")
	}
	for i, s := range in.Signatures {
		f.SetFont("sans", "B", 8.5)
		d.para(s.PrintedName + " — " + s.What())
		f.SetFont("sans", "", 8.5)
		line := "Signed " + s.SignedAt.UTC().Format("2006-01-02 15:04:05 UTC") + " (" + s.Local().Format("2006-01-02 15:04:05 MST") + ", " + s.TimeZone + ")"
		if s.Decision != "" {
			line += "; decision: " + s.Decision
		}
		if s.Reason != "" {
			line += "; reason: " + s.Reason
		}
		line += "; signed content SHA-256 " + hex.EncodeToString(s.ContentHash)
		if i < len(in.SignatureOK) && !in.SignatureOK[i] {
			line += " — DOES NOT MATCH the current content"
		}
		if s.WithdrawnAt != nil {
			line += "; WITHDRAWN " + d.when(*s.WithdrawnAt) + " by " + s.WithdrawnBy + ": " + s.WithdrawalReason
		}
		d.para(line)
		d.Ln(1)
	}

	d.heading("Audit trail")
	rows = rows[:0]
	for _, e := range in.Audit {
		rows = append(rows, []string{e.At.UTC().Format("2006-01-02 15:04:05 UTC"), e.Actor, e.Action, e.EntityType + " " + e.EntityID, string(e.Detail)})
	}
	d.table([]float64{32, 38, 24, 38, 50}, []string{"When", "Who", "Action", "Record", "Detail"}, rows)

	d.heading("Cautions")
	for _, s := range r.Cautions {
		d.para("• " + s)
	}
	d.para(caution)

	var buf bytes.Buffer
	if err := f.Output(&buf); err != nil {
		return nil, fmt.Errorf("record: %w", err)
	}
	return buf.Bytes(), nil
}

// equation writes the fitted equation with 6 significant digits.
func equation(r *calib.Report) string {
	b, ok := r.Slope()
	if !ok || len(r.Coefficients) == 0 {
		return "no fit"
	}
	switch r.Model {
	case calib.AverageRF:
		return "y = RF·x, mean RF = " + g(b) + " (average response factor)"
	case calib.LinearOrigin:
		return "y = " + g(b) + "·x"
	case calib.Quadratic:
		return "y = " + g(r.Coefficients[0]) + " + " + g(b) + "·x + " + g(r.Coefficients[2]) + "·x²"
	case calib.Linear:
		return "y = " + g(r.Coefficients[0]) + " + " + g(b) + "·x"
	}
	cs := make([]string, len(r.Coefficients))
	for i, v := range r.Coefficients {
		cs[i] = g(v)
	}
	return string(r.Model) + " with coefficients " + strings.Join(cs, ", ")
}
