package api_test

import (
	"bufio"
	"fmt"
	"io"
	"net"
	"net/http"
	"strings"
	"testing"
	"time"

	"curvekeeper/api"
)

// rawExchange writes raw on one connection and reads every response the
// server sends before it closes the connection or goes quiet.
func rawExchange(t *testing.T, e *env, raw string) []*http.Response {
	t.Helper()
	c, err := net.Dial("tcp", e.srv.Listener.Addr().String())
	if err != nil {
		t.Fatal(err)
	}
	defer c.Close()
	if _, err := io.WriteString(c, raw); err != nil {
		t.Fatal(err)
	}
	_ = c.SetReadDeadline(time.Now().Add(3 * time.Second))
	br := bufio.NewReader(c)
	var out []*http.Response
	for {
		resp, err := http.ReadResponse(br, nil)
		if err != nil {
			return out
		}
		_, _ = io.Copy(io.Discard, resp.Body)
		resp.Body.Close()
		out = append(out, resp)
	}
}

// TestTwoFramingsAreRefused: a request with both Content-Length and
// Transfer-Encoding is answered 400 and its connection closed, so a request
// hidden behind it is never served (RFC 9112 §6.3; request smuggling).
func TestTwoFramingsAreRefused(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	smuggle := "POST /v1/runs HTTP/1.1\r\nHost: x\r\nContent-Length: 4\r\nTransfer-Encoding: chunked\r\n\r\n" +
		"0\r\n\r\nGET /healthz HTTP/1.1\r\nHost: x\r\n\r\n"
	got := rawExchange(t, e, smuggle)
	if len(got) != 1 {
		t.Fatalf("%d responses on the connection, want 1 (the smuggled request must not be served)", len(got))
	}
	if got[0].StatusCode != http.StatusBadRequest || !got[0].Close {
		t.Errorf("status %d, close %v; want 400 and the connection closed", got[0].StatusCode, got[0].Close)
	}
}

// TestFramingGuardFollowsPipelinedBodies: well-framed requests pipelined on one
// connection, with fixed and chunked bodies (chunk extensions, trailers), are
// all served; only the one with two framings is refused, in its place.
func TestFramingGuardFollowsPipelinedBodies(t *testing.T) {
	t.Parallel()
	e := newEnv(t)
	body := `{"not":"a run"}`
	var b strings.Builder
	fmt.Fprintf(&b, "GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n")
	// A fixed body that looks like a request with two framings must not count.
	fake := "POST /x HTTP/1.1\r\nContent-Length: 1\r\nTransfer-Encoding: chunked\r\n\r\n"
	fmt.Fprintf(&b, "POST /v1/runs HTTP/1.1\r\nHost: x\r\nContent-Type: text/plain\r\nContent-Length: %d\r\n\r\n%s", len(fake), fake)
	fmt.Fprintf(&b, "POST /v1/runs HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\nTransfer-Encoding: chunked\r\n\r\n"+
		"%x;ext=1\r\n%s\r\n%x\r\n%s\r\n0\r\nX-Trailer: 1\r\n\r\n", 5, body[:5], len(body)-5, body[5:])
	fmt.Fprintf(&b, "GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n")
	fmt.Fprintf(&b, "POST /v1/runs HTTP/1.1\r\nHost: x\r\nContent-Length: 5\r\ntransfer-encoding: chunked\r\n\r\n0\r\n\r\n")
	fmt.Fprintf(&b, "GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n")
	got := rawExchange(t, e, b.String())
	var codes []int
	for _, r := range got {
		codes = append(codes, r.StatusCode)
	}
	// 200, then 401 twice (no token: the runs were framed right and reached
	// the service), 200, then 400 for two framings, and nothing after.
	want := []int{200, 401, 401, 200, 400}
	if fmt.Sprint(codes) != fmt.Sprint(want) {
		t.Errorf("statuses %v, want %v", codes, want)
	}
}

// TestChunkedBodyOverLimitIs413: a body without Content-Length (chunked) that
// passes the limit gets 413, as one with a Content-Length does.
func TestChunkedBodyOverLimitIs413(t *testing.T) {
	t.Parallel()
	e := newEnvConfig(t, api.Config{BodyLimit: 1000})
	for _, path := range []string{"/v1/runs", "/v1/methods"} {
		big := `{"method":"` + strings.Repeat("a", 3000) + `"}`
		// An io.Reader of unknown length makes the client send it chunked.
		req, err := http.NewRequest(http.MethodPost, e.srv.URL+path, io.MultiReader(strings.NewReader(big)))
		if err != nil {
			t.Fatal(err)
		}
		req.Header.Set("Authorization", "Bearer "+e.admin)
		req.Header.Set("Content-Type", "application/json")
		resp, err := e.srv.Client().Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if req.ContentLength != 0 || resp.StatusCode != http.StatusRequestEntityTooLarge {
			t.Errorf("POST %s chunked (length %d), %d bytes over a limit of 1000: status %d, want 413", path, req.ContentLength, len(big), resp.StatusCode)
		}
	}
}
