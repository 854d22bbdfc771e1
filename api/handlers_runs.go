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
)

// CreateRun stores a run posted by an instrument (JSON or CSV) and fits one
// curve per analyte, all in one transaction. A run whose numbers are valid
// but cannot be fitted is stored too, with a failed curve saying why: the
// instrument's raw data is never thrown away.
func (s *Server) CreateRun(ctx context.Context, req oapi.CreateRunRequestObject) (oapi.CreateRunResponseObject, error) {
	p := mustPrincipal(ctx)
	body, lines, format, hash, err := runBody(req)
	if err != nil {
		return nil, err
	}
	in := runInput(body)
	in.SourceFormat, in.RequestHash = format, hash
	if req.Params.IdempotencyKey != nil {
		in.IdempotencyKey = *req.Params.IdempotencyKey
	}
	// The answer is made and encoded before the run's rows are written
	// (see atomic.go): one that cannot be sent stores nothing.
	in.CheckAnswer = func(c *lab.RunCreated) error {
		if _, err := recordAnswer("CreateRun", runCreatedOut(c)); err != nil {
			return err
		}
		if s.answerFault != nil {
			return s.answerFault("CreateRun")
		}
		return nil
	}
	created, err := s.lab.Ingest(ctx, p, in)
	if err != nil {
		return nil, lines.locate(err) // a CSV run's breaches name its lines
	}
	return runCreatedOut(created), nil
}

// CreateRunCsv is POST /v1/runs/csv: the CSV form of POST /v1/runs as an
// operation of its own, for clients generated from the spec. It is CreateRun
// with the body as text/csv, so the two routes store and replay alike.
func (s *Server) CreateRunCsv(ctx context.Context, req oapi.CreateRunCsvRequestObject) (oapi.CreateRunCsvResponseObject, error) {
	p := req.Params
	resp, err := s.CreateRun(ctx, oapi.CreateRunRequestObject{Body: req.Body, Params: oapi.CreateRunParams{
		IdempotencyKey: p.IdempotencyKey, Method: &p.Method, Instrument: &p.Instrument, AcquiredAt: &p.AcquiredAt, Operator: p.Operator}})
	if err != nil {
		return nil, err
	}
	created, ok := resp.(oapi.CreateRun201JSONResponse)
	if !ok {
		return nil, fmt.Errorf("api: CreateRun answered %T", resp)
	}
	return oapi.CreateRunCsv201JSONResponse{Body: created.Body, Headers: oapi.CreateRunCsv201ResponseHeaders(created.Headers)}, nil
}

func runCreatedOut(c *lab.RunCreated) oapi.CreateRun201JSONResponse {
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

// runBody returns the run as JSON would carry it, whichever format came, the
// CSV lines of its readings (nil for JSON), and the hash that identifies the
// request for idempotent replay.
func runBody(req oapi.CreateRunRequestObject) (*oapi.RunRequest, *csvLines, string, []byte, error) {
	h := sha256.New()
	if req.JSONBody != nil {
		if req.Params.Method != nil || req.Params.Instrument != nil || req.Params.AcquiredAt != nil || req.Params.Operator != nil {
			return nil, nil, "", nil, newProblem(http.StatusBadRequest,
				"the query parameters method, instrument, acquired_at and operator are for text/csv; a JSON run carries them in its body",
				ProblemField{Pointer: "query:method", Detail: "not allowed with application/json"})
		}
		// A time the contract cannot write back is the client's error, named
		// before the canonical form (which writes it) is made.
		if err := lab.CheckTimestamp(lab.InBody, "/acquired_at", req.JSONBody.AcquiredAt.Time); err != nil {
			return nil, nil, "", nil, err
		}
		canon, err := json.Marshal(req.JSONBody) // canonical: the same run hashes the same whatever its spacing
		if err != nil {
			return nil, nil, "", nil, fmt.Errorf("api: hash run: %w", err)
		}
		h.Write([]byte("json\n"))
		h.Write(canon)
		return req.JSONBody, nil, lab.FormatJSON, h.Sum(nil), nil
	}
	if req.Body == nil {
		return nil, nil, "", nil, newProblem(http.StatusUnsupportedMediaType, "send the run as application/json or text/csv")
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
		return nil, nil, "", nil, newProblem(http.StatusBadRequest, "a CSV run needs method, instrument and acquired_at as query parameters", missing...)
	}
	raw, err := io.ReadAll(req.Body)
	if err != nil {
		var mbe *http.MaxBytesError
		if errors.As(err, &mbe) {
			return nil, nil, "", nil, newProblem(http.StatusRequestEntityTooLarge, fmt.Sprintf("the body is over the limit of %d bytes", mbe.Limit))
		}
		return nil, nil, "", nil, fmt.Errorf("api: read CSV body: %w", err)
	}
	standards, samples, lines, err := decodeCSVRunLines(bytes.NewReader(raw))
	if err != nil {
		return nil, nil, "", nil, csvProblem(err)
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
	return run, lines, lab.FormatCSV, h.Sum(nil), nil
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

// runInput is the run as the lab takes it.
func runInput(body *oapi.RunRequest) lab.RunInput {
	in := lab.RunInput{
		Method:     string(body.Method),
		Instrument: string(body.Instrument),
		AcquiredAt: body.AcquiredAt.Time,
		Operator:   deref(body.Operator),
		Standards:  make([]lab.Standard, 0, len(body.Standards)),
		Sequence:   sequenceFrom(body.Sequence),
	}
	for _, st := range body.Standards {
		in.Standards = append(in.Standards, lab.Standard{Analyte: string(st.Analyte), Level: string(st.Level),
			Concentration: st.Concentration, Responses: st.Responses, ISResponses: zeroIfNil(st.IsResponses)})
	}
	if body.StandardMaterials != nil {
		in.Materials = *body.StandardMaterials
	}
	if body.Samples != nil {
		in.Samples = make([]lab.Sample, 0, len(*body.Samples))
		for _, sm := range *body.Samples {
			d := 1.0
			if sm.Dilution != nil {
				d = *sm.Dilution
			}
			in.Samples = append(in.Samples, lab.Sample{ID: string(sm.ID), Analyte: string(sm.Analyte), Responses: sm.Responses, Dilution: d,
				ISResponses: zeroIfNil(sm.IsResponses), Prep: prepFrom(&sm)})
		}
	}
	return in
}

// GetRun returns a run as stored.
func (s *Server) GetRun(ctx context.Context, req oapi.GetRunRequestObject) (oapi.GetRunResponseObject, error) {
	r, _, err := byID(ctx, s, func(rd *lab.Service) (*lab.Run, error) { return rd.GetRun(ctx, req.ID.String()) })
	if err != nil {
		return nil, err
	}
	out := oapi.GetRun200JSONResponse{
		ID: uuidOf(r.ID), Method: r.Method, MethodRevision: r.MethodRevision, Instrument: r.Instrument,
		AcquiredAt: oapi.NewTimestamp(r.AcquiredAt), CreatedAt: oapi.NewTimestamp(r.ReceivedAt), Actor: r.ReceivedBy,
		Format: oapi.RunFormat(r.SourceFormat), Cautions: calib.Cautions(),
		Standards: make([]oapi.Standard, 0, len(r.Standards)),
		Samples:   make([]oapi.RunSample, 0, len(r.Samples)),
		Curves:    make([]oapi.RunCurve, 0, len(r.Curves)),
	}
	if r.Operator != "" {
		out.Operator = &r.Operator
	}
	if len(r.Materials) > 0 {
		out.StandardMaterials = &r.Materials
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
