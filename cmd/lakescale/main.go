// Command lakescale feature-scales numeric columns of partitioned Parquet
// datasets with exact, mergeable statistics. See the README.
package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/signal"
	"syscall"

	"github.com/lakescale/lakescale/jobs"
)

// version is set with -ldflags "-X main.version=..."; when empty the build
// information is used.
var version = ""

// Exit codes, listed in every command's help.
const (
	exitOK          = 0
	exitFailed      = 1
	exitUsage       = 2
	exitInterrupted = 130
)

func main() { os.Exit(run()) }

func run() int {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	err := newApp().RunContext(ctx, os.Args)
	var usage usageError
	switch {
	case err == nil:
		return exitOK
	case ctx.Err() != nil && errors.Is(err, context.Canceled):
		fmt.Fprintln(os.Stderr, "lakescale: interrupted; no manifest was written")
		return exitInterrupted
	case errors.As(err, &usage) || errors.Is(err, jobs.ErrUsage):
		fmt.Fprintf(os.Stderr, "lakescale: %v\nRun 'lakescale help' for usage.\n", err)
		return exitUsage
	default:
		fmt.Fprintf(os.Stderr, "lakescale: %v\n", err)
		return exitFailed
	}
}
