package main

import (
	"fmt"
	"io"
	"os"
	"runtime/pprof"

	"github.com/spf13/cobra"
	"golang.org/x/term"
)

// Env is what every command gets from its process: the standard streams.
// No command touches os.Stdout directly, so tests can run commands in-process.
type Env struct {
	Stdin          io.Reader
	Stdout, Stderr io.Writer
	Quiet          bool
}

// Logf writes a log line to stderr unless --quiet.
func (e *Env) Logf(format string, a ...any) {
	if e.Quiet {
		return
	}
	fmt.Fprintf(e.Stderr, format+"\n", a...)
}

// stderrIsTerminal reports whether stderr is an interactive terminal (for progress bars).
func (e *Env) stderrIsTerminal() bool {
	f, ok := e.Stderr.(*os.File)
	return ok && term.IsTerminal(int(f.Fd()))
}

func newRoot(env *Env) *cobra.Command {
	root := &cobra.Command{
		Use:   "heft",
		Short: "Inverse-probability weights for warehouse tables, streamed",
		Long: `heft fits a propensity model on a sample of a table, then streams every
Parquet or Arrow batch of the full table through it, appending the propensity
and the weight to each row, while mergeable accumulators compute weighted
effect estimates, standard errors and covariate balance in constant memory.

Estimates are causal only under no unmeasured confounding, positivity and
correctly specified models; decisions about people need domain review.`,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.PersistentFlags().BoolVarP(&env.Quiet, "quiet", "q", false, "no progress or log lines on stderr")
	var cpuProfile string
	root.PersistentFlags().StringVar(&cpuProfile, "cpuprofile", "", "write a CPU profile (for developers)")
	_ = root.PersistentFlags().MarkHidden("cpuprofile")
	var profFile *os.File
	root.PersistentPreRunE = func(*cobra.Command, []string) error {
		if cpuProfile == "" {
			return nil
		}
		f, err := os.Create(cpuProfile)
		if err != nil {
			return err
		}
		profFile = f
		return pprof.StartCPUProfile(f)
	}
	root.PersistentPostRun = func(*cobra.Command, []string) {
		if profFile != nil {
			pprof.StopCPUProfile()
			profFile.Close()
		}
	}
	root.SetFlagErrorFunc(func(_ *cobra.Command, err error) error { return usagef(err) })
	root.AddCommand(
		newVersionCmd(env),
		newDemoCmd(env),
		newFitCmd(env),
		newInspectCmd(env),
		newScoreCmd(env),
		newMergeCmd(env),
		newReportCmd(env),
	)
	return root
}
