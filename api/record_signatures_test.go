package api_test

import (
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
)

// Excluding a standard and releasing results are signatures too: the
// analyst signs the exclusion (responsibility), another person approves
// the revision, a QA approver signs the release of its results; the API,
// and the printed record, show each with its meaning and content hash.
func TestExclusionAndReleaseSignatures(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	e.person(t, "ana", "Ana Analyst", "analyst", "qa-approver")
	e.person(t, "quinn", "Quinn Approver", "qa-approver")
	e.method(t, "nitrate-uv", "nitrate")
	_, instrument := e.token(t, "photometer-uploads", "runs:write")
	_, qa := e.token(t, "qa-desk", "curves:review")
	body := runBody("nitrate-uv", "photometer-7", baseTime, standards("nitrate", 8))
	body["samples"] = []map[string]any{{"id": "W-7", "analyte": "nitrate", "responses": []float64{1.5}}}
	run := e.run(t, instrument, body)
	rev := decode[oapi.Curve](t, e.postJSON(t, qa, "/v1/curves/"+run.Curves[0].ID.String()+"/exclusions", map[string]any{
		"reason": "air bubble in the L2 injection", "points": []map[string]any{{"level": "L2", "replicate": 1}}}), http.StatusCreated)
	path := "/v1/curves/" + rev.ID.String()
	sign := func(login string, m map[string]any) reply {
		m["login"], m["password"] = login, login+"-password"
		return e.postJSON(t, qa, path+"/signatures", m)
	}

	// The exclusion: an analyst's responsibility; the meaning must say so.
	wantProblem(t, sign("ana", map[string]any{"meaning": "approval", "subject": "exclusion"}), http.StatusUnprocessableEntity, "/meaning")
	wantProblem(t, sign("quinn", map[string]any{"meaning": "responsibility", "subject": "exclusion"}), http.StatusForbidden, "")
	ex := decode[oapi.Signature](t, sign("ana", map[string]any{"meaning": "responsibility", "subject": "exclusion",
		"reason": "L2 replicate 1 had an air bubble (run log line 14)"}), http.StatusCreated)
	if ex.RecordType != "exclusion" || ex.RecordID != rev.ID.String() || !ex.ContentMatches ||
		!strings.HasPrefix(ex.Manifestation, "Ana Analyst — responsibility for the exclusion of standards — ") {
		t.Errorf("exclusion signature %+v", ex)
	}
	// A release before approval is refused; ana signed the exclusion, so she
	// may not approve the revision.
	wantProblem(t, sign("quinn", map[string]any{"meaning": "responsibility", "subject": "release"}), http.StatusConflict, "")
	p := wantProblem(t, sign("ana", map[string]any{"meaning": "approval", "decision": "approve"}), http.StatusUnprocessableEntity, "/login")
	if !strings.Contains(p.Detail, "second-person review") {
		t.Errorf("approval by the excluding analyst: %q", p.Detail)
	}
	decode[oapi.Signature](t, sign("quinn", map[string]any{"meaning": "approval", "decision": "approve"}), http.StatusCreated)
	// ana may not release what she excluded; quinn releases.
	wantProblem(t, sign("ana", map[string]any{"meaning": "responsibility", "subject": "release"}), http.StatusUnprocessableEntity, "/login")
	rel := decode[oapi.Signature](t, sign("quinn", map[string]any{"meaning": "responsibility", "subject": "release"}), http.StatusCreated)
	if rel.RecordType != "release" || !rel.ContentMatches || !strings.Contains(rel.Manifestation, "responsibility for the release of results") {
		t.Errorf("release signature %+v", rel)
	}
	list := decode[oapi.SignatureList](t, e.get(t, e.admin, path+"/signatures"), http.StatusOK).Signatures
	var kinds []string
	for _, s := range list {
		kinds = append(kinds, s.RecordType+":"+string(s.Meaning))
		if !s.ContentMatches {
			t.Errorf("signature %s no longer matches", s.Manifestation)
		}
	}
	if strings.Join(kinds, " ") != "exclusion:responsibility curve:approval release:responsibility" {
		t.Errorf("signatures of the revision: %v", kinds)
	}

	// Withdrawing the approval returns the curve to review: the results are
	// no longer releasable, so the release signature no longer matches.
	decode[oapi.Signature](t, e.postJSON(t, qa, "/v1/signatures/"+list[1].ID.String()+"/withdrawal", map[string]any{
		"login": "quinn", "password": "quinn-password", "reason": "approved the wrong revision"}), http.StatusOK)
	for _, s := range decode[oapi.SignatureList](t, e.get(t, e.admin, path+"/signatures"), http.StatusOK).Signatures {
		if s.RecordType == "release" && s.ContentMatches {
			t.Error("the release signature still matches after the results were withheld again")
		}
	}

	// The printed record names both signatures with their meaning.
	pdftotext, err := exec.LookPath("pdftotext")
	if err != nil {
		t.Skip("pdftotext (Debian poppler-utils) is not installed")
	}
	r := e.get(t, e.admin, path+"/record.pdf")
	if r.status != http.StatusOK {
		t.Fatalf("record.pdf: %d", r.status)
	}
	pdf := filepath.Join(t.TempDir(), "record.pdf")
	if err := os.WriteFile(pdf, r.body, 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(pdftotext, pdf, "-").CombinedOutput()
	if err != nil {
		t.Fatalf("pdftotext: %v\n%s", err, out)
	}
	text := strings.Join(strings.Fields(string(out)), " ")
	for _, want := range []string{"Ana Analyst — responsibility for the exclusion of standards", "Quinn Approver — responsibility for the release of results",
		ex.ContentSha256, rel.ContentSha256, "DOES NOT MATCH"} {
		if !strings.Contains(text, want) {
			t.Errorf("the record lacks %q", want)
		}
	}
}
