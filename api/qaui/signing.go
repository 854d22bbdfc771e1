package qaui

import (
	"encoding/hex"
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
	ContentSHA256 string // hex SHA-256 of the canonical content signed
}

func (s *Pages) signingViewOf(c echo.Context, id string) (signingView, error) {
	sigs, valid, err := s.Lab.CurveSignatures(c.Request().Context(), id)
	if err != nil {
		return signingView{}, err
	}
	v := signingView{Signed: c.QueryParam("signed") != ""}
	v.Login = sessionOf(c).Login()
	for i := range sigs {
		v.Signatures = append(v.Signatures, signatureRow{Manifestation: sigs[i].Manifestation(), Decision: sigs[i].Decision,
			Reason: sigs[i].Reason, Matches: valid[i], Withdrawn: sigs[i].WithdrawnAt != nil, ID: sigs[i].ID,
			ContentSHA256: hex.EncodeToString(sigs[i].ContentHash)})
	}
	return v, nil
}

// uiSign signs a curve from its page: the password is typed again at every
// signature (and the login too in a token's session).
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
		// A person signed in with login and password signs as that person
		// alone (21 CFR 11.200(a)(1)(i): later signings of the session
		// need at least the password); a token's session names the signer.
		login := strings.TrimSpace(c.FormValue("login"))
		if u := sessionOf(c); u.IsPerson() {
			login = u.Login()
		}
		creds := lab.Credentials{Login: login, Password: c.FormValue("password")}
		var err error
		switch meaning {
		case lab.SubjectExclusion, lab.SubjectRelease: // responsibility for what the radio names
			_, err = s.Lab.SignRecord(c.Request().Context(), sessionOf(c).Principal, id, meaning, creds, reason)
		default:
			_, err = s.Lab.SignCurve(c.Request().Context(), sessionOf(c).Principal, id, creds, meaning, decision, reason)
		}
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
	return s.renderCurve(c, id, func(v *curveView) int {
		v.Signing.Problem, v.Reason = problem, reason
		return http.StatusUnprocessableEntity
	})
}
