package api_test

import (
	"encoding/json"
	"flag"
	"fmt"
	"math"
	"net/http"
	"net/url"
	"reflect"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"
	"unicode"

	"pgregory.net/rapid"

	"curvekeeper/api"
	"curvekeeper/api/oapi"
)

// TestEveryAcceptedWriteReadsBack is the property: whatever a write route
// answers with 2xx reads back with 200 through its GET, what is read back is
// what was answered, and it carries what was posted (times as the same
// instant, to the microsecond the contract keeps). Bodies are drawn by
// pgregory.net/rapid from generators that keep to the spec's schemas
// (identifiers, Unicode free text, numbers across their ranges, RFC 3339
// times in any offset with 0 to 9 fractional digits and T and Z in either
// case); a failure shrinks to the smallest body that breaks the property.
// Each route runs readbackChecks cases unless -rapid.checks says otherwise.
func TestEveryAcceptedWriteReadsBack(t *testing.T) {
	t.Parallel()
	limitRapidChecks(t)
	e := newEnvConfig(t, api.Config{AuthFailureBurst: -1, RateLimit: -1})
	routeFixtures(t, e) // the method nitrate-uv and the person matrix-qa
	_, poster := e.token(t, "readback-instrument", "runs:write")
	n := 0
	uniq := func(s string) string { n++; return fmt.Sprintf("%s-%d", s, n) }
	accepted := map[string]int{} // cases answered 2xx, by route

	// a fresh run of generated content, posted by the instrument token, so
	// that the admin may review and sign its curve.
	postRun := func(rt *rapid.T) (map[string]any, oapi.RunCreated) {
		body := genRun(rt, uniq)
		fitRun(rt, body)
		r := e.postJSON(t, poster, "/v1/runs", body)
		if r.status != http.StatusCreated {
			rt.Fatalf("a generated run was refused: %s\n%s", r, mustJSON(t, body))
		}
		var rc oapi.RunCreated
		mustUnmarshal(rt, r.body, &rc)
		return body, rc
	}

	routes := map[string]func(rt *rapid.T){
		"createRun": func(rt *rapid.T) {
			body := genRun(rt, uniq) // any content: a run that cannot be fitted is stored too
			r := e.postJSON(t, poster, "/v1/runs", body)
			if r.status != http.StatusCreated {
				rt.Fatalf("a generated run was refused: %s\n%s", r, mustJSON(t, body))
			}
			var rc oapi.RunCreated
			mustUnmarshal(rt, r.body, &rc)
			run := readBack(rt, t, e, "/v1/runs/"+rc.ID.String())
			sameMembers(rt, "run", body, run)
			for _, c := range rc.Curves {
				readBack(rt, t, e, "/v1/curves/"+c.ID.String())
			}
		},
		"createRun (CSV) and createRunCsv": func(rt *rapid.T) {
			body := genRun(rt, uniq)
			delete(body, "samples")
			var b strings.Builder
			b.WriteString("kind,analyte,level,concentration,response,sample_id,dilution\n")
			for _, s := range body["standards"].([]map[string]any) {
				for _, y := range s["responses"].([]float64) {
					fmt.Fprintf(&b, "standard,%s,%s,%v,%v,,\n", s["analyte"], s["level"], s["concentration"], y)
				}
			}
			q := url.Values{"method": {"nitrate-uv"}, "instrument": {body["instrument"].(string)},
				"acquired_at": {body["acquired_at"].(string)}, "operator": {body["operator"].(string)}}
			route := rapid.SampledFrom([]string{"/v1/runs", "/v1/runs/csv"}).Draw(rt, "route")
			r := e.do(t, call{method: http.MethodPost, path: route + "?" + q.Encode(), token: poster, contentType: "text/csv", body: []byte(b.String())})
			if r.status != http.StatusCreated {
				rt.Fatalf("a generated CSV run was refused: %s\n%s", r, b.String())
			}
			var rc oapi.RunCreated
			mustUnmarshal(rt, r.body, &rc)
			sameMembers(rt, "CSV run", body, readBack(rt, t, e, "/v1/runs/"+rc.ID.String()))
		},
		"createRunSamples": func(rt *rapid.T) {
			run, rc := postRun(rt)
			at := drawTimeAfter(rt, run["acquired_at"].(string))
			body := map[string]any{"samples": []map[string]any{{"id": uniq(genIdentifier.Draw(rt, "sample")), "analyte": "nitrate",
				"responses": genResponses.Draw(rt, "responses"), "dilution": rapid.Float64Range(0.001, 1e6).Draw(rt, "dilution"), "acquired_at": at}}}
			r := e.postJSON(t, e.admin, "/v1/runs/"+rc.ID.String()+"/samples", body)
			got := answered(rt, r, http.StatusCreated)
			res := got["results"].([]any)[0].(map[string]any)
			posted := body["samples"].([]map[string]any)[0]
			sameMembers(rt, "sample", map[string]any{"sample_id": posted["id"], "analyte": "nitrate", "responses": posted["responses"],
				"dilution": posted["dilution"], "acquired_at": at}, res)
			back := readBack(rt, t, e, "/v1/samples/"+url.PathEscape(posted["id"].(string)))
			sameRecord(rt, "sample result", res, findByID(rt, back["results"], res["id"]))
		},
		"createVerification": func(rt *rapid.T) {
			run, rc := postRun(rt)
			curve := "/v1/curves/" + rc.Curves[0].ID.String()
			body := map[string]any{"kind": rapid.SampledFrom([]string{"initial", "continuing"}).Draw(rt, "kind"),
				"level": genIdentifier.Draw(rt, "level"), "concentration": genConcentration.Draw(rt, "concentration"),
				"responses": genResponses.Draw(rt, "responses"), "acquired_at": drawTimeAfter(rt, run["acquired_at"].(string))}
			if rapid.Bool().Draw(rt, "reference material") {
				// A certified reference material of nitrate at the nominal concentration, in date.
				code := uniq(genIdentifier.Draw(rt, "material"))
				answered(rt, e.postJSON(t, e.admin, "/v1/standard-materials", map[string]any{"code": code, "kind": "reference_material",
					"analyte": "nitrate", "unit": "mg/L", "value": body["concentration"], "expanded_uncertainty": 0.01, "coverage_factor": 2.0,
					"expires_at": "9999-01-01T00:00:00Z"}), http.StatusCreated)
				body["material"] = code
			}
			v := answered(rt, e.postJSON(t, e.admin, curve+"/verifications", body), http.StatusCreated)["verification"].(map[string]any)
			sameMembers(rt, "verification", body, v)
			sameRecord(rt, "verification", v, findByID(rt, readBack(rt, t, e, curve+"/verifications")["verifications"], v["id"]))
		},
		"createExclusion": func(rt *rapid.T) {
			run, rc := postRun(rt)
			stds := run["standards"].([]map[string]any)
			s := stds[rapid.IntRange(0, len(stds)-1).Draw(rt, "level")]
			body := map[string]any{"reason": genText.Draw(rt, "reason"),
				"points": []map[string]any{{"level": s["level"], "replicate": rapid.IntRange(1, len(s["responses"].([]float64))).Draw(rt, "replicate")}}}
			r := e.postJSON(t, e.admin, "/v1/curves/"+rc.Curves[0].ID.String()+"/exclusions", body)
			if r.status >= 500 {
				rt.Fatalf("exclusion: %s", r)
			}
			if r.status/100 != 2 {
				return // the exclusion rules may refuse it (the range, the last replicates); only what is accepted must read back
			}
			accepted["createExclusion"]++
			rev := answered(rt, r, http.StatusCreated)
			sameMembers(rt, "exclusion", map[string]any{"reason": body["reason"], "points": body["points"]}, rev["exclusion"])
			sameRecord(rt, "revision", rev, readBack(rt, t, e, r.header.Get("Location")))
		},
		"reviewCurve": func(rt *rapid.T) {
			_, rc := postRun(rt)
			body := map[string]any{"decision": rapid.SampledFrom([]string{"approve", "reject"}).Draw(rt, "decision"), "reason": genText.Draw(rt, "reason")}
			curve := "/v1/curves/" + rc.Curves[0].ID.String()
			got := answered(rt, e.postJSON(t, e.admin, curve+"/review", body), http.StatusOK)
			sameRecord(rt, "reviewed curve", got, readBack(rt, t, e, curve))
		},
		"createMethod": func(rt *rapid.T) {
			analytes := rapid.SliceOfNDistinct(genIdentifier, 1, 3, func(s string) string { return strings.ToLower(s) }).Draw(rt, "analytes")
			as := make([]map[string]any, len(analytes))
			for i, a := range analytes {
				as[i] = map[string]any{"name": a, "unit": rapid.SampledFrom([]string{"mg/L", "ug/L", "ng/mL", "mmol/L", "[ppm]"}).Draw(rt, "unit")}
			}
			body := map[string]any{"name": uniq(genIdentifier.Draw(rt, "name")), "description": genText.Draw(rt, "description"),
				"model":     rapid.SampledFrom([]string{"linear", "linear_origin", "quadratic"}).Draw(rt, "model"),
				"weighting": rapid.SampledFrom([]string{"none", "1/x", "1/x^2", "1/y", "1/y^2"}).Draw(rt, "weighting"), "analytes": as,
				"confidence": rapid.SampledFrom([]float64{0.9, 0.95, 0.99}).Draw(rt, "confidence")}
			m := answered(rt, e.postJSON(t, e.admin, "/v1/methods", body), http.StatusCreated)
			sameMembers(rt, "method", body, m)
			sameRecord(rt, "method", m, readBack(rt, t, e, "/v1/methods/"+url.PathEscape(body["name"].(string))))
		},
		"createStandardMaterial": func(rt *rapid.T) {
			body := map[string]any{"code": uniq(genIdentifier.Draw(rt, "code")), "kind": "reference_material", "analyte": genIdentifier.Draw(rt, "analyte"),
				"unit": "mg/L", "value": genConcentration.Draw(rt, "value"), "tolerance": genConcentration.Draw(rt, "tolerance"),
				"expires_at": drawTime(rt, time.Date(2001, 1, 1, 0, 0, 0, 0, time.UTC), time.Date(2999, 1, 1, 0, 0, 0, 0, time.UTC))}
			m := answered(rt, e.postJSON(t, e.admin, "/v1/standard-materials", body), http.StatusCreated)
			sameMembers(rt, "material", body, m)
			sameRecord(rt, "material", m, readBack(rt, t, e, "/v1/standard-materials/"+url.PathEscape(body["code"].(string))))
		},
		"createPerson": func(rt *rapid.T) {
			body := map[string]any{"login": uniq(genLogin.Draw(rt, "login")), "full_name": genText.Draw(rt, "full_name"),
				"roles":    rapid.SliceOfNDistinct(rapid.SampledFrom([]string{"analyst", "reviewer", "qa-approver", "administrator"}), 1, 4, func(s string) string { return s }).Draw(rt, "roles"),
				"password": rapid.StringMatching(`[ -~]{10,40}`).Draw(rt, "password")}
			p := answered(rt, e.postJSON(t, e.admin, "/v1/people", body), http.StatusCreated)
			delete(body, "password")
			// Roles are a set (uniqueItems), answered in the service's order.
			want, got := slices.Clone(body["roles"].([]string)), []string{}
			for _, r := range p["roles"].([]any) {
				got = append(got, r.(string))
			}
			slices.Sort(want)
			slices.Sort(got)
			if !slices.Equal(want, got) {
				rt.Fatalf("roles %v answered as %v", want, got)
			}
			delete(body, "roles")
			sameMembers(rt, "person", body, p)
			sameRecord(rt, "person", p, findBy(rt, readBack(rt, t, e, "/v1/people")["people"], "login", p["login"]))
		},
		"signCurve and withdrawSignature": func(rt *rapid.T) {
			_, rc := postRun(rt)
			curve := "/v1/curves/" + rc.Curves[0].ID.String()
			body := map[string]any{"login": "matrix-qa", "password": "matrix-qa-password",
				"meaning": rapid.SampledFrom([]string{"review", "approval"}).Draw(rt, "meaning"), "reason": genText.Draw(rt, "reason")}
			if body["meaning"] == "approval" {
				body["decision"] = rapid.SampledFrom([]string{"approve", "reject"}).Draw(rt, "decision")
			}
			r := e.postJSON(t, e.admin, curve+"/signatures", body)
			if r.status >= 500 {
				rt.Fatalf("signature: %s", r)
			}
			if r.status/100 != 2 {
				return // the signing rules may refuse it (an approval of a failed curve); only what is accepted must read back
			}
			accepted["signCurve and withdrawSignature"]++
			sig := answered(rt, r, http.StatusCreated)
			delete(body, "password")
			sameMembers(rt, "signature", body, sig)
			sameRecord(rt, "signature", sig, findByID(rt, readBack(rt, t, e, curve+"/signatures")["signatures"], sig["id"]))
			w := map[string]any{"login": "matrix-qa", "password": "matrix-qa-password", "reason": genText.Draw(rt, "withdrawal")}
			wd := answered(rt, e.postJSON(t, e.admin, "/v1/signatures/"+sig["id"].(string)+"/withdrawal", w), http.StatusOK)
			sameMembers(rt, "withdrawal", map[string]any{"withdrawal_reason": w["reason"]}, wd)
			sameRecord(rt, "withdrawn signature", wd, findByID(rt, readBack(rt, t, e, curve+"/signatures")["signatures"], sig["id"]))
		},
		"disablePerson and unlockPerson": func(rt *rapid.T) {
			login := uniq(genLogin.Draw(rt, "login"))
			e.person(t, login, genText.Draw(rt, "name"), "analyst")
			op := rapid.SampledFrom([]string{"disable", "unlock"}).Draw(rt, "op")
			p := answered(rt, e.do(t, call{method: http.MethodPost, path: "/v1/people/" + login + "/" + op, token: e.admin}), http.StatusOK)
			sameRecord(rt, "person", p, findBy(rt, readBack(rt, t, e, "/v1/people")["people"], "login", login))
		},
		// Tokens have no GET: a token reads back by being used, and a
		// revoked one by being refused.
		"createToken and deleteToken": func(rt *rapid.T) {
			body := map[string]any{"name": uniq(genIdentifier.Draw(rt, "name")), "scopes": []string{"results:read"}}
			tc := answered(rt, e.postJSON(t, e.admin, "/v1/tokens", body), http.StatusCreated)
			sameMembers(rt, "token", body, tc)
			readBackAs(rt, t, e, tc["token"].(string), "/v1/results?limit=1", http.StatusOK)
			if r := e.do(t, call{method: http.MethodDelete, path: "/v1/tokens/" + tc["id"].(string), token: e.admin}); r.status != http.StatusNoContent {
				rt.Fatalf("revoke: %s", r)
			}
			readBackAs(rt, t, e, tc["token"].(string), "/v1/results?limit=1", http.StatusUnauthorized)
		},
	}
	// Every write route of the spec has its property.
	covered := strings.Join(mapKeys(routes), " ")
	for _, op := range writeOps(t) {
		if !strings.Contains(covered, op) {
			t.Errorf("the write route %s has no read-back property", op)
		}
	}
	for _, name := range mapKeys(routes) {
		t.Run(name, func(t *testing.T) {
			rapid.Check(t, routes[name])
			if n, counted := accepted[name]; counted || name == "createExclusion" || strings.HasPrefix(name, "signCurve") {
				t.Logf("%d cases accepted", n)
				if n == 0 {
					t.Errorf("no generated %s was accepted: the property was never tested", name)
				}
			}
		})
	}
}

func limitRapidChecks(t *testing.T) {
	t.Helper()
	set := false
	flag.Visit(func(f *flag.Flag) { set = set || f.Name == "rapid.checks" })
	if !set {
		if err := flag.Set("rapid.checks", fmt.Sprint(readbackChecks)); err != nil {
			t.Fatal(err)
		}
	}
}

const readbackChecks = 25

// ---------- generators that keep to the schemas ----------

var (
	genIdentifier = rapid.StringMatching(`[A-Za-z0-9][A-Za-z0-9._:-]{0,20}`)
	genLogin      = rapid.StringMatching(`[a-z0-9][a-z0-9._-]{0,20}`)
	// genText is the spec's Text (no control characters but tab, LF and
	// CR) in several scripts; bidirectional controls are refused by a rule
	// of the service's own and left out.
	genText = rapid.StringOfN(rapid.RuneFrom([]rune(" \t.,;:-()/%'\"µ°±²"), unicode.Latin, unicode.Greek, unicode.Hebrew, unicode.Han, unicode.Nd, unicode.So),
		1, 60, -1).Filter(func(s string) bool { return strings.TrimSpace(s) != "" })
	// genConcentration spans the schema's range in magnitude.
	genConcentration = rapid.Custom(func(rt *rapid.T) float64 {
		return roundSig(math.Pow(10, rapid.Float64Range(-4, 9).Draw(rt, "log10")), rapid.IntRange(1, 17).Draw(rt, "digits"))
	})
	genResponses = rapid.SliceOfN(rapid.Custom(func(rt *rapid.T) float64 {
		return roundSig(rapid.Float64Range(-1e6, 1e9).Draw(rt, "y"), rapid.IntRange(1, 17).Draw(rt, "digits"))
	}), 1, 4)
)

// roundSig keeps d significant digits (17 keeps every float64).
func roundSig(v float64, d int) float64 {
	f, _ := strconv.ParseFloat(strconv.FormatFloat(v, 'g', d, 64), 64)
	return f
}

// genRun is a run of nitrate-uv on a test instrument: 2 to 8 levels of
// distinct concentrations, 1 to 4 replicates, 0 to 3 samples.
func genRun(rt *rapid.T, uniq func(string) string) map[string]any {
	concs := rapid.SliceOfNDistinct(genConcentration, 2, 8, func(v float64) float64 { return v }).Draw(rt, "concentrations")
	stds := make([]map[string]any, len(concs))
	for i, x := range concs {
		stds[i] = map[string]any{"analyte": "nitrate", "level": fmt.Sprintf("L%d-%s", i+1, genIdentifier.Draw(rt, "level")), "concentration": x,
			"responses": genResponses.Draw(rt, "responses")}
	}
	ids := rapid.SliceOfNDistinct(genIdentifier, 0, 3, strings.ToLower).Draw(rt, "samples")
	samples := make([]map[string]any, len(ids))
	for i, id := range ids {
		samples[i] = map[string]any{"id": id, "analyte": "nitrate", "responses": genResponses.Draw(rt, "sample responses"),
			"dilution": rapid.Float64Range(0.001, 1e6).Draw(rt, "dilution")}
	}
	return map[string]any{"method": "nitrate-uv", "instrument": rapid.SampledFrom(testInstruments[:5]).Draw(rt, "instrument"),
		"acquired_at": drawTime(rt, time.Date(2001, 1, 1, 0, 0, 0, 0, time.UTC), time.Date(2031, 12, 1, 0, 0, 0, 0, time.UTC)),
		"operator":    uniq(rapid.StringMatching(`[A-Za-z0-9][A-Za-z0-9._:@-]{0,20}`).Draw(rt, "operator")),
		"standards":   stds, "samples": samples}
}

// fitRun makes body's responses follow a line through the origin region
// with a drawn slope and intercept and small relative noise, on at least six
// levels with two or more replicates: a run whose curve is fitted, for the
// routes that act on a curve.
func fitRun(rt *rapid.T, body map[string]any) {
	concs := rapid.SliceOfNDistinct(rapid.Float64Range(0.01, 1000), 6, 8, func(v float64) float64 { return v }).Draw(rt, "fit concentrations")
	slope := rapid.Float64Range(0.01, 100).Draw(rt, "slope")
	icpt := rapid.Float64Range(-0.01, 0.01).Draw(rt, "intercept")
	stds := make([]map[string]any, len(concs))
	for i, x := range concs {
		ys := make([]float64, rapid.IntRange(2, 3).Draw(rt, "replicates"))
		for k := range ys {
			ys[k] = roundSig((icpt+slope*x)*(1+rapid.Float64Range(-0.01, 0.01).Draw(rt, "noise")), 9)
		}
		stds[i] = map[string]any{"analyte": "nitrate", "level": fmt.Sprintf("L%d", i+1), "concentration": roundSig(x, 6), "responses": ys}
	}
	body["standards"] = stds
}

// drawTime is an instant in [lo, hi) written as RFC 3339 in a random offset
// (whole quarters of an hour within ±14:00), with 0 to 9 fractional digits
// and T and Z in either case.
func drawTime(rt *rapid.T, lo, hi time.Time) string {
	ns := rapid.Int64Range(0, hi.Sub(lo).Nanoseconds()-1).Draw(rt, "instant")
	t := lo.Add(time.Duration(ns))
	off := rapid.IntRange(-56, 56).Draw(rt, "offset") * 15 * 60
	zone := time.FixedZone("", off)
	digits := rapid.IntRange(0, 9).Draw(rt, "fraction digits")
	layout := "2006-01-02T15:04:05"
	if digits > 0 {
		layout += "." + strings.Repeat("0", digits)
	}
	layout += "Z07:00"
	s := t.In(zone).Format(layout)
	if rapid.Bool().Draw(rt, "lower case") {
		s = strings.Replace(s, "T", "t", 1)
		s = strings.Replace(s, "Z", "z", 1)
	}
	return s
}

// drawTimeAfter is a time up to a week after the RFC 3339 time after.
func drawTimeAfter(rt *rapid.T, after string) string {
	t, err := oapi.ParseTimestamp(after)
	if err != nil {
		rt.Fatalf("%s: %v", after, err)
	}
	return drawTime(rt, t.Add(time.Second), t.Add(7*24*time.Hour))
}

// ---------- reading back and comparing ----------

// answered is r's JSON body when it has the status want.
func answered(rt *rapid.T, r reply, want int) map[string]any {
	rt.Helper()
	if r.status != want {
		rt.Fatalf("answer %s, want %d", r, want)
	}
	var v map[string]any
	mustUnmarshal(rt, r.body, &v)
	return v
}

// readBack GETs path as admin and wants 200.
func readBack(rt *rapid.T, t testing.TB, e *env, path string) map[string]any {
	rt.Helper()
	return readBackAs(rt, t, e, e.admin, path, http.StatusOK)
}

func readBackAs(rt *rapid.T, t testing.TB, e *env, token, path string, want int) map[string]any {
	rt.Helper()
	r := e.do(t, call{method: http.MethodGet, path: path, token: token})
	if r.status != want {
		rt.Fatalf("GET %s: %s, want %d", path, r, want)
	}
	var v map[string]any
	if want == http.StatusOK {
		mustUnmarshal(rt, r.body, &v)
	}
	return v
}

func mustUnmarshal(rt *rapid.T, b []byte, v any) {
	rt.Helper()
	if err := json.Unmarshal(b, v); err != nil {
		rt.Fatalf("decode %s: %v", snippet(b), err)
	}
}

// findByID is the element of list whose id is id.
func findByID(rt *rapid.T, list, id any) map[string]any {
	rt.Helper()
	return findBy(rt, list, "id", id)
}

func findBy(rt *rapid.T, list any, key string, val any) map[string]any {
	rt.Helper()
	items, _ := list.([]any)
	for _, it := range items {
		if m, ok := it.(map[string]any); ok && m[key] == val {
			return m
		}
	}
	rt.Fatalf("%s %v is not among the %d read back", key, val, len(items))
	return nil
}

// sameRecord wants the record read back to be the one answered.
func sameRecord(rt *rapid.T, what string, answered, back map[string]any) {
	rt.Helper()
	if !reflect.DeepEqual(answered, back) {
		a, _ := json.Marshal(answered)
		b, _ := json.Marshal(back)
		rt.Fatalf("the %s read back differs from the one answered:\nanswered %s\nread     %s", what, snippet(a), snippet(b))
	}
}

// sameMembers wants every member posted to be in the record with the same
// value: numbers as float64, times as the same instant to the microsecond,
// objects and arrays member by member.
func sameMembers(rt *rapid.T, what string, posted any, got any) {
	rt.Helper()
	b, _ := json.Marshal(posted) // to JSON's types
	var p any
	mustUnmarshal(rt, b, &p)
	if d := memberDiff("", p, got); d != "" {
		rt.Fatalf("the %s does not carry what was posted: %s", what, d)
	}
}

func memberDiff(path string, posted, got any) string {
	switch p := posted.(type) {
	case map[string]any:
		g, ok := got.(map[string]any)
		if !ok {
			return fmt.Sprintf("%s: posted an object, got %v", path, got)
		}
		for k, v := range p {
			if _, ok := g[k]; !ok {
				return fmt.Sprintf("%s/%s: posted, not in the record", path, k)
			}
			if d := memberDiff(path+"/"+k, v, g[k]); d != "" {
				return d
			}
		}
	case []any:
		g, ok := got.([]any)
		if !ok || len(g) != len(p) {
			return fmt.Sprintf("%s: posted %d items, got %v", path, len(p), got)
		}
		for i := range p {
			if d := memberDiff(fmt.Sprintf("%s/%d", path, i), p[i], g[i]); d != "" {
				return d
			}
		}
	case string:
		// The service drops the white space around free text (a name, a
		// reason) before it stores it; the answer says so too.
		if g, ok := got.(string); ok && (g == p || g == strings.TrimSpace(p)) {
			return ""
		}
		pt, perr := oapi.ParseTimestamp(p)
		gs, _ := got.(string)
		gt, gerr := oapi.ParseTimestamp(gs)
		if perr == nil && gerr == nil && pt.Truncate(time.Microsecond).Equal(gt) {
			return ""
		}
		return fmt.Sprintf("%s: posted %q, got %v", path, p, got)
	default:
		if !reflect.DeepEqual(posted, got) {
			return fmt.Sprintf("%s: posted %v, got %v", path, posted, got)
		}
	}
	return ""
}

func mapKeys[V any](m map[string]V) []string {
	out := make([]string, 0, len(m))
	for k := range m {
		out = append(out, k)
	}
	slices.Sort(out)
	return out
}
