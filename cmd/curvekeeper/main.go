// Command curvekeeper is the calibration-curve service: it serves the HTTP
// API, runs migrations and loads the demo scenario.
//
//	curvekeeper [serve] [flags]     serve the API (the default)
//	curvekeeper migrate up|down|version [flags]
//	curvekeeper demo [flags]        load the invented demo scenario
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
	tuneGC(os.Getenv)
	if err := run(ctx, os.Args[1:], os.Getenv, os.Stdout, os.Stderr); err != nil {
		fmt.Fprintln(os.Stderr, "curvekeeper:", err)
		stop()
		os.Exit(exitCode(err))
	}
}
