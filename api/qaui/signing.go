package qaui

import (
	"net/http"
	"net/url"
	"strings"

	"github.com/labstack/echo/v4"

	"curvekeeper/lab"
)

// signingView is the signatures section of a curve page: every signature's
// manifestation (printed name, meaning, UTC and the lab's time) and the
// signing form.
type signingView struct {
	Signatures []signatureRow
	Login      string // the signed-in person's login, when the token is a person's
	Problem    string
	Signed     bool
}

type signatureRow struct {
	Manifestation string
	Decision      string
	Reason        string
	Matches       bool
	Withdrawn     bool
	ID            string
}

func (s *Pages) signingViewOf(c echo.Context, id string) (signingView, error) {
	sigs, valid, err := s.Lab.CurveSignatures(c.Request().Context(), id)
	if err != nil {
		return signingView{}, err
	}
	v := signingView{Signed: c.QueryParam("signed") != ""}
	if login, ok := strings.CutPrefix(sessionOf(c).Principal.Owner, lab.OwnerPerson); ok {
		v.Login = login
	}
	for i := range sigs {
		v.Signatures = append(v.Signatures, signatureRow{Manifestation: sigs[i].Manifestation(), Decision: sigs[i].Decision,
			Reason: sigs[i].Reason, Matches: valid[i], Withdrawn: sigs[i].WithdrawnAt != nil, ID: sigs[i].ID})
	}
	return v, nil
}

// uiSign signs a curve from its page: the person types login and password
// again at every signature.
func (s *Pages) uiSign(c echo.Context) error {
	id := c.Param("id")
	meaning, decision := c.FormValue("meaning"), c.FormValue("decision")
	if meaning == lab.MeaningReview {
		decision = ""
	}
	reason := strings.TrimSpace(c.FormValue("reason"))
	problem := ""
	if len(reason) > 2000 {
		problem = "The reason is longer than 2,000 characters."
	} else {
		_, err := s.Lab.SignCurve(c.Request().Context(), sessionOf(c).Principal, id,
			lab.Credentials{Login: strings.TrimSpace(c.FormValue("login")), Password: c.FormValue("password")}, meaning, decision, reason)
		s.Reviewed(id)
		if err == nil {
			return c.Redirect(http.StatusSeeOther, "/ui/curves/"+url.PathEscape(id)+"?signed=1#signatures-h")
		}
		msg, ok := formProblem(err)
		if !ok {
			return s.Fail(c, err)
		}
		problem = msg
	}
	v, err := s.curveView(c, id)
	if err != nil {
		return s.Fail(c, err)
	}
	v.Signing.Problem, v.Reason = problem, reason
	return s.render(c, http.StatusUnprocessableEntity, "curve", pageData{Title: v.Curve.Instrument + " · " + v.Curve.Analyte, Nav: "curves", Data: v})
}
