package main

import (
	"context"
	"encoding/json"
	"errors"
	"flag"
	"fmt"
	"io"
	"net"
	"net/http"
	"time"

	"github.com/labstack/echo/v4"
)

const (
	// baselineCommand makes the harness binary serve the bare Echo baseline
	// (it starts itself as a subprocess with this argument).
	baselineCommand    = "serve-baseline"
	baselineLinePrefix = "baseline: listening on "
	serviceLinePrefix  = "curvekeeper: listening on "
	pprofLinePrefix    = "curvekeeper: pprof on "
)

// serveBaseline serves the predict baseline: a bare Echo handler that
// decodes the prediction request into typed structs and answers a small
// JSON object. No middleware, no validation, no database, no computation.
func serveBaseline(ctx context.Context, args []string, stdout io.Writer) error {
	fs := flag.NewFlagSet(baselineCommand, flag.ContinueOnError)
	listen := fs.String("listen", "127.0.0.1:0", "address to listen on")
	if err := fs.Parse(args); err != nil {
		return err
	}
	e := echo.New()
	e.HideBanner, e.HidePort = true, true
	e.POST("/v1/curves/:id/predictions", func(c echo.Context) error {
		var req predictionRequest
		if err := json.NewDecoder(c.Request().Body).Decode(&req); err != nil {
			return c.JSON(http.StatusBadRequest, map[string]string{"error": "bad json"})
		}
		return c.JSON(http.StatusOK, map[string]any{"curve_id": c.Param("id"), "results": len(req.Samples)})
	})
	ln, err := net.Listen("tcp", *listen)
	if err != nil {
		return err
	}
	hs := &http.Server{Handler: e, ReadHeaderTimeout: 10 * time.Second}
	errc := make(chan error, 1)
	go func() { errc <- hs.Serve(ln) }()
	fmt.Fprintf(stdout, "%shttp://%s\n", baselineLinePrefix, ln.Addr())
	select {
	case err := <-errc:
		return err
	case <-ctx.Done():
	}
	sctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	if err := hs.Shutdown(sctx); err != nil && !errors.Is(err, http.ErrServerClosed) {
		return err
	}
	return nil
}
