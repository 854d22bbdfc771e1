package api_test

import (
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"curvekeeper/api/oapi"
)

// TestRecordPDF prints a signed failing curve's record and reads it back with
// pdftotext (Debian poppler-utils): the signer, the meaning, the failed check
// with its limit, every standard and the content hash must be in it; the
// first page is rendered with pdftoppm as a picture.
func TestRecordPDF(t *testing.T) {
	t.Parallel()
	pdftotext, err := exec.LookPath("pdftotext")
	if err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatal("pdftotext (Debian poppler-utils) is missing")
		}
		t.Skip("pdftotext (Debian poppler-utils) is not installed")
	}
	e := newEnv(t)
	e.person(t, "quinn", "Quinn Approver", "qa-approver")
	e.method(t, "nitrate-uv", "nitrate")
	stds := standards("nitrate", 5)[:3]
	run := e.run(t, e.admin, runBody("nitrate-uv", "photometer-7", baseTime, stds))
	id := run.Curves[0].ID.String()
	c := decode[oapi.Curve](t, e.get(t, e.admin, "/v1/curves/"+id), http.StatusOK)
	if c.Verdict != "fail" {
		t.Fatalf("fixture verdict %s, want fail", c.Verdict)
	}
	sig := decode[oapi.Signature](t, e.postJSON(t, e.admin, "/v1/curves/"+id+"/signatures", map[string]any{
		"login": "quinn", "password": "quinn-password", "meaning": "approval", "decision": "approve",
		"reason": "three levels accepted for this invented demo"}), http.StatusCreated)

	r := e.get(t, e.admin, "/v1/curves/"+id+"/record.pdf")
	if r.status != http.StatusOK || r.header.Get("Content-Type") != "application/pdf" || !strings.HasPrefix(string(r.body), "%PDF-") {
		t.Fatalf("record.pdf: %d %s %q", r.status, r.header.Get("Content-Type"), snippet(r.body))
	}
	dir := t.TempDir()
	if a := os.Getenv("CURVEKEEPER_ARTIFACTS"); a != "" {
		dir = filepath.Join(a, "record")
		if err := os.MkdirAll(dir, 0o755); err != nil {
			t.Fatal(err)
		}
	}
	pdf := filepath.Join(dir, "record.pdf")
	if err := os.WriteFile(pdf, r.body, 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(pdftotext, "-layout", pdf, "-").CombinedOutput()
	if err != nil {
		t.Fatalf("pdftotext: %v\n%s", err, out)
	}
	text := string(out)
	want := []string{"Quinn Approver", "approval", sig.ContentSha256, "nitrate-uv, revision 1", "photometer-7", "analyst-3"}
	// Every standard, and the failed check with its limit as printed.
	for _, s := range stds {
		want = append(want, s["level"].(string))
	}
	failed := 0
	for _, ch := range c.Checks {
		if ch.Computed && !ch.Passed {
			// The check's row: its name, FAIL, and its limit as the
			// record prints it (6 significant digits).
			row := string(ch.Name) + " FAIL"
			if ch.Limit != nil {
				row += ".*" + regexp.QuoteMeta(strconv.FormatFloat(*ch.Limit, 'g', 6, 64))
			}
			if !regexp.MustCompile(regexp.QuoteMeta(string(ch.Name)) + ` +FAIL .*` + strings.TrimPrefix(row, string(ch.Name)+" FAIL")).MatchString(text) {
				t.Errorf("no row %q in the record", row)
			}
			failed++
		}
	}
	for _, w := range want {
		if !strings.Contains(text, w) {
			t.Errorf("the record's text lacks %q", w)
		}
	}
	if failed == 0 {
		t.Error("the fixture has no failed computed check")
	}
	if pdftoppm, err := exec.LookPath("pdftoppm"); err == nil {
		if out, err := exec.Command(pdftoppm, "-png", "-r", "60", "-f", "1", "-l", "1", pdf, filepath.Join(dir, "page")).CombinedOutput(); err != nil {
			t.Errorf("pdftoppm: %v\n%s", err, out)
		}
		if m, _ := filepath.Glob(filepath.Join(dir, "page*.png")); len(m) != 1 {
			t.Errorf("pdftoppm rendered %v", m)
		}
	}
	if t.Failed() {
		t.Logf("record text:\n%s", text)
	}
}
