package qaui

import (
	"crypto/hmac"
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/base64"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/labstack/echo/v4"

	"curvekeeper/lab"
)

// The QA pages' cookies. The session cookie holds the session secret (the
// database keeps only its SHA-256); the sign-in cookie holds the random value
// the sign-in form must echo, since there is no session yet to bind the form
// to.
const (
	uiSessionCookie = "ck_session"
	uiSignInCookie  = "ck_signin"
	uiCSRFField     = "csrf_token"
)

// uiSession is the signed-in user of a QA page request.
type uiSession struct {
	Principal   lab.Principal
	PrintedName string // the person's full name, for a session opened with login and password
	secret      string // the cookie's session secret
	CSRF        string // the synchronizer token of this session's forms
}

// IsPerson reports whether a person signed in with login and password.
func (u *uiSession) IsPerson() bool { return u != nil && u.Principal.IsPerson() }

// Login is the signed-in person's login: the session's person, or the
// person who owns the session's token; "" otherwise.
func (u *uiSession) Login() string {
	if u == nil {
		return ""
	}
	login, _ := strings.CutPrefix(u.Principal.Owner, lab.OwnerPerson)
	if login == u.Principal.Owner {
		return ""
	}
	return login
}

// Has reports whether the session's token holds any of scopes.
func (u *uiSession) Has(scopes ...string) bool {
	return u != nil && slices.ContainsFunc(scopes, u.Principal.Has)
}

// CanRead: the scopes of GET /v1/curves and /v1/trends.
func (u *uiSession) CanRead() bool {
	return u.Has(lab.ScopeResultsRead, lab.ScopeCurvesReview, lab.ScopeAdmin)
}

// CanReview: the scopes of POST /v1/curves/{id}/review and the audit trail.
func (u *uiSession) CanReview() bool { return u.Has(lab.ScopeCurvesReview, lab.ScopeAdmin) }

// csrfFor derives the synchronizer token of a session from its secret:
// HMAC-SHA256(secret, label). It is bound to the session (another session,
// or none, gives another token), needs no storage, and cannot be computed by
// a page that does not know the cookie, which is HttpOnly and SameSite=Strict.
func csrfFor(secret string) string {
	m := hmac.New(sha256.New, []byte(secret))
	m.Write([]byte("curvekeeper ui csrf v1"))
	return base64.RawURLEncoding.EncodeToString(m.Sum(nil))
}

// sameToken compares two tokens in constant time.
func sameToken(a, b string) bool {
	return a != "" && subtle.ConstantTimeCompare([]byte(a), []byte(b)) == 1
}

// setCookie sets a cookie of the QA pages: HttpOnly, SameSite=Strict, path
// /ui/, Secure when the request came over TLS. maxAge < 0 deletes it.
func setCookie(c echo.Context, name, value string, maxAge int) {
	c.SetCookie(&http.Cookie{
		Name: name, Value: value, Path: "/ui/", MaxAge: maxAge,
		HttpOnly: true, SameSite: http.SameSiteStrictMode, Secure: c.Request().TLS != nil,
	})
}

// randomToken returns 32 random bytes, base64url.
func randomToken() (string, error) {
	var b [32]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", err
	}
	return base64.RawURLEncoding.EncodeToString(b[:]), nil
}

// sessionOf returns the session the middleware found, nil when signed out.
func sessionOf(c echo.Context) *uiSession {
	u, _ := c.Get("ui_session").(*uiSession)
	return u
}

// uiSessionMiddleware reads the session cookie and, when it names a live
// session, puts the session (with its token's current scopes) on the
// request. It never refuses: pages decide what a visitor without a session
// sees. (Its security headers are set by securityHeadersMiddleware.)
func (s *Pages) uiSessionMiddleware(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		if ck, err := c.Cookie(uiSessionCookie); err == nil && ck.Value != "" && len(ck.Value) <= 256 {
			sess, err := s.Lab.LookupSession(c.Request().Context(), ck.Value)
			switch {
			case err == nil:
				u := &uiSession{secret: ck.Value, CSRF: csrfFor(ck.Value),
					Principal: sess.Token, PrintedName: sess.PrintedName}
				c.Set("ui_session", u)
				req := c.Request()
				c.SetRequest(req.WithContext(s.WithPrincipal(req.Context(), u.Principal)))
			case lab.KindOf(err) == lab.KindNotFound:
				setCookie(c, uiSessionCookie, "", -1) // stale: forget it
			default:
				return err
			}
		}
		return next(c)
	}
}

// requireSession sends a visitor without a session to the sign-in page
// (GET) or refuses the request with 401 (anything else), and refuses a
// session without one of scopes with 403.
func (s *Pages) requireSession(scopes ...string) echo.MiddlewareFunc {
	return func(next echo.HandlerFunc) echo.HandlerFunc {
		return func(c echo.Context) error {
			u := sessionOf(c)
			if u == nil {
				if c.Request().Method == http.MethodGet {
					return c.Redirect(http.StatusSeeOther, "/ui/sign-in?next="+url.QueryEscape(c.Request().URL.RequestURI()))
				}
				return s.Error(c, http.StatusUnauthorized, "You are not signed in, or your session has ended. Sign in again and repeat the action.")
			}
			if len(scopes) > 0 && !u.Has(scopes...) {
				return s.Error(c, http.StatusForbidden, "Your token does not hold any of the scopes this page needs: "+strings.Join(scopes, ", ")+".")
			}
			return next(c)
		}
	}
}

// requireCSRF refuses a form whose synchronizer token is not the session's.
func (s *Pages) requireCSRF(next echo.HandlerFunc) echo.HandlerFunc {
	return func(c echo.Context) error {
		u := sessionOf(c)
		if u == nil || !sameToken(c.FormValue(uiCSRFField), u.CSRF) {
			return s.Error(c, http.StatusForbidden, "The form's security token is missing or does not belong to your session. Reload the page and try again.")
		}
		return next(c)
	}
}

// safeNext returns next when it is a path of the QA pages, else the list.
func safeNext(next string) string {
	if strings.HasPrefix(next, "/ui/") && !strings.HasPrefix(next, "//") && !strings.ContainsAny(next, "\\\r\n") {
		return next
	}
	return "/ui/curves"
}

// signInPage shows the sign-in form, with a fresh form token in a cookie.
func (s *Pages) signInPage(c echo.Context) error {
	if sessionOf(c) != nil {
		return c.Redirect(http.StatusSeeOther, safeNext(c.QueryParam("next")))
	}
	return s.renderSignIn(c, http.StatusOK, "")
}

func (s *Pages) renderSignIn(c echo.Context, status int, problem string) error {
	tok, err := randomToken()
	if err != nil {
		return err
	}
	setCookie(c, uiSignInCookie, tok, 600)
	return s.render(c, status, "signin", pageData{Title: "Sign in", Form: map[string]string{
		"csrf": tok, "next": safeNext(c.QueryParam("next")) + "", "problem": problem,
		"hours": strconv.FormatFloat(s.Lab.People.Session().Hours(), 'g', 4, 64),
	}})
}

// signIn opens a session: a person with login and password (21 CFR
// 11.200(a)(1)(i): the first signing of a session uses both), or an API
// token exchanged for a session cookie. Either session lasts the lab's
// configured length (lab.PeopleConfig.SessionTTL).
func (s *Pages) signIn(c echo.Context) error {
	ck, err := c.Cookie(uiSignInCookie)
	if err != nil || !sameToken(c.FormValue(uiCSRFField), ck.Value) {
		return s.Error(c, http.StatusForbidden, "The sign-in form's security token is missing or expired. Open the sign-in page again.")
	}
	if secs := s.AuthFailureWait(c); secs > 0 {
		return s.Error(c, http.StatusTooManyRequests, "Too many failed sign-ins from this address. Wait "+strconv.Itoa(secs)+" s and try again.")
	}
	ttl := s.Lab.People.Session()
	var secret string
	if login := strings.TrimSpace(c.FormValue("login")); login != "" || c.FormValue("password") != "" {
		secret, _, err = s.Lab.SignInPerson(c.Request().Context(), lab.Credentials{Login: login, Password: c.FormValue("password")})
		if err != nil {
			msg, ok := formProblem(err)
			if !ok {
				return err
			}
			s.AuthFailed(c)
			return s.renderSignIn(c, http.StatusUnauthorized, msg)
		}
	} else {
		token := strings.TrimSpace(c.FormValue("token"))
		if !s.ValidToken(token) {
			return s.renderSignIn(c, http.StatusUnauthorized, "Enter your login and password, or an API token.")
		}
		secret, _, err = s.Lab.SignIn(c.Request().Context(), token, ttl)
		if err != nil {
			if lab.KindOf(err) == lab.KindNotFound {
				s.AuthFailed(c)
				return s.renderSignIn(c, http.StatusUnauthorized, "That token is unknown or revoked.")
			}
			return err
		}
	}
	setCookie(c, uiSignInCookie, "", -1)
	setCookie(c, uiSessionCookie, secret, int(ttl/time.Second))
	return c.Redirect(http.StatusSeeOther, safeNext(c.FormValue("next")))
}

// signOut ends the session.
func (s *Pages) signOut(c echo.Context) error {
	if err := s.Lab.SignOut(c.Request().Context(), sessionOf(c).secret); err != nil {
		return err
	}
	setCookie(c, uiSessionCookie, "", -1)
	return c.Redirect(http.StatusSeeOther, "/ui/sign-in")
}
