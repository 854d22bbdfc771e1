package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"slices"
	"strings"
	"time"

	"curvekeeper/api"
	"curvekeeper/calib"
	"curvekeeper/lab"
	"curvekeeper/store"
)

// demoCmd loads the invented demo scenario into the service's database
// through the service's own HTTP handlers (so every request is validated and
// audited as an instrument's would be), then prints tokens and commands. now
// is the clock the scenario's dates, the QA round's cutoff and the printed
// example are taken from: time.Now in the command, a fixed time in tests.
func demoCmd(ctx context.Context, args []string, getenv func(string) string, now func() time.Time, stdout, stderr io.Writer) error {
	cfg, _, err := parseConfig("demo", args, getenv, stderr)
	if err != nil {
		return helpOK(err)
	}
	log := newLogger(cfg, stderr)
	dbase, err := openDatabase(ctx, cfg, log)
	if err != nil {
		return err
	}
	defer dbase.close(log)
	// As the service does: the owner migrates, the demo's requests run as
	// the service's login.
	if err := store.MigrateUp(ctx, dbase.ownerURL, cfg.MigrateLockWait); err != nil {
		return err
	}
	if dbase.separateOwner() {
		if err := dbase.grantLogin(ctx); err != nil {
			return err
		}
	}
	db, err := store.OpenApp(ctx, dbase.url)
	if err != nil {
		return fmt.Errorf("cannot reach the database (%s): %s", redactURL(dbase.url), oneLine(err))
	}
	defer db.Close()
	srv, err := api.New(api.Config{BodyLimit: cfg.BodyLimit, RequestTimeout: cfg.RequestTimeout}, lab.NewService(db, lab.WithClock(now)),
		slog.New(slog.NewJSONHandler(io.Discard, nil)))
	if err != nil {
		return err
	}
	tokens, revoked, err := demoTokens(ctx, db)
	if err != nil {
		return err
	}
	adminSecret := tokens[lab.ScopeAdmin]
	d := &demoClient{h: srv.Handler(), ctx: ctx}
	for _, m := range demoMethods {
		if err := d.do(adminSecret, http.MethodPost, "/v1/methods", m, nil); err != nil {
			return err
		}
	}

	if err := demoRecordMaterials(d, adminSecret, now()); err != nil {
		return err
	}

	var existing struct {
		Curves []struct{} `json:"curves"`
	}
	if err := d.do(tokens[lab.ScopeResultsRead], http.MethodGet, "/v1/curves?instrument="+demoICPMS+"&limit=1", nil, &existing); err != nil {
		return err
	}
	loaded := 0
	if len(existing.Curves) == 0 {
		// QA approved the older passing curves; the last week awaits review.
		cutoff := now().AddDate(0, 0, -7)
		vrng, uvRun := rand.New(rand.NewPCG(demoSeed, 11)), 0
		for i, r := range demoRuns(now()) {
			var created struct {
				Curves []struct {
					ID      string `json:"id"`
					Verdict string `json:"verdict"`
				} `json:"curves"`
			}
			r.StandardMaterials = demoRunMaterials(r)
			if err := d.doKey(tokens[lab.ScopeRunsWrite], fmt.Sprintf("demo-run-%03d", i), "/v1/runs", r, &created); err != nil {
				return fmt.Errorf("demo run %d: %w", i, err)
			}
			loaded++
			// QC standards are measured on the passing nitrate curves (a failed
			// curve is calibrated again, not verified).
			if r.Method == demoNitrate && len(created.Curves) == 1 && created.Curves[0].Verdict == "pass" {
				uvRun++
				for _, v := range demoNitrateVerifications(vrng, r, uvRun) {
					if err := d.do(tokens[lab.ScopeRunsWrite], http.MethodPost, "/v1/curves/"+created.Curves[0].ID+"/verifications", v, nil); err != nil {
						return fmt.Errorf("demo verification: %w", err)
					}
				}
			}
			for _, c := range created.Curves {
				if c.Verdict == "pass" && r.AcquiredAt.Before(cutoff) {
					body := map[string]any{"decision": "approve", "reason": "reviewed in the weekly QA round (demo)"}
					if err := d.do(tokens[lab.ScopeCurvesReview], http.MethodPost, "/v1/curves/"+c.ID+"/review", body, nil); err != nil {
						return err
					}
				}
			}
		}
	}
	picks, err := demoPickCurves(d, tokens[lab.ScopeResultsRead], now)
	if err != nil {
		return err
	}
	immuno, err := loadImmunoDemo(d, tokens, now)
	if err != nil {
		return err
	}
	lcms, err := loadLCMSDemo(d, tokens, now)
	if err != nil {
		return err
	}

	base := "http://" + cfg.Listen
	if strings.HasPrefix(cfg.Listen, ":") {
		base = "http://localhost" + cfg.Listen
	}
	w := &strings.Builder{}
	fmt.Fprintf(w, "Demo scenario: %s, instruments %s (Pb, As) and %s (NO3-N).\n", demoLab, demoICPMS, demoUVVis)
	if loaded > 0 {
		fmt.Fprintf(w, "Loaded %d runs over %d days into %s.\n", loaded, demoDays, dbase.where())
	} else {
		fmt.Fprintf(w, "The runs were loaded before; none were added.\n")
	}
	fmt.Fprintf(w, "\nCurves to look at:\n")
	fmt.Fprintf(w, "  nitrate, fails linearity (Mandel's test):  %s\n", orNone(picks.curved))
	fmt.Fprintf(w, "  arsenic, mis-pipetted standard As-5:       %s\n", orNone(picks.badStd))
	fmt.Fprintf(w, "  lead slope of %s drifting down:  %s/ui/trends?%s\n", demoICPMS, base, demoTrendQuery)

	if len(revoked) > 0 {
		fmt.Fprintf(w, "\nRevoked the %d tokens an earlier demo issued (%s); their secrets no longer work.\n",
			len(revoked), strings.Join(revoked, ", "))
	}
	fmt.Fprintf(w, "\nNew tokens (shown once; only their hashes are stored):\n")
	fmt.Fprintf(w, "  export ADMIN=%s\n  export INSTRUMENT=%s\n  export LIMS=%s\n  export QA=%s\n",
		tokens[lab.ScopeAdmin], tokens[lab.ScopeRunsWrite], tokens[lab.ScopeResultsRead], tokens[lab.ScopeCurvesReview])
	fmt.Fprintf(w, "\nStart the service (in another terminal) with the same settings, then try:\n")
	fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" '%s/v1/curves?instrument=%s&limit=5'\n", base, demoICPMS)
	if picks.curved != "" {
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/curves/%s     # fails linearity: read its checks\n", base, picks.curved)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/curves/%s/plot.svg -o curved.svg\n", base, picks.curved)
	}
	if picks.badStd != "" {
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/curves/%s     # arsenic with a bad standard\n", base, picks.badStd)
	}
	fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" '%s/v1/trends?%s'     # lead slope: Westgard rules\n", base, demoTrendQuery)
	if picks.last != "" {
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" -H 'Content-Type: application/json' \\\n"+
			"       -d '{\"samples\":[{\"id\":\"TW-tap-1\",\"responses\":[%.6g,%.6g]}]}' %s/v1/curves/%s/predictions\n",
			picks.lastResp, picks.lastResp*1.01, base, picks.last)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $QA\" -H 'Content-Type: application/json' \\\n"+
			"       -d '{\"decision\":\"approve\",\"reason\":\"checked\"}' %s/v1/curves/%s/review\n", base, picks.last)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $QA\" %s/v1/curves/%s/audit\n", base, picks.last)
	}
	if picks.nitrate != "" {
		fmt.Fprintf(w, "  # nitrate results with their uncertainty budget and conformity (invented limit %g mg/L, guard band w = U):\n", demoNitrateLimit)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/runs/%s/results\n", base, picks.nitrate)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" -H 'Accept: application/fhir+json' %s/v1/runs/%s/results\n", base, picks.nitrate)
		fmt.Fprintf(w, "  # the nitrate method's top-down uncertainty from its QC history (U is the larger of it and the budget):\n")
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" '%s/v1/methods/%s/top-down?analyte=NO3-N'\n", base, demoNitrate)
	}
	fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $INSTRUMENT\" -H 'Content-Type: text/csv' --data-binary @testdata/demo/nitrate-run.csv \\\n"+
		"       '%s/v1/runs?method=%s&instrument=%s&acquired_at=%s'\n", base, demoNitrate, demoUVVis, now().UTC().Format("2006-01-02T15:04:05Z"))
	immuno.print(w, base)
	lcms.print(w, base)
	fmt.Fprintf(w, "\nThese are invented data. Results support, and never replace, the laboratory's accredited procedures;\n"+
		"its accreditation, regulator and method SOP take precedence, and a qualified person reviews results.\n")
	_, err = io.WriteString(stdout, w.String())
	return err
}

// demoTrendQuery selects the ICP-MS lead slope series on GET /v1/trends and
// the trends page.
const demoTrendQuery = "instrument=" + demoICPMS + "&analyte=Pb&parameter=slope"

func orNone(id string) string {
	if id == "" {
		return "(none found)"
	}
	return id
}

// demoTokenActor is the actor under which demo issues (and revokes) its
// tokens, so that a later demo finds them.
const demoTokenActor = "demo"

// demoRoles are the demo's tokens: one per role.
var demoRoles = []struct{ name, scope string }{
	{"demo-admin", lab.ScopeAdmin}, {"demo-instrument", lab.ScopeRunsWrite},
	{"demo-lims", lab.ScopeResultsRead}, {"demo-qa", lab.ScopeCurvesReview},
}

// demoTokens revokes the live tokens an earlier demo issued and issues one
// new token per role; secrets are shown once, so old ones cannot be printed
// again. It returns the new secrets by scope and the names it revoked.
// Tokens that an earlier version of demo issued through its admin token
// (actor "token:demo-admin:<id>", the API's actor name) are revoked too when
// they carry a demo role's name; other tokens made with $ADMIN are left.
func demoTokens(ctx context.Context, db *store.DB) (map[string]string, []string, error) {
	old, err := db.LiveTokensCreatedBy(ctx, demoTokenActor)
	if err != nil {
		return nil, nil, err
	}
	for _, t := range slices.Clone(old) {
		if t.Name == demoRoles[0].name {
			more, err := db.LiveTokensCreatedBy(ctx, t.Actor())
			if err != nil {
				return nil, nil, err
			}
			old = append(old, more...)
		}
	}
	var revoked []string
	for _, t := range old {
		if !slices.ContainsFunc(demoRoles, func(r struct{ name, scope string }) bool { return r.name == t.Name }) {
			continue
		}
		if err := db.RevokeToken(ctx, t.TokenID, demoTokenActor); err != nil {
			return nil, nil, err
		}
		revoked = append(revoked, t.Name)
	}
	tokens := map[string]string{}
	for _, r := range demoRoles {
		in := lab.TokenInput{Name: r.name, Scopes: []string{r.scope}}
		if r.scope == lab.ScopeRunsWrite {
			in.Instruments = []string{demoICPMS, demoUVVis, demoPlateReader, demoLCMS} // instrument binding
		}
		in, err := lab.CheckTokenInput(in)
		if err != nil {
			return nil, nil, err
		}
		_, secret, err := db.IssueToken(ctx, in, demoTokenActor)
		if err != nil {
			return nil, nil, err
		}
		tokens[r.scope] = secret
	}
	return tokens, revoked, nil
}

// demoPicks are the curves the printed commands point at.
type demoPicks struct {
	curved   string  // the newest nitrate curve failing Mandel's test
	badStd   string  // the newest failing arsenic curve (the mis-pipetted standard)
	last     string  // the newest arsenic curve of the ICP-MS
	lastResp float64 // a response inside its working range
	nitrate  string  // the run of the newest nitrate curve: its results carry budgets
}

// demoPickCurves finds the scenario's curves through the API, so that a
// second demo on loaded data prints the same ids as the first.
func demoPickCurves(d *demoClient, token string, now func() time.Time) (demoPicks, error) {
	type curve struct {
		ID           string   `json:"id"`
		FailedChecks []string `json:"failed_checks"`
	}
	list := func(query string) ([]curve, error) {
		var out struct {
			Curves []curve `json:"curves"`
		}
		err := d.do(token, http.MethodGet, "/v1/curves?"+query, nil, &out)
		return out.Curves, err
	}
	var p demoPicks
	nitrate, err := list("instrument=" + demoUVVis + "&analyte=NO3-N&verdict=fail&limit=20")
	if err != nil {
		return p, err
	}
	for _, c := range nitrate {
		if slices.Contains(c.FailedChecks, calib.CheckMandel) {
			p.curved = c.ID
			break
		}
	}
	arsenic, err := list("instrument=" + demoICPMS + "&analyte=As&verdict=fail&limit=1")
	if err != nil {
		return p, err
	}
	if len(arsenic) > 0 {
		p.badStd = arsenic[0].ID
	}
	var newestNitrate struct {
		Curves []struct {
			RunID string `json:"run_id"`
		} `json:"curves"`
	}
	if err := d.do(token, http.MethodGet, "/v1/curves?instrument="+demoUVVis+"&analyte=NO3-N&limit=1", nil, &newestNitrate); err != nil {
		return p, err
	}
	if len(newestNitrate.Curves) > 0 {
		p.nitrate = newestNitrate.Curves[0].RunID
	}
	newest, err := list("instrument=" + demoICPMS + "&analyte=As&limit=1")
	if err != nil {
		return p, err
	}
	if len(newest) > 0 {
		// The scenario's values do not depend on its dates, so the newest
		// ICP-MS run built now has the responses the loaded one has.
		runs := demoRuns(now())
		for i := len(runs) - 1; i >= 0; i-- {
			if runs[i].Instrument == demoICPMS {
				p.last, p.lastResp = newest[0].ID, demoMidResponse(runs[i], "As")
				break
			}
		}
	}
	return p, nil
}

// demoClient sends requests to the service's handler in process.
type demoClient struct {
	h   http.Handler
	ctx context.Context
}

func (d *demoClient) do(token, method, path string, body, out any) error {
	return d.send(token, method, path, "", body, out)
}

func (d *demoClient) doKey(token, key, path string, body, out any) error {
	return d.send(token, http.MethodPost, path, key, body, out)
}

func (d *demoClient) send(token, method, path, key string, body, out any) error {
	var rd io.Reader
	if body != nil {
		b, err := json.Marshal(body)
		if err != nil {
			return err
		}
		rd = bytes.NewReader(b)
	}
	req := httptest.NewRequestWithContext(d.ctx, method, path, rd)
	req.Header.Set("Authorization", "Bearer "+token)
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	if key != "" {
		req.Header.Set("Idempotency-Key", key)
	}
	rec := httptest.NewRecorder()
	d.h.ServeHTTP(rec, req)
	if rec.Code >= 300 {
		return fmt.Errorf("%s %s: %d %s", method, path, rec.Code, strings.TrimSpace(rec.Body.String()))
	}
	if out != nil {
		return json.Unmarshal(rec.Body.Bytes(), out)
	}
	return nil
}
