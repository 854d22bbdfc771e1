package qaui

import (
	"bytes"
	"embed"
	"encoding/json"
	"errors"
	"fmt"
	"html/template"
	"io/fs"
	"math"
	"net/http"
	"net/url"
	"sort"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"curvekeeper/api/curveplot"
	"curvekeeper/calib"
	"curvekeeper/lab"
)

// The QA pages are server-rendered with html/template from embedded files;
// they need no JavaScript and no front-end build.
//
//go:embed ui/*.html ui/*.css
var uiFiles embed.FS

// uiPages are the page templates, each parsed with the layout.
var uiPages = func() map[string]*template.Template {
	funcs := template.FuncMap{
		"g4":         g4,
		"g6":         func(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) },
		"g3":         func(v float64) string { return sigFig(v, 3) },
		"num":        func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }, // a setting, as given
		"pct100":     func(v float64) string { return strconv.FormatFloat(100*v, 'f', 1, 64) },
		"pct2":       func(v float64) string { return strconv.FormatFloat(100*v, 'f', 2, 64) },
		"pct":        func(v float64) string { return strconv.FormatFloat(v, 'f', 1, 64) },
		"rfPct":      func(rf, mean float64) float64 { return 100 * rf / mean }, // an RF as a percentage of RF̄
		"abs":        math.Abs,
		"slug":       func(s string) string { return strings.ReplaceAll(s, " ", "-") },
		"when":       func(t time.Time) string { return t.UTC().Format("2006-01-02 15:04:05 UTC") },
		"day":        func(t time.Time) string { return t.UTC().Format("2006-01-02") },
		"statusWord": statusWord,
		"short":      func(id string) string { return id[:min(8, len(id))] },
		"ruleSource": calib.RuleSource,
		"join":       strings.Join,
		"query":      func(v url.Values) template.URL { return template.URL(v.Encode()) },
	}
	pages := map[string]*template.Template{}
	names, err := fs.Glob(uiFiles, "ui/*.html")
	if err != nil {
		panic(err)
	}
	for _, n := range names {
		base := strings.TrimSuffix(strings.TrimPrefix(n, "ui/"), ".html")
		if base == "layout" {
			continue
		}
		pages[base] = template.Must(template.New("layout.html").Funcs(funcs).ParseFS(uiFiles, "ui/layout.html", n))
	}
	return pages
}()

// statusWord names a review status for people.
func statusWord(s string) string {
	switch s {
	case lab.StatusPendingReview:
		return "Pending review"
	case lab.StatusApproved:
		return "Approved"
	case lab.StatusRejected:
		return "Rejected"
	}
	return s
}

// pageData is what every page template gets.
type pageData struct {
	Title    string
	Nav      string // "curves" or "trends"
	Session  *uiSession
	Cautions []string
	Form     map[string]string
	Status   int
	Message  string
	Data     any
}

// render writes page name with data, always with the cautions.
func (s *Pages) render(c echo.Context, status int, name string, d pageData) error {
	t, ok := uiPages[name]
	if !ok {
		return fmt.Errorf("qaui: no page template %q", name)
	}
	d.Session = sessionOf(c)
	d.Cautions = calib.Cautions()
	d.Status = status
	var buf bytes.Buffer
	if err := t.Execute(&buf, d); err != nil {
		return fmt.Errorf("qaui: render %s: %w", name, err)
	}
	return c.HTMLBlob(status, buf.Bytes())
}

// Error renders an error page with the status and a message for people.
func (s *Pages) Error(c echo.Context, status int, msg string) error {
	return s.render(c, status, "error", pageData{Title: http.StatusText(status), Message: msg})
}

// Fail renders errors of the QA pages as pages, not problems: a
// store error by its kind, anything else as an internal error whose cause
// goes to the log only.
func (s *Pages) Fail(c echo.Context, err error) error {
	status := s.Status(err)
	if status == 0 {
		status = http.StatusInternalServerError
	}
	msg := "Something went wrong on our side; the error is logged with request id " + s.RequestID(c) + "."
	var se *lab.Error
	switch {
	case status == http.StatusServiceUnavailable:
		msg = "The database cannot be reached just now. Try again in a moment."
	case status < 500 && errors.As(err, &se):
		msg = se.Message
	case status == http.StatusNotFound:
		msg = "There is no such page."
	case status < 500:
		msg = "The request was refused: " + http.StatusText(status) + "."
	case status >= 500:
		s.Log.Error("ui request failed", "request_id", s.RequestID(c), "error", err.Error())
	}
	return s.Error(c, status, msg)
}

// StylePath is where the style sheet is served (cached: see
// securityHeaders).
const StylePath = "/ui/style.css"

// uiStyle serves the style sheet.
func (s *Pages) uiStyle(c echo.Context) error {
	b, err := uiFiles.ReadFile("ui/style.css")
	if err != nil {
		return err
	}
	return c.Blob(http.StatusOK, "text/css; charset=utf-8", b)
}

// Register adds the QA pages under /ui/.
func (s *Pages) Register(e *echo.Echo) {
	read := s.requireSession(lab.ScopeResultsRead, lab.ScopeCurvesReview, lab.ScopeAdmin)
	review := s.requireSession(lab.ScopeCurvesReview, lab.ScopeAdmin)
	g := e.Group("/ui", s.uiSessionMiddleware)
	g.GET("", func(c echo.Context) error { return c.Redirect(http.StatusSeeOther, "/ui/curves") })
	g.GET("/", func(c echo.Context) error { return c.Redirect(http.StatusSeeOther, "/ui/curves") })
	g.GET(strings.TrimPrefix(StylePath, "/ui"), s.uiStyle)
	g.GET("/sign-in", s.signInPage)
	g.POST("/sign-in", s.signIn)
	g.POST("/sign-out", s.signOut, s.requireSession(), s.requireCSRF)
	g.GET("/curves", s.uiCurveList, read)
	g.GET("/curves/:id", s.uiCurvePage, read)
	g.GET("/curves/:id/plot.svg", s.uiCurvePlot, read)
	g.POST("/curves/:id/review", s.uiReview, review, s.requireCSRF)
	g.POST("/curves/:id/sign", s.uiSign, review, s.requireCSRF)
	g.POST("/curves/:id/exclusions", s.uiExclude, review, s.requireCSRF)
	g.GET("/trends", s.uiTrendPage, read)
	g.GET("/trends/plot.svg", s.uiTrendPlot, read)
}

// listView is the curve list page.
type listView struct {
	Filter     url.Values
	Curves     []lab.CurveSummary
	NextCursor string
	First      bool
	Problem    string
	Statuses   []string
}

// parseDay reads a date input (YYYY-MM-DD, UTC); end adds a day, so that a
// "to" date includes that whole day.
func parseDay(v string, end bool) (time.Time, error) {
	if v == "" {
		return time.Time{}, nil
	}
	t, err := time.Parse("2006-01-02", v)
	if err != nil {
		return time.Time{}, fmt.Errorf("%q is not a date (YYYY-MM-DD)", v)
	}
	if end {
		t = t.AddDate(0, 0, 1)
	}
	return t, nil
}

func (s *Pages) uiCurveList(c echo.Context) error {
	q := c.QueryParams()
	v := listView{Filter: url.Values{}, First: q.Get("cursor") == "",
		Statuses: []string{lab.StatusPendingReview, lab.StatusApproved, lab.StatusRejected}}
	for _, k := range []string{"instrument", "analyte", "status", "verdict", "from", "to", "limit"} {
		if x := strings.TrimSpace(q.Get(k)); x != "" {
			v.Filter.Set(k, x)
		}
	}
	f := lab.CurveFilter{Instrument: v.Filter.Get("instrument"), Analyte: v.Filter.Get("analyte"),
		Status: v.Filter.Get("status"), Verdict: v.Filter.Get("verdict"), Cursor: q.Get("cursor"), Limit: 25}
	if l := v.Filter.Get("limit"); l != "" {
		n, err := strconv.Atoi(l)
		if err != nil || n < 1 || n > 100 {
			v.Problem = "Page size must be a whole number from 1 to 100."
		}
		f.Limit = n
	}
	var err error
	if f.From, err = parseDay(v.Filter.Get("from"), false); err != nil {
		v.Problem = "From: " + err.Error()
	}
	if f.To, err = parseDay(v.Filter.Get("to"), true); err != nil {
		v.Problem = "To: " + err.Error()
	}
	status := http.StatusOK
	if v.Problem == "" {
		page, err := s.Reading(c.Request().Context()).ListCurves(c.Request().Context(), f)
		switch {
		case lab.KindOf(err) == lab.KindInvalid:
			var se *lab.Error
			errors.As(err, &se)
			v.Problem = se.Message
		case err != nil:
			return s.Fail(c, err)
		default:
			v.Curves, v.NextCursor = page.Curves, page.NextCursor
		}
	}
	if v.Problem != "" {
		status = http.StatusBadRequest
	}
	return s.render(c, status, "curves", pageData{Title: "Curves", Nav: "curves", Data: v})
}

// curveView is the curve page.
type curveView struct {
	Curve     *lab.Curve
	Alt       string
	Equation  string
	Audit     []auditRow
	Checks    []checkRow
	Failed    []checkRow
	TrendLink template.URL
	Done      string
	Problem   string
	Reason    string
	Signing   signingView
	// Context is what the reviewer decides on besides the fit (curvecontext.go).
	Context                       *curveContext
	ExcludeProblem, ExcludeReason string
	Excluded                      bool // the page follows an exclusion made from it
}

type auditRow struct {
	At             time.Time
	Who, TokenID   string // the actor: a token's name and id, or the raw actor
	Action, Entity string
	Pairs          []auditPair
}

type auditPair struct{ K, V string }

// auditRowOf renders an audit event for people: the actor's token name, the
// entity, and the recorded facts one per line, keys sorted.
func auditRowOf(e lab.AuditEvent) auditRow {
	r := auditRow{At: e.At, Who: e.Actor, Action: e.Action, Entity: e.EntityType + " " + e.EntityID}
	if parts := strings.SplitN(e.Actor, ":", 3); len(parts) == 3 && parts[0] == "token" {
		r.Who, r.TokenID = parts[1], parts[2]
	}
	var facts map[string]any
	if json.Unmarshal(e.Detail, &facts) == nil {
		keys := make([]string, 0, len(facts))
		for k := range facts {
			keys = append(keys, k)
		}
		sort.Strings(keys)
		for _, k := range keys {
			var v string
			switch x := facts[k].(type) {
			case string:
				v = x
			default:
				b, _ := json.Marshal(x)
				v = string(b)
			}
			r.Pairs = append(r.Pairs, auditPair{K: k, V: v})
		}
	}
	return r
}

type checkRow struct {
	calib.Check
	Result string // "Pass", "Fail" or "Not computed"
}

func checkRows(r *calib.Report) []checkRow {
	rows := make([]checkRow, 0, len(r.Checks))
	for _, ch := range r.Checks {
		res := "Pass"
		switch {
		case !ch.Computed:
			res = "Not computed"
		case !ch.Passed:
			res = "Fail"
		}
		rows = append(rows, checkRow{Check: ch, Result: res})
	}
	return rows
}

func (s *Pages) curveView(c echo.Context, id string) (*curveView, error) {
	ctx := c.Request().Context()
	cv, err := s.Curve(ctx, id)
	if err != nil {
		return nil, err
	}
	v := &curveView{Curve: cv, Alt: curveplot.AltText(cv.Report, cv.Analyte, cv.Unit), Checks: checkRows(cv.Report)}
	for _, ch := range v.Checks {
		if ch.Result != "Pass" {
			v.Failed = append(v.Failed, ch)
		}
	}
	v.Equation = equationText(cv.Report)
	if v.Context, err = s.contextOf(ctx, cv); err != nil {
		return nil, err
	}
	if v.Signing, err = s.signingViewOf(c, cv.ID); err != nil {
		return nil, err
	}
	tq := url.Values{"instrument": {cv.Instrument}, "analyte": {cv.Analyte}, "parameter": {trendParamOf(cv.Model)}}
	v.TrendLink = template.URL("/ui/trends?" + tq.Encode())
	if sessionOf(c).CanReview() {
		events, err := s.Audit(ctx, id)
		if err != nil {
			return nil, err
		}
		for _, e := range events {
			v.Audit = append(v.Audit, auditRowOf(e))
		}
	}
	return v, nil
}

// equationText writes the fitted equation with 6 significant digits.
func equationText(r *calib.Report) string {
	if r.Curve != nil {
		return curveEquationText(r)
	}
	b, ok := r.Slope()
	if !ok {
		return "no fit"
	}
	g := func(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }
	switch r.Model {
	case calib.AverageRF:
		return "y = RF̄·x, RF̄ = " + g(b) + " (average response factor)"
	case calib.LinearOrigin:
		return "y = " + g(b) + "·x"
	case calib.Quadratic:
		return "y = " + g(r.Coefficients[0]) + " + " + g(b) + "·x + " + g(r.Coefficients[2]) + "·x²"
	}
	return "y = " + g(r.Coefficients[0]) + " + " + g(b) + "·x"
}

func (s *Pages) uiCurvePage(c echo.Context) error {
	return s.renderCurve(c, c.Param("id"), func(v *curveView) int {
		v.Done = map[string]string{"approve": "approved", "reject": "rejected"}[c.QueryParam("reviewed")]
		v.Excluded = c.QueryParam("excluded") == "1"
		return http.StatusOK
	})
}

// renderCurve renders the curve page of id; set fills what the request
// adds to the view (a form's refusal, a done message) and returns the
// status to answer with.
func (s *Pages) renderCurve(c echo.Context, id string, set func(v *curveView) int) error {
	v, err := s.curveView(c, id)
	if err != nil {
		return s.Fail(c, err)
	}
	status := set(v)
	return s.render(c, status, "curve", pageData{Title: v.Curve.Instrument + " · " + v.Curve.Analyte, Nav: "curves", Data: v})
}

func (s *Pages) uiCurvePlot(c echo.Context) error {
	b, err := s.Plot(c.Request().Context(), c.Param("id"))
	if err != nil {
		return s.Fail(c, err)
	}
	return c.Blob(http.StatusOK, "image/svg+xml", b)
}

// uiReview approves or rejects a curve from its page; the reason is required.
func (s *Pages) uiReview(c echo.Context) error {
	id := c.Param("id")
	decision := c.FormValue("decision")
	reason := strings.TrimSpace(c.FormValue("reason"))
	problem := ""
	switch {
	case decision != lab.DecisionApprove && decision != lab.DecisionReject:
		problem = "Choose approve or reject."
	case reason == "":
		problem = "Give the reason for your decision; it is recorded in the audit trail."
	case len(reason) > 2000:
		problem = "The reason is longer than 2,000 characters."
	}
	if problem == "" {
		_, err := s.Lab.Review(c.Request().Context(), sessionOf(c).Principal, id, decision, reason)
		s.Reviewed(id)
		if err == nil {
			return c.Redirect(http.StatusSeeOther, "/ui/curves/"+url.PathEscape(id)+"?reviewed="+decision)
		}
		msg, ok := formProblem(err)
		if !ok {
			return s.Fail(c, err)
		}
		problem = msg
	}
	return s.renderCurve(c, id, func(v *curveView) int {
		v.Problem, v.Reason = problem, reason
		if v.Curve.Status != lab.StatusPendingReview {
			return http.StatusConflict
		}
		return http.StatusUnprocessableEntity
	})
}

// trendView is the trend page.
type trendView struct {
	Query    url.Values
	Subjects []lab.TrendSubject
	Trend    *lab.Trend
	Params   []string
	Alt      string
	PlotURL  template.URL
	Rows     []trendRow
	Problem  string
}

type trendRow struct {
	lab.TrendPoint
	Z    float64
	HasZ bool
}

// trendQueryFrom reads the trend page's query parameters.
func trendQueryFrom(q url.Values) (lab.TrendQuery, url.Values, string) {
	keep := url.Values{}
	for _, k := range []string{"instrument", "analyte", "parameter", "from", "to", "baseline"} {
		if x := strings.TrimSpace(q.Get(k)); x != "" {
			keep.Set(k, x)
		}
	}
	tq := lab.TrendQuery{Instrument: keep.Get("instrument"), Analyte: keep.Get("analyte"), Parameter: keep.Get("parameter")}
	if tq.Parameter == "" {
		tq.Parameter = lab.ParamSlope
	}
	valid := false
	for _, p := range lab.TrendParameters {
		valid = valid || p == tq.Parameter
	}
	if !valid {
		return tq, keep, "Unknown parameter " + strconv.Quote(tq.Parameter) + "."
	}
	var err error
	if tq.From, err = parseDay(keep.Get("from"), false); err != nil {
		return tq, keep, "From: " + err.Error()
	}
	if tq.To, err = parseDay(keep.Get("to"), true); err != nil {
		return tq, keep, "To: " + err.Error()
	}
	if b := keep.Get("baseline"); b != "" {
		n, err := strconv.Atoi(b)
		if err != nil || n < 2 || n > 200 {
			return tq, keep, "Baseline must be a whole number of curves from 2 to 200."
		}
		tq.BaselineN = n
	}
	return tq, keep, ""
}

func (s *Pages) uiTrendPage(c echo.Context) error {
	ctx := c.Request().Context()
	tq, keep, problem := trendQueryFrom(c.QueryParams())
	v := trendView{Query: keep, Params: lab.TrendParameters, Problem: problem}
	rd := s.Reading(ctx)
	subjects, err := rd.TrendSubjects(ctx)
	if err != nil {
		return s.Fail(c, err)
	}
	v.Subjects = subjects
	status := http.StatusOK
	if problem != "" {
		status = http.StatusBadRequest
	} else if tq.Instrument != "" && tq.Analyte != "" {
		t, err := rd.Trend(ctx, tq)
		if err != nil {
			return s.Fail(c, err)
		}
		v.Trend, v.Alt = t, trendAltText(t)
		v.PlotURL = template.URL("/ui/trends/plot.svg?" + keep.Encode())
		for _, p := range t.Points {
			r := trendRow{TrendPoint: p}
			if t.HasBaseline && p.HasValue {
				r.Z, r.HasZ = t.Baseline.Z(p.Value), true
				if math.IsNaN(r.Z) || math.IsInf(r.Z, 0) {
					r.HasZ = false
				}
			}
			v.Rows = append(v.Rows, r)
		}
	}
	title := "Trends"
	if v.Trend != nil {
		title = "Trend · " + tq.Instrument + " · " + tq.Analyte
	}
	return s.render(c, status, "trend", pageData{Title: title, Nav: "trends", Data: v})
}

func (s *Pages) uiTrendPlot(c echo.Context) error {
	tq, _, problem := trendQueryFrom(c.QueryParams())
	if problem != "" || tq.Instrument == "" || tq.Analyte == "" {
		return s.Error(c, http.StatusBadRequest, "Name an instrument and an analyte. "+problem)
	}
	t, err := s.Reading(c.Request().Context()).Trend(c.Request().Context(), tq)
	if err != nil {
		return s.Fail(c, err)
	}
	b, err := s.TrendChart(t)
	if err != nil {
		return s.Fail(c, err)
	}
	return c.Blob(http.StatusOK, "image/svg+xml", b)
}

// trendAltText describes the control chart of t in words.
func trendAltText(t *lab.Trend) string {
	evaluated := 0
	for _, p := range t.Points {
		if p.Evaluated {
			evaluated++
		}
	}
	txt := fmt.Sprintf("Control chart of the %s of %s on %s: %d curve value(s) in time order.", t.Query.Parameter, t.Query.Analyte, t.Query.Instrument, evaluated)
	if !t.HasBaseline {
		return txt + " No baseline, so no control limits are drawn. " + curveplot.Footer
	}
	l := t.Baseline.Limits()
	txt += fmt.Sprintf(" Centre line %s (mean of %d approved curves), warning limits %s to %s (±2 SD), action limits %s to %s (±3 SD).",
		g4(l.Centre), t.Baseline.N, g4(l.WarningLow), g4(l.WarningHigh), g4(l.ActionLow), g4(l.ActionHigh))
	reject, warn := 0, 0
	for _, v := range t.Violations {
		if v.Reject {
			reject++
		} else {
			warn++
		}
	}
	if reject+warn == 0 {
		txt += " No control rule is violated."
	} else {
		txt += fmt.Sprintf(" %d reject-rule violation(s) and %d warning(s), marked as squares and listed below the chart.", reject, warn)
	}
	return txt + " " + curveplot.Footer
}

func g4(v float64) string { return sigFig(v, 4) }

// sigFig writes v to n significant figures as a person reads a number on a
// page: in plain decimals (16240, 0.004361), never in e-notation between
// 1e-6 and 1e12; outside that range, and for NaN and infinities, as Go's %g
// does. The JSON keeps full precision.
func sigFig(v float64, n int) string {
	a := math.Abs(v)
	if v == 0 || math.IsNaN(v) || math.IsInf(v, 0) || a < 1e-6 || a >= 1e12 {
		return strconv.FormatFloat(v, 'g', n, 64)
	}
	// Round first: 9.9996 to 4 figures is 10.00, whose exponent is one more.
	r, _ := strconv.ParseFloat(strconv.FormatFloat(v, 'e', n-1, 64), 64)
	exp := int(math.Floor(math.Log10(math.Abs(r))))
	if dec := n - 1 - exp; dec > 0 {
		return strconv.FormatFloat(r, 'f', dec, 64)
	}
	return strconv.FormatFloat(r, 'f', 0, 64)
}

// curveEquationText writes a non-linear curve's equation and its named
// parameters (6 significant digits) and, for power_of_mean or 1/s², θ.
func curveEquationText(r *calib.Report) string {
	names := calib.ParameterNames(r.Model)
	if len(r.Coefficients) != len(names) {
		return "no fit (" + r.Curve.Outcome + ")"
	}
	var sb strings.Builder
	sb.WriteString(calib.Equation(r.Model))
	for i, n := range names {
		sep := "; "
		if i > 0 {
			sep = ", "
		}
		sb.WriteString(sep + n + " = " + strconv.FormatFloat(r.Coefficients[i], 'g', 6, 64))
	}
	if r.Weighting == calib.WeightVarPower || r.Weighting == calib.WeightInvS2 {
		sb.WriteString("; θ = " + strconv.FormatFloat(r.Curve.Theta, 'g', 4, 64))
	}
	return sb.String()
}

// formProblem is the message a form shows again for err, the caller's own
// mistake (a rule, a conflict, a refused password); false for an error the
// page cannot help with (internal, unavailable, not found), which Fail answers.
func formProblem(err error) (string, bool) {
	var se *lab.Error
	if !errors.As(err, &se) || se.Kind == lab.KindInternal || se.Kind == lab.KindUnavailable || se.Kind == lab.KindNotFound {
		return "", false
	}
	return se.Message, true
}

// trendParamOf is the parameter a curve page's trend link follows: the
// slope of a straight line or quadratic, a logistic's inflection c (its
// EC50 for the 4PL), another non-linear model's a.
func trendParamOf(m calib.Model) string {
	switch {
	case m == calib.FourPL || m == calib.FivePL:
		return lab.ParamC
	case calib.IsCurveModel(m):
		return lab.ParamA
	}
	return lab.ParamSlope
}
