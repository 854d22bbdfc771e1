package api

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"mime"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/export"
	"curvekeeper/export/csvout"
	"curvekeeper/export/fhir"
	"curvekeeper/export/hl7v2"
	"curvekeeper/lab"
)

// Media types a result route may answer in besides application/json.
const (
	mediaFHIR = "application/fhir+json"
	mediaCSV  = "text/csv"
	mediaHL7  = "x-application/hl7-v2+er7"
)

type acceptKey struct{}

// acceptMiddleware keeps the Accept header in the request's context for the
// strict handlers, which see only the context.
func acceptMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		if a := c.Request().Header.Get(echo.HeaderAccept); a != "" {
			req := c.Request()
			c.SetRequest(req.WithContext(context.WithValue(req.Context(), acceptKey{}, a)))
		}
		return next(c)
	}
}

// preferred returns the first of offers the Accept header in ctx names
// exactly (media ranges and q-values aside), "" when none: the caller then
// answers in JSON.
func preferred(ctx context.Context, offers ...string) string {
	a, _ := ctx.Value(acceptKey{}).(string)
	for _, part := range strings.Split(a, ",") {
		mt, params, err := mime.ParseMediaType(strings.TrimSpace(part))
		if err != nil || params["q"] == "0" {
			continue
		}
		for _, o := range offers {
			if mt == o {
				return o
			}
		}
	}
	return ""
}

// runResultsAs answers a run's results as FHIR or CSV (see the spec of
// getRunResults); ok false when the caller asked for neither.
func (s *Server) runResultsAs(ctx context.Context, rd *lab.Service, runID string, results []lab.Result) (oapi.GetRunResultsResponseObject, bool, error) {
	media := preferred(ctx, mediaFHIR, mediaCSV, mediaHL7)
	if media == "" {
		return nil, false, nil
	}
	run, err := rd.GetRun(ctx, runID)
	if err != nil {
		return nil, true, err
	}
	if media == mediaHL7 {
		body, err := runResultsHL7(run, results)
		if err != nil {
			return nil, true, err
		}
		return oapi.GetRunResults200XApplicationHl7V2Er7Response{Body: bytes.NewReader(body), ContentLength: int64(len(body))}, true, nil
	}
	if media == mediaCSV {
		rows := make([]csvout.Result, 0, len(results))
		for _, r := range results {
			row := csvout.Result{SampleID: r.SampleID, Analyte: r.Analyte, Unit: r.Unit, ReleaseState: r.ReleaseState,
				Flags: r.Flags, CurveID: r.CurveID, Instrument: run.Instrument, ObservedAt: r.AcquiredAt}
			if r.Concentration != nil {
				row.Value = strconv.FormatFloat(*r.Concentration, 'g', -1, 64)
			}
			if b := resultBudget(r); b != nil && b.ExpandedText != "" {
				row.Value, row.ExpandedUncertainty = b.ValueText, b.ExpandedText
				row.CoverageFactor = strconv.FormatFloat(b.CoverageFactor, 'f', 2, 64)
				row.Level = strconv.FormatFloat(b.Level, 'f', -1, 64)
				if b.Conformity != nil {
					row.Conformity = b.Conformity.Outcome + " (" + b.Conformity.Rule + ")"
				}
				if ri := b.ReportedInterval; ri != nil {
					row.IntervalMethod, row.IntervalLow, row.IntervalHigh = ri.Method, ri.LowText, ri.HighText
				}
			}
			rows = append(rows, row)
		}
		var buf bytes.Buffer
		if err := csvout.Write(&buf, rows); err != nil {
			return nil, true, fmt.Errorf("api: write csv: %w", err)
		}
		return oapi.GetRunResults200TextCsvResponse{Body: &buf, ContentLength: int64(buf.Len())}, true, nil
	}
	obs := make([]fhir.Result, 0, len(results))
	var issued time.Time
	for _, r := range results {
		if r.Concentration == nil {
			continue // no value to state: left out (the JSON and CSV show it)
		}
		if r.CreatedAt.After(issued) {
			issued = r.CreatedAt
		}
		obs = append(obs, fhir.Result{ID: strconv.FormatInt(r.ID, 10), Code: r.Analyte, CodeSystem: fhirAnalyteSystem,
			CodeDisplay: r.Analyte, Value: *r.Concentration, UnitCode: r.Unit, ReleaseState: r.ReleaseState,
			Effective: r.AcquiredAt, Issued: r.CreatedAt, Device: run.Instrument, CurveID: r.CurveID,
			Method: fmt.Sprintf("%s revision %d", run.Method, run.MethodRevision),
			Notes:  append([]string{"Sample " + r.SampleID + "."}, calib.Cautions()...)})
		if b := resultBudget(r); b != nil && b.ExpandedText != "" {
			o := &obs[len(obs)-1]
			o.ValueText, o.StandardUncertainty, o.Expanded, o.ExpandedText = b.ValueText, b.Combined, b.Expanded, b.ExpandedText
			o.CoverageFactor, o.Level, o.StudentT = b.CoverageFactor, b.Level, b.Coverage == string(calib.CoverageStudentT)
			if b.Conformity != nil {
				c := b.Conformity.Conformity(b.Value, b.Expanded)
				o.Conformity = &c
			}
			if ri := b.ReportedInterval; ri != nil && ri.Method == lab.ReportedMonteCarlo {
				o.Notes = append(o.Notes, "Reported: "+export.IntervalStatement(ri.LowText, ri.HighText, r.Unit, ri.Level)+". "+ri.Reason)
			}
		}
	}
	b, err := fhir.Bundle(obs, issued)
	if err != nil {
		return nil, true, fmt.Errorf("api: fhir bundle: %w", err)
	}
	raw, err := json.Marshal(b)
	if err != nil {
		return nil, true, fmt.Errorf("api: marshal fhir bundle: %w", err)
	}
	var out oapi.GetRunResults200ApplicationFhirPlusJSONResponse
	if err := json.Unmarshal(raw, &out); err != nil {
		return nil, true, fmt.Errorf("api: fhir bundle: %w", err)
	}
	return out, true, nil
}

// fhirAnalyteSystem is the code system of the analyte names in
// Observation.code: the lab's own names, not LOINC.
const fhirAnalyteSystem = "urn:curvekeeper:analyte"

// runResultsHL7 encodes one ORU^R01 per sample of results, in the order of
// the samples' first results, stamped with the latest result's creation
// time (never the clock) and controlled by the run and the sample's first
// result id.
func runResultsHL7(run *lab.Run, results []lab.Result) ([]byte, error) {
	var (
		order  []string
		bySamp = map[string][]lab.Result{}
		latest time.Time
	)
	for _, r := range results {
		if _, ok := bySamp[r.SampleID]; !ok {
			order = append(order, r.SampleID)
		}
		bySamp[r.SampleID] = append(bySamp[r.SampleID], r)
		if r.CreatedAt.After(latest) {
			latest = r.CreatedAt
		}
	}
	var out []byte
	for _, id := range order {
		rs := bySamp[id]
		m := hl7v2.Message{SendingApplication: "curvekeeper", Time: latest,
			ControlID: fmt.Sprintf("%s-%d", run.ID[:8], rs[0].ID),
			Order:     hl7v2.Order{FillerNumber: id, ServiceCode: run.Method, ServiceText: run.Method, ServiceSystem: "L", ObservedAt: rs[0].AcquiredAt}}
		for _, r := range rs {
			obx := hl7v2.Result{Code: r.Analyte, Text: r.Analyte, System: "L", UnitCode: r.Unit,
				ReleaseState: r.ReleaseState, ObservedAt: r.AcquiredAt, MethodCode: run.Method,
				MethodText: fmt.Sprintf("%s revision %d", run.Method, run.MethodRevision), Equipment: run.Instrument}
			if r.Concentration == nil {
				continue // no value to send; the JSON shows why
			}
			// The flags speak of the calibration (range, LOQ), not of a
			// reference range, so they go to a note, not to OBX-8.
			if len(r.Flags) > 0 {
				obx.Notes = append(obx.Notes, "Calibration flags: "+strings.Join(r.Flags, ", ")+".")
			}
			obx.Value = *r.Concentration
			if b := resultBudget(r); b != nil && b.ExpandedText != "" {
				obx.ValueText = b.ValueText
				obx.Uncertainty = export.UncertaintyStatement(b.ExpandedText, r.Unit, b.CoverageFactor, b.Level)
				if ri := b.ReportedInterval; ri != nil && ri.Method == lab.ReportedMonteCarlo {
					obx.Notes = append(obx.Notes, "GUM beside it: "+obx.Uncertainty+".")
					obx.Uncertainty = export.IntervalStatement(ri.LowText, ri.HighText, r.Unit, ri.Level)
				}
				if b.Conformity != nil {
					obx.Notes = append(obx.Notes, "Conformity: "+b.Conformity.Statement+" "+b.Conformity.Risk)
					obx.AbnormalFlags = append(obx.AbnormalFlags, hl7ConformityFlag(b.Conformity, b.Value))
				}
			}
			m.Results = append(m.Results, obx)
		}
		if len(m.Results) == 0 {
			continue
		}
		b, err := hl7v2.Encode(m)
		if err != nil {
			return nil, fmt.Errorf("api: hl7 v2: %w", err)
		}
		out = append(out, b...)
	}
	return out, nil
}

// resultBudget returns r's stored budget; nil when it has none (or none
// that reads back).
func resultBudget(r lab.Result) *lab.BudgetRecord {
	if len(r.Uncertainty) == 0 {
		return nil
	}
	var b lab.BudgetRecord
	if json.Unmarshal(r.Uncertainty, &b) != nil {
		return nil
	}
	return &b
}

// hl7ConformityFlag maps a conformity statement to an OBX-8 abnormal flag
// (HL7 table 0078): pass N (normal); a conditional outcome A (abnormal:
// too close to the limit to state conformity at the level of U); fail above
// the upper limit H, below the lower limit L.
func hl7ConformityFlag(c *lab.ConformityOut, value float64) string {
	switch c.Outcome {
	case calib.OutcomePass:
		return "N"
	case calib.OutcomeConditionalPass, calib.OutcomeConditionalFail:
		return "A"
	}
	if c.Upper != nil && value > *c.Upper {
		return "H"
	}
	return "L"
}
