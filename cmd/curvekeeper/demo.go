package main

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"time"

	"curvekeeper/api"
	"curvekeeper/lab"
	"curvekeeper/store"
)

// demoCmd loads the invented demo scenario into the service's database
// through the service's own HTTP handlers (so every request is validated and
// audited as an instrument's would be), then prints tokens and commands.
func demoCmd(ctx context.Context, args []string, getenv func(string) string, stdout, stderr io.Writer) error {
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
	db, err := store.Open(ctx, dbase.url)
	if err != nil {
		return fmt.Errorf("cannot reach the database (%s): %s", redactURL(dbase.url), oneLine(err))
	}
	defer db.Close()
	if err := store.MigrateUp(ctx, dbase.url, cfg.MigrateLockWait); err != nil {
		return err
	}
	srv, err := api.New(api.Config{BodyLimit: cfg.BodyLimit, RequestTimeout: cfg.RequestTimeout}, db,
		slog.New(slog.NewJSONHandler(io.Discard, nil)))
	if err != nil {
		return err
	}
	_, adminSecret, err := db.CreateToken(ctx, "demo-admin", []string{lab.ScopeAdmin}, "demo")
	if err != nil {
		return err
	}
	d := &demoClient{h: srv.Handler(), ctx: ctx}
	tokens := map[string]string{"admin": adminSecret}
	for _, t := range []struct{ name, scope string }{
		{"demo-instrument", lab.ScopeRunsWrite}, {"demo-lims", lab.ScopeResultsRead}, {"demo-qa", lab.ScopeCurvesReview},
	} {
		var out struct {
			Token string `json:"token"`
		}
		if err := d.do(adminSecret, http.MethodPost, "/v1/tokens", map[string]any{"name": t.name, "scopes": []string{t.scope}}, &out); err != nil {
			return err
		}
		tokens[t.scope] = out.Token
	}
	for _, m := range demoMethods {
		if err := d.do(adminSecret, http.MethodPost, "/v1/methods", m, nil); err != nil {
			return err
		}
	}

	var existing struct {
		Curves []struct{} `json:"curves"`
	}
	if err := d.do(tokens[lab.ScopeResultsRead], http.MethodGet, "/v1/curves?instrument="+demoICPMS+"&limit=1", nil, &existing); err != nil {
		return err
	}
	loaded := 0
	var lastCurve, badStd, curved string
	lastResp := 0.0
	if len(existing.Curves) == 0 {
		runs := demoRuns(time.Now().UTC())
		for i, r := range runs {
			var created struct {
				Curves []struct {
					ID      string `json:"id"`
					Analyte string `json:"analyte"`
					Verdict string `json:"verdict"`
				} `json:"curves"`
			}
			if err := d.doKey(tokens[lab.ScopeRunsWrite], fmt.Sprintf("demo-run-%03d", i), "/v1/runs", r, &created); err != nil {
				return fmt.Errorf("demo run %d: %w", i, err)
			}
			loaded++
			for _, c := range created.Curves {
				lastCurve = c.ID
				lastResp = demoMidResponse(r, c.Analyte)
				switch {
				case r.Note != "" && strings.HasPrefix(r.Note, "arsenic") && c.Analyte == "As":
					badStd = c.ID
				case r.Note != "" && strings.HasPrefix(r.Note, "nitrate") && curved == "":
					curved = c.ID
				}
				// QA approved the older passing curves; the last week awaits review.
				if c.Verdict == "pass" && r.AcquiredAt.Before(time.Now().AddDate(0, 0, -7)) {
					body := map[string]any{"decision": "approve", "reason": "reviewed in the weekly QA round (demo)"}
					if err := d.do(tokens[lab.ScopeCurvesReview], http.MethodPost, "/v1/curves/"+c.ID+"/review", body, nil); err != nil {
						return err
					}
				}
			}
		}
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
		fmt.Fprintf(w, "The runs were loaded before; only new tokens were issued.\n")
	}
	fmt.Fprintf(w, "\nTokens (shown once; only their hashes are stored):\n")
	fmt.Fprintf(w, "  export ADMIN=%s\n  export INSTRUMENT=%s\n  export LIMS=%s\n  export QA=%s\n",
		tokens[lab.ScopeAdmin], tokens[lab.ScopeRunsWrite], tokens[lab.ScopeResultsRead], tokens[lab.ScopeCurvesReview])
	fmt.Fprintf(w, "\nStart the service (in another terminal) with the same settings, then try:\n")
	fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" '%s/v1/curves?instrument=%s&limit=5'\n", base, demoICPMS)
	if curved != "" {
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/curves/%s     # fails linearity: read its checks\n", base, curved)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/curves/%s/plot.svg -o curved.svg\n", base, curved)
	}
	if badStd != "" {
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" %s/v1/curves/%s     # arsenic with a bad standard\n", base, badStd)
	}
	if lastCurve != "" {
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $LIMS\" -H 'Content-Type: application/json' \\\n"+
			"       -d '{\"samples\":[{\"id\":\"TW-tap-1\",\"responses\":[%.6g,%.6g]}]}' %s/v1/curves/%s/predictions\n",
			lastResp, lastResp*1.01, base, lastCurve)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $QA\" -H 'Content-Type: application/json' \\\n"+
			"       -d '{\"decision\":\"approve\",\"reason\":\"checked\"}' %s/v1/curves/%s/review\n", base, lastCurve)
		fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $QA\" %s/v1/curves/%s/audit\n", base, lastCurve)
	}
	fmt.Fprintf(w, "  curl -s -H \"Authorization: Bearer $INSTRUMENT\" -H 'Content-Type: text/csv' --data-binary @testdata/demo/nitrate-run.csv \\\n"+
		"       '%s/v1/runs?method=%s&instrument=%s&acquired_at=%s'\n", base, demoNitrate, demoUVVis, time.Now().UTC().Format("2006-01-02T15:04:05Z"))
	fmt.Fprintf(w, "\nThese are invented data. Results support, and never replace, the laboratory's accredited procedures;\n"+
		"its accreditation, regulator and method SOP take precedence, and a qualified person reviews results.\n")
	_, err = io.WriteString(stdout, w.String())
	return err
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
