package main

import (
	"context"
	"crypto/ecdsa"
	"crypto/elliptic"
	"crypto/rand"
	"crypto/sha256"
	"crypto/tls"
	"crypto/x509"
	"crypto/x509/pkix"
	"encoding/base64"
	"encoding/pem"
	"math/big"
	"net"
	"net/http"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"curvekeeper/store/dbtest"
)

// TestTokensNeverLeak runs a full flow at log level debug (method, four
// tokens, JSON and CSV runs, reads, predictions, plot, review, audit, bad
// and revoked tokens), then checks: each issued secret carries at least
// 128 random bits; the database holds only SHA-256 hashes (a pg_dump of the
// whole database contains no secret); no line the service wrote contains
// any secret or a 16-character piece of one; revocation takes effect on
// the next request.
func TestTokensNeverLeak(t *testing.T) {
	bin := buildBinary(t)
	dbURL := dbtest.NewURL(t)
	admin := newSecret(t)
	env := []string{"DATABASE_URL=" + dbURL, "CURVEKEEPER_BOOTSTRAP_TOKEN=" + admin}
	svc := startProc(t, bin, env, "--log-level", "debug", "--rate-limit", "0")
	c := newClient(t, nil)
	base := svc.base

	c.must(http.StatusCreated, "POST", base+"/v1/methods", admin, methodBody())
	secrets := map[string]string{"bootstrap": admin}
	ids := map[string]string{}
	for _, tk := range []struct{ name, scope string }{
		{"ic-02-uploader", "runs:write"}, {"lims-reader", "results:read"}, {"qa-desk", "curves:review"}, {"second-admin", "admin"},
	} {
		ids[tk.name], secrets[tk.name] = c.issueToken(base, admin, tk.name, tk.scope)
	}
	seen := map[string]bool{}
	for name, s := range secrets {
		if seen[s] {
			t.Errorf("secret of %s issued twice", name)
		}
		seen[s] = true
		if name == "bootstrap" {
			continue
		}
		raw, err := base64.RawURLEncoding.DecodeString(strings.TrimPrefix(s, "ck_"))
		if !strings.HasPrefix(s, "ck_") || err != nil || len(raw)*8 < 128 {
			t.Errorf("secret of %s: %d random bits (%v), want ≥ 128 after the ck_ prefix", name, len(raw)*8, err)
		}
	}
	inst, lims, qa, admin2 := secrets["ic-02-uploader"], secrets["lims-reader"], secrets["qa-desk"], secrets["second-admin"]

	r := c.must(http.StatusCreated, "POST", base+"/v1/runs", inst, runBody(1), "Idempotency-Key", "flow-1")
	run := decodeCreated(t, r)
	csv := "kind,analyte,level,concentration,response\n"
	for j, conc := range []float64{0.5, 1, 2, 5, 10} {
		y := strconv.FormatFloat(0.02+1.5*conc, 'f', 4, 64)
		csv += "standard,nitrate,L" + strconv.Itoa(j+1) + "," + strconv.FormatFloat(conc, 'g', -1, 64) + "," + y + "\n"
	}
	q := url.Values{"method": {methodName}, "instrument": {"ic-02"}, "acquired_at": {"2025-03-02T08:00:00Z"}}
	rc, err := c.do("POST", base+"/v1/runs?"+q.Encode(), inst, "text/csv", []byte(csv))
	if err != nil || rc.status != http.StatusCreated {
		t.Fatalf("CSV run: %v %s", err, rc)
	}
	curve := run.Curves[0].ID
	c.must(http.StatusOK, "GET", base+"/v1/runs/"+run.ID, inst, nil)
	c.must(http.StatusOK, "GET", base+"/v1/curves", lims, nil)
	c.must(http.StatusOK, "GET", base+"/v1/curves/"+curve, lims, nil)
	c.must(http.StatusOK, "POST", base+"/v1/curves/"+curve+"/predictions", lims,
		map[string]any{"samples": []map[string]any{{"id": "W-0043", "responses": []float64{3.1, 3.12}}}})
	c.must(http.StatusOK, "GET", base+"/v1/curves/"+curve+"/plot.svg", lims, nil)
	c.must(http.StatusOK, "POST", base+"/v1/curves/"+curve+"/review", qa, map[string]any{"decision": "reject", "reason": "too few levels for the invented SOP"})
	c.must(http.StatusOK, "GET", base+"/v1/curves/"+curve+"/audit", qa, nil)
	c.must(http.StatusOK, "GET", base+"/v1/methods", admin2, nil)
	c.must(http.StatusForbidden, "POST", base+"/v1/tokens", inst, map[string]any{"name": "sneaky", "scopes": []string{"admin"}})
	c.must(http.StatusForbidden, "GET", base+"/v1/curves", inst, nil)

	for _, h := range []string{"", "Bearer", "Bearer ", "Basic " + base64.StdEncoding.EncodeToString([]byte("u:"+admin)),
		"Bearer " + admin + " extra", "Bearer ck_" + strings.Repeat("A", 43), "bearer\t" + admin[:10]} {
		r, err := c.do("GET", base+"/v1/curves", "", "", nil, "Authorization", h)
		if err != nil {
			t.Fatal(err)
		}
		if r.status != http.StatusUnauthorized || r.header.Get("WWW-Authenticate") == "" {
			t.Errorf("Authorization %q: %s, want 401 with WWW-Authenticate", h, r)
		} else {
			problem(t, r)
		}
	}

	// Revocation takes effect on the very next request.
	c.must(http.StatusOK, "GET", base+"/v1/curves", lims, nil)
	rv, err := c.do("DELETE", base+"/v1/tokens/"+ids["lims-reader"], admin2, "", nil)
	if err != nil || rv.status/100 != 2 {
		t.Fatalf("revoke: %v %s", err, rv)
	}
	r = c.must(http.StatusUnauthorized, "GET", base+"/v1/curves", lims, nil)
	problem(t, r)
	c.must(http.StatusUnauthorized, "POST", base+"/v1/curves/"+curve+"/predictions", lims,
		map[string]any{"samples": []map[string]any{{"id": "W-0044", "responses": []float64{3.0}}}})

	svc.signal(syscall.SIGTERM)
	if err := svc.wait(60 * time.Second); err != nil {
		t.Errorf("exit: %v", err)
	}

	// The database keeps the hash only.
	pool := openPool(t, dbURL)
	var hashes int
	for name, s := range secrets {
		sum := sha256.Sum256([]byte(s))
		if err := pool.QueryRow(context.Background(), `SELECT count(*) FROM tokens WHERE hash = $1`, sum[:]).Scan(&hashes); err != nil || hashes != 1 {
			t.Errorf("token %s: %d rows with its SHA-256 (%v), want 1", name, hashes, err)
		}
	}
	dump := pgDump(t, dbURL)
	logs := svc.logs()
	lines := strings.Count(logs, "\n")
	if lines < 30 || !strings.Contains(logs, `"msg":"request"`) {
		t.Fatalf("only %d log lines captured; the check would prove nothing", lines)
	}
	leaks := 0
	for name, s := range secrets {
		pieces := []string{s}
		body := strings.TrimPrefix(strings.TrimPrefix(s, "ck_boot_"), "ck_")
		for i := 0; i+16 <= len(body); i += 8 {
			pieces = append(pieces, body[i:i+16])
		}
		for _, p := range pieces {
			if strings.Contains(logs, p) {
				t.Errorf("the service's log contains (part of) the secret of %s", name)
				leaks++
				break
			}
			if strings.Contains(dump, p) {
				t.Errorf("the database dump contains (part of) the secret of %s", name)
				leaks++
				break
			}
		}
	}
	t.Logf("security: tokens: %d secrets issued (bootstrap included), %d log lines and a %d-byte database dump searched, %d responses' headers checked, leaks %d; revoked token refused on its next request",
		len(secrets), lines, len(dump), c.checks.count, leaks)
}

// pgDump returns the SQL dump of the database at dbURL.
func pgDump(t *testing.T, dbURL string) string {
	t.Helper()
	bin, err := exec.LookPath("pg_dump")
	if err != nil {
		matches, _ := filepath.Glob("/usr/lib/postgresql/*/bin/pg_dump")
		if len(matches) == 0 {
			t.Fatal("pg_dump not found")
		}
		bin = matches[len(matches)-1]
	}
	out, err := exec.Command(bin, "--data-only", "--dbname="+dbURL).Output()
	if err != nil {
		t.Fatalf("pg_dump: %v", err)
	}
	if !strings.Contains(string(out), "COPY public.tokens") {
		t.Fatalf("pg_dump output holds no tokens table:\n%.500s", out)
	}
	return string(out)
}

// selfSigned writes a self-signed ECDSA certificate for 127.0.0.1 and its
// key into dir and returns their paths and the certificate.
func selfSigned(t *testing.T, dir string) (certFile, keyFile string, cert *x509.Certificate) {
	t.Helper()
	key, err := ecdsa.GenerateKey(elliptic.P256(), rand.Reader)
	if err != nil {
		t.Fatal(err)
	}
	tmpl := &x509.Certificate{
		SerialNumber: big.NewInt(1),
		Subject:      pkix.Name{CommonName: "curvekeeper test"},
		NotBefore:    time.Now().Add(-time.Hour),
		NotAfter:     time.Now().Add(time.Hour),
		IPAddresses:  []net.IP{net.ParseIP("127.0.0.1")},
		KeyUsage:     x509.KeyUsageDigitalSignature,
		ExtKeyUsage:  []x509.ExtKeyUsage{x509.ExtKeyUsageServerAuth},
	}
	der, err := x509.CreateCertificate(rand.Reader, tmpl, tmpl, &key.PublicKey, key)
	if err != nil {
		t.Fatal(err)
	}
	if cert, err = x509.ParseCertificate(der); err != nil {
		t.Fatal(err)
	}
	keyDER, err := x509.MarshalPKCS8PrivateKey(key)
	if err != nil {
		t.Fatal(err)
	}
	certFile, keyFile = filepath.Join(dir, "cert.pem"), filepath.Join(dir, "key.pem")
	if err := os.WriteFile(certFile, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: der}), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(keyFile, pem.EncodeToMemory(&pem.Block{Type: "PRIVATE KEY", Bytes: keyDER}), 0o600); err != nil {
		t.Fatal(err)
	}
	return certFile, keyFile, cert
}

// TestTLSAndRateLimit serves HTTPS with a self-signed certificate made
// here, at a rate limit of one request per 100 s and a burst of 5 per
// token: over TLS every response carries Strict-Transport-Security, plain
// HTTP gets no API answer, a token's 6th request is 429 problem details
// with Retry-After, and another token is not affected.
func TestTLSAndRateLimit(t *testing.T) {
	bin := buildBinary(t)
	certFile, keyFile, cert := selfSigned(t, t.TempDir())
	admin := newSecret(t)
	env := []string{"DATABASE_URL=" + dbtest.NewURL(t), "CURVEKEEPER_BOOTSTRAP_TOKEN=" + admin}
	svc := startProc(t, bin, env, "--tls-cert", certFile, "--tls-key", keyFile, "--rate-limit", "0.01", "--rate-burst", "5")
	if !strings.HasPrefix(svc.base, "https://") {
		t.Fatalf("service listens on %s, want https", svc.base)
	}
	roots := x509.NewCertPool()
	roots.AddCert(cert)
	tr := http.DefaultTransport.(*http.Transport).Clone()
	tr.TLSClientConfig = &tls.Config{RootCAs: roots, MinVersion: tls.VersionTLS12}
	c := newClient(t, tr)
	base := svc.base

	c.must(http.StatusOK, "GET", base+"/healthz", "", nil)
	// Reviewers' tokens: they keep the base limit (machine readers get
	// api.ReaderRateFactor times it, tested in api).
	_, reader1 := c.issueToken(base, admin, "qa-one", "curves:review")
	_, reader2 := c.issueToken(base, admin, "qa-two", "curves:review")

	plain, err := http.Get("http://" + strings.TrimPrefix(base, "https://") + "/healthz")
	if err == nil {
		plain.Body.Close()
		if plain.StatusCode == http.StatusOK {
			t.Errorf("plain HTTP to the TLS port answered 200")
		}
	}

	for i := range 5 {
		r, err := c.do("GET", base+"/v1/curves", reader1, "", nil)
		if err != nil || r.status != http.StatusOK {
			t.Fatalf("request %d of the burst: %v %s", i+1, err, r)
		}
	}
	r, err := c.do("GET", base+"/v1/curves", reader1, "", nil)
	if err != nil {
		t.Fatal(err)
	}
	if r.status != http.StatusTooManyRequests {
		t.Fatalf("6th request = %s, want 429", r)
	}
	p := problem(t, r)
	secs, err := strconv.Atoi(r.header.Get("Retry-After"))
	if err != nil || secs < 1 {
		t.Errorf("Retry-After = %q, want whole seconds ≥ 1", r.header.Get("Retry-After"))
	}
	if !strings.Contains(p["detail"].(string), "per second") {
		t.Errorf("429 detail %q does not say the limit", p["detail"])
	}
	c.must(http.StatusOK, "GET", base+"/v1/curves", reader2, nil)
	r = c.must(http.StatusUnauthorized, "GET", base+"/v1/curves", "", nil) // not counted, not limited
	problem(t, r)
	t.Logf("security: TLS and rate limit: %d responses over TLS checked for HSTS and the other headers; 429 after a burst of 5 with Retry-After %d s",
		c.checks.count, secs)
}
