package api

// An append-based encoder for the prediction response, the body of
// POST /v1/curves/{id}/predictions and POST /v1/instruments/{instrument}/predictions.
// It writes exactly the bytes that encoding/json's Encoder writes for the
// same value (HTML-safe escaping, encoding/json's float format, the trailing
// newline), without reflection. predict_json_test.go checks the equality
// against encoding/json on random values and under fuzzing.

import (
	"encoding/json"
	"math"
	"net/http"
	"reflect"
	"strconv"
	"sync"
	"unicode/utf8"

	"curvekeeper/api/oapi"
	"curvekeeper/lab"
)

// The encoder below lists the members of these generated types by hand, in
// the order and with the names of their json tags. These conversions stop
// the build when a regeneration adds, removes, renames or retypes a field,
// so that the encoder cannot silently drop one. (Conversions ignore tags; a
// changed tag is caught by the equality tests.)
var (
	_ = struct {
		Analyte      string
		Cautions     oapi.Cautions
		Confidence   float64
		CurveID      oapi.UUID
		CurveStatus  oapi.CurveStatus
		CurveVerdict oapi.Verdict
		Results      []oapi.PredictionResult
		Unit         string
	}(oapi.PredictionResponse{})
	_ = struct {
		Concentration  *float64
		Dilution       float64
		Flags          []oapi.PredictionFlag
		ID             string
		Interval       oapi.Interval
		IntervalMethod string
		MeanResponse   float64
		Readings       int
		StandardError  *float64
		Uncertainty    *oapi.UncertaintyBudget
	}(oapi.PredictionResult{})
	_ = struct {
		Bounded  bool
		High     *float64
		HighOpen *bool
		Level    float64
		Low      *float64
	}(oapi.Interval{})
	_ [16]byte = oapi.UUID{}
)

// appendPredictionJSON appends v as json.NewEncoder(w).Encode(v) writes it,
// newline included. For a NaN or infinite number it returns dst unchanged and
// the error encoding/json returns (a *json.UnsupportedValueError).
func appendPredictionJSON(dst []byte, v *oapi.PredictionResponse) ([]byte, error) {
	start := len(dst)
	b, ok := appendPredictionHead(dst, v)
	if !ok {
		return dst[:start], unsupportedFloat(v.Confidence)
	}
	if v.Results == nil {
		b = append(b, "null"...)
	} else {
		b = append(b, '[')
		for i := range v.Results {
			if i > 0 {
				b = append(b, ',')
			}
			var bad float64
			if b, bad, ok = appendPredictionResult(b, &v.Results[i]); !ok {
				return dst[:start], unsupportedFloat(bad)
			}
		}
		b = append(b, ']')
	}
	return appendPredictionTail(b, v), nil
}

// appendPredictionHead appends v's members before its results' value,
// through `"results":`; false for a confidence that is NaN or infinite.
func appendPredictionHead(b []byte, v *oapi.PredictionResponse) ([]byte, bool) {
	ok := true
	b = append(b, `{"analyte":`...)
	b = appendJSONString(b, v.Analyte)
	b = append(b, `,"cautions":`...)
	b = appendJSONStrings(b, v.Cautions)
	b = append(b, `,"confidence":`...)
	if b, ok = appendJSONFloat(b, v.Confidence); !ok {
		return b, false
	}
	b = append(b, `,"curve_id":`...)
	b = appendJSONUUID(b, v.CurveID)
	b = append(b, `,"curve_status":`...)
	b = appendJSONString(b, string(v.CurveStatus))
	b = append(b, `,"curve_verdict":`...)
	b = appendJSONString(b, string(v.CurveVerdict))
	return append(b, `,"results":`...), true
}

// appendPredictionTail appends v's members after its results, and the
// newline.
func appendPredictionTail(b []byte, v *oapi.PredictionResponse) []byte {
	b = append(b, `,"unit":`...)
	b = appendJSONString(b, v.Unit)
	return append(b, "}\n"...)
}

// appendPredictionResult appends one result; on a NaN or infinity it returns
// false and the offending number.
func appendPredictionResult(b []byte, r *oapi.PredictionResult) ([]byte, float64, bool) {
	b, bad, ok := appendPredictionResultMembers(b, r)
	if !ok {
		return b, bad, false
	}
	if r.Uncertainty != nil {
		b = append(b, `,"uncertainty":`...)
		if b, bad, ok = appendBudgetJSON(b, r.Uncertainty); !ok {
			return b, bad, false
		}
	}
	return append(b, '}'), 0, true
}

// appendPredictionResultMembers appends one result's members but its
// uncertainty, without the closing brace; on a NaN or infinity it returns
// false and the offending number.
func appendPredictionResultMembers(b []byte, r *oapi.PredictionResult) ([]byte, float64, bool) {
	ok := true
	b = append(b, `{"concentration":`...)
	if b, ok = appendJSONFloatPtr(b, r.Concentration); !ok {
		return b, *r.Concentration, false
	}
	b = append(b, `,"dilution":`...)
	if b, ok = appendJSONFloat(b, r.Dilution); !ok {
		return b, r.Dilution, false
	}
	b = append(b, `,"flags":`...)
	b = appendJSONStrings(b, r.Flags)
	b = append(b, `,"id":`...)
	b = appendJSONString(b, r.ID)
	b = append(b, `,"interval":{"bounded":`...)
	b = strconv.AppendBool(b, r.Interval.Bounded)
	b = append(b, `,"high":`...)
	if b, ok = appendJSONFloatPtr(b, r.Interval.High); !ok {
		return b, *r.Interval.High, false
	}
	if r.Interval.HighOpen != nil {
		b = append(b, `,"high_open":`...)
		b = strconv.AppendBool(b, *r.Interval.HighOpen)
	}
	b = append(b, `,"level":`...)
	if b, ok = appendJSONFloat(b, r.Interval.Level); !ok {
		return b, r.Interval.Level, false
	}
	b = append(b, `,"low":`...)
	if b, ok = appendJSONFloatPtr(b, r.Interval.Low); !ok {
		return b, *r.Interval.Low, false
	}
	b = append(b, `},"interval_method":`...)
	b = appendJSONString(b, r.IntervalMethod)
	b = append(b, `,"mean_response":`...)
	if b, ok = appendJSONFloat(b, r.MeanResponse); !ok {
		return b, r.MeanResponse, false
	}
	b = append(b, `,"readings":`...)
	b = strconv.AppendInt(b, int64(r.Readings), 10)
	b = append(b, `,"standard_error":`...)
	if b, ok = appendJSONFloatPtr(b, r.StandardError); !ok {
		return b, *r.StandardError, false
	}
	return b, 0, true
}

// unsupportedFloat is the error encoding/json returns for a NaN or infinity.
func unsupportedFloat(f float64) error {
	return &json.UnsupportedValueError{Value: reflect.ValueOf(f), Str: strconv.FormatFloat(f, 'g', -1, 64)}
}

func appendJSONFloatPtr(b []byte, f *float64) ([]byte, bool) {
	if f == nil {
		return append(b, "null"...), true
	}
	return appendJSONFloat(b, *f)
}

// appendJSONFloat formats f as encoding/json does for a float64: like
// ECMAScript's Number to String, 'f' format unless 0 < |f| < 1e-6 or
// |f| >= 1e21, then 'e' with a one-digit negative exponent unpadded.
// It reports false, appending nothing, for NaN and infinities.
func appendJSONFloat(b []byte, f float64) ([]byte, bool) {
	if math.IsInf(f, 0) || math.IsNaN(f) {
		return b, false
	}
	abs := math.Abs(f)
	format := byte('f')
	if abs != 0 && (abs < 1e-6 || abs >= 1e21) {
		format = 'e'
	}
	b = strconv.AppendFloat(b, f, format, -1, 64)
	if format == 'e' {
		// e-09 → e-9
		n := len(b)
		if n >= 4 && b[n-4] == 'e' && b[n-3] == '-' && b[n-2] == '0' {
			b[n-2] = b[n-1]
			b = b[:n-1]
		}
	}
	return b, true
}

// appendJSONStrings appends a string slice: null when nil, [] when empty.
func appendJSONStrings[S ~string](b []byte, s []S) []byte {
	if s == nil {
		return append(b, "null"...)
	}
	b = append(b, '[')
	for i, x := range s {
		if i > 0 {
			b = append(b, ',')
		}
		b = appendJSONString(b, string(x))
	}
	return append(b, ']')
}

// appendJSONUUID appends the UUID's MarshalText form (lower-case hex,
// 8-4-4-4-12) as a JSON string; none of its characters needs escaping.
func appendJSONUUID(b []byte, u oapi.UUID) []byte {
	const hexDigits = "0123456789abcdef"
	b = append(b, '"')
	for i, x := range u {
		if i == 4 || i == 6 || i == 8 || i == 10 {
			b = append(b, '-')
		}
		b = append(b, hexDigits[x>>4], hexDigits[x&0x0f])
	}
	return append(b, '"')
}

// jsonHTMLSafe marks the ASCII bytes encoding/json writes unescaped when it
// escapes HTML: everything from space up except ", \, <, > and &.
var jsonHTMLSafe = func() (t [utf8.RuneSelf]bool) {
	for c := 0x20; c < utf8.RuneSelf; c++ {
		t[c] = c != '"' && c != '\\' && c != '<' && c != '>' && c != '&'
	}
	return t
}()

// invalidUTF8 is what encoding/json writes for each byte of invalid UTF-8 in
// a string: the escape \ufffd up to Go 1.26, the character U+FFFD itself
// from Go 1.27 (whose encoding/json is built on encoding/json/v2). Both
// decode to the same string; it is asked of the running encoding/json once,
// so the fast path stays byte-identical to it under either toolchain.
var invalidUTF8 = func() string {
	b, err := json.Marshal("\xff")
	if err != nil || len(b) < 2 {
		return `\ufffd`
	}
	return string(b[1 : len(b)-1])
}()

// appendJSONString appends s quoted as encoding/json's Encoder does by
// default: \" \\ \b \f \n \r \t, other control bytes and <, >, & as \u00XX,
// U+2028 and U+2029 as \u2028 and \u2029, and each byte of invalid UTF-8
// as invalidUTF8.
func appendJSONString(b []byte, s string) []byte {
	const hexDigits = "0123456789abcdef"
	b = append(b, '"')
	start := 0
	for i := 0; i < len(s); {
		if c := s[i]; c < utf8.RuneSelf {
			if jsonHTMLSafe[c] {
				i++
				continue
			}
			b = append(b, s[start:i]...)
			switch c {
			case '\\', '"':
				b = append(b, '\\', c)
			case '\b':
				b = append(b, '\\', 'b')
			case '\f':
				b = append(b, '\\', 'f')
			case '\n':
				b = append(b, '\\', 'n')
			case '\r':
				b = append(b, '\\', 'r')
			case '\t':
				b = append(b, '\\', 't')
			default:
				b = append(b, '\\', 'u', '0', '0', hexDigits[c>>4], hexDigits[c&0xf])
			}
			i++
			start = i
			continue
		}
		r, size := utf8.DecodeRuneInString(s[i:])
		if r == utf8.RuneError && size == 1 {
			b = append(b, s[start:i]...)
			b = append(b, invalidUTF8...)
			i++
			start = i
			continue
		}
		if r == '\u2028' || r == '\u2029' {
			b = append(b, s[start:i]...)
			b = append(b, '\\', 'u', '2', '0', '2', hexDigits[r&0xf])
			i += size
			start = i
			continue
		}
		i += size
	}
	b = append(b, s[start:]...)
	return append(b, '"')
}

// predictionBufs holds response buffers between requests. A buffer that
// grew past maxPooledPredictionBuf (a response of some hundred samples) is
// left to the collector rather than kept.
var predictionBufs = sync.Pool{New: func() any {
	b := make([]byte, 0, 8<<10)
	return &b
}}

const maxPooledPredictionBuf = 256 << 10

// predictionJSONResponse is the 200 response of both prediction routes,
// written by appendPredictionJSON, or streamed (begin, addResult, end) as
// predict makes its results. Headers and status are those of the generated
// oapi.CreatePredictions200JSONResponse; as there, nothing is written when
// the value cannot be encoded.
type predictionJSONResponse struct {
	oapi.PredictionResponse
	// body holds the encoded answer, in bodyBuf (from predictionBufs);
	// bodyErr is the first number that could not be encoded.
	body    []byte
	bodyBuf *[]byte
	bodyErr error
	memo    floatMemo
	// pooledFigures, from budgetFigures, holds the plan's figures of one
	// sample after another on the direct path.
	pooledFigures *lab.BudgetFigures
}

// budgetFigures keeps BudgetFigures, with their arrays, between requests.
var budgetFigures = sync.Pool{New: func() any { return new(lab.BudgetFigures) }}

// begin starts the streamed answer: the members before the results. The
// response's other members must be set.
func (r *predictionJSONResponse) begin() {
	r.bodyBuf = predictionBufs.Get().(*[]byte)
	b, ok := appendPredictionHead((*r.bodyBuf)[:0], &r.PredictionResponse)
	if !ok {
		r.bodyErr = unsupportedFloat(r.Confidence)
	}
	r.body = append(b, '[')
}

// addResult appends the last of r.Results to the streamed answer; when the
// result has no Uncertainty member and f holds the figures bp's plan
// computed for it, its budget is written from them (appendPlannedBudgetJSON).
func (r *predictionJSONResponse) addResult(bp *budgetPlan, f *lab.BudgetFigures) {
	if r.bodyErr != nil {
		return
	}
	res := &r.Results[len(r.Results)-1]
	b := r.body
	if len(r.Results) > 1 {
		b = append(b, ',')
	}
	b, bad, ok := appendPredictionResultMembers(b, res)
	switch {
	case !ok:
	case res.Uncertainty != nil:
		b = append(b, `,"uncertainty":`...)
		b, bad, ok = appendBudgetJSON(b, res.Uncertainty)
	case f != nil:
		b = append(b, `,"uncertainty":`...)
		b, bad, ok = appendPlannedBudgetJSON(b, bp.fast, bp.json, f, &r.memo)
	}
	if !ok {
		r.bodyErr = unsupportedFloat(bad)
		return
	}
	r.body = append(b, '}')
}

// end closes the streamed answer.
func (r *predictionJSONResponse) end() {
	if r.bodyErr == nil {
		r.body = appendPredictionTail(append(r.body, ']'), &r.PredictionResponse)
	}
}

// release returns the body's buffer and the figures to their pools.
func (r *predictionJSONResponse) release() {
	if r.bodyBuf != nil && cap(r.body) <= maxPooledPredictionBuf {
		*r.bodyBuf = r.body[:0]
		predictionBufs.Put(r.bodyBuf)
	}
	r.bodyBuf, r.body = nil, nil
	if r.pooledFigures != nil {
		budgetFigures.Put(r.pooledFigures)
		r.pooledFigures = nil
	}
}

func (r *predictionJSONResponse) write(w http.ResponseWriter) error {
	defer r.release()
	if r.bodyBuf == nil {
		bp := predictionBufs.Get().(*[]byte)
		b, err := appendPredictionJSON((*bp)[:0], &r.PredictionResponse)
		r.bodyBuf, r.body, r.bodyErr = bp, b, err
	}
	if r.bodyErr != nil {
		return r.bodyErr
	}
	w.Header().Set("Content-Type", "application/json")
	// A body over net/http's 2 kB response buffer is otherwise sent
	// chunked: the start of it at the first Write and the end chunk when
	// the handler returns, two writes to the socket (and chunked framing
	// for the client to parse) where one does.
	w.Header().Set("Content-Length", strconv.Itoa(len(r.body)))
	w.WriteHeader(200)
	_, err := w.Write(r.body)
	return err
}

func (r *predictionJSONResponse) VisitCreatePredictionsResponse(w http.ResponseWriter) error {
	return r.write(w)
}

func (r *predictionJSONResponse) VisitCreateInstrumentPredictionsResponse(w http.ResponseWriter) error {
	return r.write(w)
}
