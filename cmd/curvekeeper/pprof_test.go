package main

import (
	"io"
	"log/slog"
	"net/http"
	"strings"
	"testing"
)

func TestCheckPprofListen(t *testing.T) {
	tests := []struct {
		addr string
		ok   bool
	}{
		{"", true},
		{"127.0.0.1:6060", true},
		{"127.0.0.2:0", true},
		{"[::1]:6060", true},
		{"localhost:6060", true},
		{":6060", false}, // every interface
		{"0.0.0.0:6060", false},
		{"192.0.2.10:6060", false},
		{"example.org:6060", false},
		{"127.0.0.1", false}, // no port
	}
	for _, tc := range tests {
		t.Run(tc.addr, func(t *testing.T) {
			err := checkPprofListen(tc.addr)
			if got := err == nil; got != tc.ok {
				t.Errorf("checkPprofListen(%q) = %v, want ok=%t", tc.addr, err, tc.ok)
			}
			if err != nil && exitCode(err) != 2 {
				t.Errorf("exit code %d, want 2 (a usage error)", exitCode(err))
			}
		})
	}
}

func TestPprofListenerServesProfiles(t *testing.T) {
	var out strings.Builder
	closeFn, err := startPprof("127.0.0.1:0", &out, slog.New(slog.DiscardHandler))
	if err != nil {
		t.Fatal(err)
	}
	defer closeFn()
	base := strings.TrimSpace(strings.TrimPrefix(out.String(), "curvekeeper: pprof on "))
	if !strings.HasPrefix(base, "http://127.0.0.1:") {
		t.Fatalf("startPprof printed %q, want its address", out.String())
	}
	resp, err := http.Get(base + "/debug/pprof/cmdline")
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	body, _ := io.ReadAll(resp.Body)
	if resp.StatusCode != http.StatusOK || len(body) == 0 {
		t.Errorf("GET /debug/pprof/cmdline = %d %q, want 200 with the command line", resp.StatusCode, body)
	}
}

func TestPprofListenOffByDefault(t *testing.T) {
	cfg, _, err := parseConfig("serve", nil, func(string) string { return "" }, io.Discard)
	if err != nil {
		t.Fatal(err)
	}
	if cfg.PprofListen != "" {
		t.Errorf("PprofListen = %q by default, want empty (off)", cfg.PprofListen)
	}
	cfg, _, err = parseConfig("serve", nil, func(k string) string {
		if k == "CURVEKEEPER_PPROF_LISTEN" {
			return "0.0.0.0:6060"
		}
		return ""
	}, io.Discard)
	if err == nil {
		t.Errorf("CURVEKEEPER_PPROF_LISTEN=0.0.0.0:6060 accepted (%+v), want a usage error", cfg.PprofListen)
	}
}
