package api

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"time"

	"curvekeeper/api/oapi"
	"curvekeeper/calib"
	"curvekeeper/lab"
	"curvekeeper/store"
)

// CreateRun stores a run posted by an instrument (JSON or CSV) and fits one
// curve per analyte, all in one transaction. A run whose numbers are valid
// but cannot be fitted is stored too, with a failed curve saying why: the
// instrument's raw data is never thrown away.
func (s *Server) CreateRun(ctx context.Context, req oapi.CreateRunRequestObject) (oapi.CreateRunResponseObject, error) {
	p := mustPrincipal(ctx)
	body, format, hash, err := runBody(req)
	if err != nil {
		return nil, err
	}
	key := ""
	if req.Params.IdempotencyKey != nil {
		key = *req.Params.IdempotencyKey
	}
	// One round trip for the idempotency key, the method's latest revision
	// and the drift history of every analyte the run names.
	reads, err := s.db.ReadForRun(ctx, store.RunReadsQuery{TokenID: p.TokenID, Key: key, RequestHash: hash,
		Method: string(body.Method), Instrument: string(body.Instrument), Analytes: runAnalytes(body),
		Before: body.AcquiredAt, Limit: driftHistory})
	if err != nil {
		if lab.KindOf(err) == lab.KindNotFound {
			return nil, lab.FieldError("/method", "no method is called %q; an administrator defines methods with POST /v1/methods", body.Method)
		}
		return nil, err
	}
	if reads.Replay != nil {
		return runCreatedOut(reads.Replay), nil
	}
	m := reads.Method
	in, curves, err := s.prepareRun(m, body)
	if err != nil {
		return nil, err
	}
	addDriftChecks(m, reads.Slopes, curves)
	in.SourceFormat, in.RequestHash, in.IdempotencyKey = format, hash, key
	in.TokenID, in.Actor = p.TokenID, p.Actor()
	created, err := s.db.CreateRun(ctx, in, curves)
	if err != nil {
		return nil, err
	}
	return runCreatedOut(created), nil
}

// runAnalytes lists the analyte of every standard of a run (with repeats).
func runAnalytes(body *oapi.RunRequest) []string {
	out := make([]string, 0, len(body.Standards))
	for _, st := range body.Standards {
		out = append(out, string(st.Analyte))
	}
	return out
}

func runCreatedOut(c *store.RunCreated) oapi.CreateRun201JSONResponse {
	out := oapi.CreateRun201JSONResponse{
		Body:    oapi.RunCreated{ID: uuidOf(c.ID), Cautions: calib.Cautions(), Curves: make([]oapi.RunCurve, 0, len(c.Curves))},
		Headers: oapi.CreateRun201ResponseHeaders{Location: "/v1/runs/" + c.ID, IdempotencyReplayed: c.Replayed},
	}
	for _, cv := range c.Curves {
		out.Body.Curves = append(out.Body.Curves, oapi.RunCurve{ID: uuidOf(cv.ID), Analyte: cv.Analyte,
			Verdict: oapi.Verdict(cv.Verdict), Status: oapi.CurveStatusPendingReview})
	}
	return out
}

// runBody returns the run as JSON would carry it, whichever format came, and
// the hash that identifies the request for idempotent replay.
func runBody(req oapi.CreateRunRequestObject) (*oapi.RunRequest, string, []byte, error) {
	h := sha256.New()
	if req.JSONBody != nil {
		if req.Params.Method != nil || req.Params.Instrument != nil || req.Params.AcquiredAt != nil || req.Params.Operator != nil {
			return nil, "", nil, newProblem(http.StatusBadRequest,
				"the query parameters method, instrument, acquired_at and operator are for text/csv; a JSON run carries them in its body",
				ProblemField{Pointer: "query:method", Detail: "not allowed with application/json"})
		}
		canon, err := json.Marshal(req.JSONBody) // canonical: the same run hashes the same whatever its spacing
		if err != nil {
			return nil, "", nil, fmt.Errorf("api: hash run: %w", err)
		}
		h.Write([]byte("json\n"))
		h.Write(canon)
		return req.JSONBody, store.FormatJSON, h.Sum(nil), nil
	}
	if req.Body == nil {
		return nil, "", nil, newProblem(http.StatusUnsupportedMediaType, "send the run as application/json or text/csv")
	}
	var missing []ProblemField
	if req.Params.Method == nil {
		missing = append(missing, ProblemField{Pointer: "query:method", Detail: "required with text/csv"})
	}
	if req.Params.Instrument == nil {
		missing = append(missing, ProblemField{Pointer: "query:instrument", Detail: "required with text/csv"})
	}
	if req.Params.AcquiredAt == nil {
		missing = append(missing, ProblemField{Pointer: "query:acquired_at", Detail: "required with text/csv (RFC 3339)"})
	}
	if len(missing) > 0 {
		return nil, "", nil, newProblem(http.StatusBadRequest, "a CSV run needs method, instrument and acquired_at as query parameters", missing...)
	}
	raw, err := io.ReadAll(req.Body)
	if err != nil {
		var mbe *http.MaxBytesError
		if errors.As(err, &mbe) {
			return nil, "", nil, newProblem(http.StatusRequestEntityTooLarge, fmt.Sprintf("the body is over the limit of %d bytes", mbe.Limit))
		}
		return nil, "", nil, fmt.Errorf("api: read CSV body: %w", err)
	}
	standards, samples, err := decodeCSVRun(bytes.NewReader(raw))
	if err != nil {
		return nil, "", nil, csvProblem(err)
	}
	run := &oapi.RunRequest{Method: *req.Params.Method, Instrument: *req.Params.Instrument,
		AcquiredAt: *req.Params.AcquiredAt, Operator: req.Params.Operator, Standards: standards}
	if len(samples) > 0 {
		run.Samples = &samples
	}
	h.Write([]byte("csv\n"))
	for _, part := range []string{run.Method, run.Instrument, run.AcquiredAt.UTC().Format(time.RFC3339Nano), deref(run.Operator)} {
		h.Write([]byte(strconv.Quote(part)))
	}
	h.Write(raw)
	return run, store.FormatCSV, h.Sum(nil), nil
}

// csvProblem lists every breach of the CSV layout by line and column.
func csvProblem(err error) error {
	var ce *csvRunError
	if !errors.As(err, &ce) {
		return err
	}
	fields := make([]ProblemField, 0, len(ce.Errors))
	for _, e := range ce.Errors {
		fields = append(fields, ProblemField(e))
	}
	detail := "the CSV body does not follow the documented layout"
	if len(fields) == 1 {
		detail = fields[0].Pointer + ": " + fields[0].Detail
	}
	return newProblem(http.StatusUnprocessableEntity, detail, fields...)
}

// prepareRun checks the run against its method and fits one curve per
// analyte (CPU work, done before the transaction opens).
func (s *Server) prepareRun(m *store.Method, body *oapi.RunRequest) (store.RunInput, []store.CurveInput, error) {
	in := store.RunInput{
		Method:         m.Name,
		MethodRevision: m.Revision,
		Instrument:     string(body.Instrument),
		AcquiredAt:     body.AcquiredAt,
		Operator:       deref(body.Operator),
	}
	type levelKey struct{ analyte, level string }
	type concKey struct {
		analyte string
		conc    float64
	}
	seen := map[levelKey]bool{}
	concAt := map[concKey]string{} // level label holding each concentration
	var order []string
	points := map[string][]calib.Point{}
	for i, st := range body.Standards {
		a := string(st.Analyte)
		if _, ok := m.Analyte(a); !ok {
			return in, nil, lab.FieldError(pointer("standards", i, "analyte"), "method %s does not list the analyte %q", m.Name, a)
		}
		k := levelKey{a, string(st.Level)}
		if seen[k] {
			return in, nil, lab.FieldError(pointer("standards", i, "level"), "level %q of %s appears twice; send replicates as several responses of one standard", st.Level, a)
		}
		seen[k] = true
		ck := concKey{a, st.Concentration}
		if other, dup := concAt[ck]; dup {
			return in, nil, lab.FieldError(pointer("standards", i, "concentration"), "levels %q and %q of %s share the concentration %v; send replicates as several responses of one standard", other, st.Level, a, st.Concentration)
		}
		concAt[ck] = string(st.Level)
		if _, ok := points[a]; !ok {
			order = append(order, a)
		}
		for _, y := range st.Responses {
			points[a] = append(points[a], calib.Point{Level: string(st.Level), X: st.Concentration, Y: y})
		}
		in.Standards = append(in.Standards, store.Standard{Analyte: a, Level: string(st.Level),
			Concentration: st.Concentration, Responses: st.Responses})
	}
	if body.Samples != nil {
		type sampleKey struct{ analyte, id string }
		seenSample := map[sampleKey]bool{}
		for i, sm := range *body.Samples {
			a := string(sm.Analyte)
			sk := sampleKey{a, string(sm.ID)}
			if seenSample[sk] {
				return in, nil, lab.FieldError(pointer("samples", i, "id"), "sample %q of %s appears twice; send replicates as several responses of one sample", sm.ID, a)
			}
			seenSample[sk] = true
			if _, ok := m.Analyte(a); !ok {
				return in, nil, lab.FieldError(pointer("samples", i, "analyte"), "method %s does not list the analyte %q", m.Name, a)
			}
			if _, ok := points[a]; !ok {
				return in, nil, lab.FieldError(pointer("samples", i, "analyte"), "the run has no standards for %q to quantify this sample against", a)
			}
			d := 1.0
			if sm.Dilution != nil {
				d = *sm.Dilution
			}
			in.Samples = append(in.Samples, store.Sample{ID: string(sm.ID), Analyte: a, Responses: sm.Responses, Dilution: d})
		}
	}
	opts := m.Options()
	curves := make([]store.CurveInput, 0, len(order))
	for _, a := range order {
		an, _ := m.Analyte(a)
		rep, err := calib.Fit(points[a], opts)
		if err != nil {
			var ie *calib.InputError
			if !errors.As(err, &ie) {
				return in, nil, fmt.Errorf("api: fit %s: %w", a, err)
			}
			rep = calib.FailedReport(points[a], opts, err)
		}
		curves = append(curves, store.CurveInput{Analyte: a, Unit: an.Unit, Report: rep})
	}
	return in, curves, nil
}

// GetRun returns a run as stored.
func (s *Server) GetRun(ctx context.Context, req oapi.GetRunRequestObject) (oapi.GetRunResponseObject, error) {
	r, err := s.db.GetRun(ctx, req.ID.String())
	if err != nil {
		return nil, err
	}
	out := oapi.GetRun200JSONResponse{
		ID: uuidOf(r.ID), Method: r.Method, MethodRevision: r.MethodRevision, Instrument: r.Instrument,
		AcquiredAt: r.AcquiredAt, CreatedAt: r.ReceivedAt, CreatedBy: r.ReceivedBy,
		Format: oapi.RunFormat(r.SourceFormat), Cautions: calib.Cautions(),
		Standards: make([]oapi.Standard, 0, len(r.Standards)),
		Samples:   make([]oapi.RunSample, 0, len(r.Samples)),
		Curves:    make([]oapi.RunCurve, 0, len(r.Curves)),
	}
	if r.Operator != "" {
		out.Operator = &r.Operator
	}
	for _, st := range r.Standards {
		out.Standards = append(out.Standards, oapi.Standard{Analyte: st.Analyte, Level: st.Level,
			Concentration: st.Concentration, Responses: st.Responses})
	}
	for _, sm := range r.Samples {
		out.Samples = append(out.Samples, oapi.RunSample{ID: sm.ID, Analyte: sm.Analyte, Responses: sm.Responses, Dilution: sm.Dilution})
	}
	for _, c := range r.Curves {
		out.Curves = append(out.Curves, oapi.RunCurve{ID: uuidOf(c.ID), Analyte: c.Analyte,
			Verdict: oapi.Verdict(c.Verdict), Status: oapi.CurveStatus(c.Status)})
	}
	return out, nil
}
