// Command curvekeeper-bench measures the service against the machine's own
// ceilings: for each scenario it drives the service and a baseline that does
// the bare minimum of the same work, side by side in one run on the same
// machine, and prints one logfmt line with both figures and their ratio.
//
//	go run ./cmd/curvekeeper-bench          # the full run, at most 5 minutes
//	go run ./cmd/curvekeeper-bench -quick   # a smaller run, at most 60 seconds
//	go run ./cmd/curvekeeper-bench -scenarios growth [-growth-readings N]   # 10 million readings against a small database
//
// It builds cmd/curvekeeper, starts it as a subprocess against a fresh
// database (a private PostgreSQL cluster in a temporary folder, or a new
// database on the server DATABASE_URL names) and loads it over loopback with
// its own load generator. See the README section "Reading the benchmark".
package main

import (
	"context"
	"fmt"
	"os"
	"os/signal"
	"syscall"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	if err := run(ctx, os.Args[1:], os.Getenv, os.Stdout, os.Stderr); err != nil {
		fmt.Fprintln(os.Stderr, "curvekeeper-bench:", err)
		stop()
		os.Exit(1)
	}
}
