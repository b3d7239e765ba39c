// Command heft adds inverse-probability weights to tables: `heft fit` fits
// and saves a propensity model on a sample, `heft score` streams every batch
// of the full table through it, appending propensities and weights while
// mergeable accumulators compute effect estimates and balance diagnostics.
package main

import (
	"context"
	"fmt"
	"io"
	"os"
	"os/signal"
	"syscall"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	code := run(ctx, os.Args[1:], os.Stdin, os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// run executes one heft command and returns its exit code. Errors are
// written once, here, as a single line on stderr.
func run(ctx context.Context, args []string, stdin io.Reader, stdout, stderr io.Writer) (code int) {
	defer func() {
		if r := recover(); r != nil {
			fmt.Fprintf(stderr, "heft: internal error: %v (please report this)\n", r)
			code = ExitInternal
		}
	}()
	useFastSnappy()
	env := &Env{Stdin: stdin, Stdout: stdout, Stderr: stderr}
	root := newRoot(env)
	root.SetArgs(args)
	root.SetIn(stdin)
	root.SetOut(stdout)
	root.SetErr(stderr)
	err := root.ExecuteContext(ctx)
	if err == nil {
		return ExitOK
	}
	code = exitCode(ctx, err)
	if code == ExitInterrupted && ctx.Err() != nil {
		// "context canceled" says nothing to the person who pressed Ctrl-C.
		fmt.Fprintf(stderr, "heft: %v: stopped; incomplete outputs were removed\n", context.Cause(ctx))
		return code
	}
	fmt.Fprintf(stderr, "heft: %v\n", err)
	if code == ExitUsage {
		fmt.Fprintln(stderr, "Run 'heft --help' for usage.")
	}
	return code
}
