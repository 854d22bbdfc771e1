package main

import (
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"net/http/pprof"
	"time"
)

// checkPprofListen accepts an empty address (the admin listener is off) or a
// host:port whose host is a loopback address or "localhost": profiles show
// the program's internals and must not be reachable from the network.
func checkPprofListen(addr string) error {
	if addr == "" {
		return nil
	}
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return &usageError{fmt.Sprintf("--pprof-listen %q: want host:port on loopback, such as 127.0.0.1:6060", addr)}
	}
	if host == "localhost" {
		return nil
	}
	if ip := net.ParseIP(host); ip != nil && ip.IsLoopback() {
		return nil
	}
	return &usageError{fmt.Sprintf("--pprof-listen %q: the profiling listener binds to loopback only (127.0.0.1, ::1 or localhost)", addr)}
}

// startPprof serves /debug/pprof/ on its own listener, apart from the API
// (no auth: loopback only), and returns a function that closes it.
func startPprof(addr string, stdout io.Writer, log *slog.Logger) (func(), error) {
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("cannot listen on %s for pprof: %v", addr, errors.Unwrap(err))
	}
	mux := http.NewServeMux()
	mux.HandleFunc("/debug/pprof/", pprof.Index)
	mux.HandleFunc("/debug/pprof/cmdline", pprof.Cmdline)
	mux.HandleFunc("/debug/pprof/profile", pprof.Profile)
	mux.HandleFunc("/debug/pprof/symbol", pprof.Symbol)
	mux.HandleFunc("/debug/pprof/trace", pprof.Trace)
	hs := &http.Server{Handler: mux, ReadHeaderTimeout: 10 * time.Second}
	go func() {
		if err := hs.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
			log.Error("pprof listener", "error", err)
		}
	}()
	fmt.Fprintf(stdout, "curvekeeper: pprof on http://%s\n", ln.Addr())
	log.Info("pprof listening", "listen", ln.Addr().String())
	return func() { _ = hs.Close() }, nil
}
